"""memsim.policy."""
