"""memsim.tech."""
