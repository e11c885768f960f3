"""memsim.metrics."""
