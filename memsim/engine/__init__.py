"""memsim.engine."""
