"""memsim.experiment."""
