from memsim.cli import entry

entry()
