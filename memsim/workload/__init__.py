"""memsim.workload."""
