"""memsim.report."""
