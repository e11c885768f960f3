"""The one exception type for user mistakes.

A :class:`ConfigError` (or any :class:`UserError`) is caught by the CLI and
printed as a single line; the process exits with code 2.  Anything else is a
bug and keeps its traceback.
"""
from __future__ import annotations


class UserError(Exception):
    """A mistake in user input: config, trace, sweep file or command line.

    Parameters
    ----------
    where:
        The file (and line) or dotted key the mistake is in, e.g.
        ``"demo.toml: controller.drain_low"`` or ``"trace.csv:17"``.
    found:
        What was found, as the user wrote it.
    allowed:
        What would have been accepted.
    """

    def __init__(self, where: str, found: str, allowed: str) -> None:
        self.where = where
        self.found = found
        self.allowed = allowed
        super().__init__(where, found, allowed)

    def __str__(self) -> str:
        # args holds the three parts so the error survives pickling (process
        # pools) and re-raising by simpy, which rebuild it from its args.
        return f"{self.where}: found {self.found}; allowed: {self.allowed}"

    def one_line(self) -> str:
        """The message as one line (newlines folded)."""
        return " ".join(str(self).split())


class ConfigError(UserError):
    """A mistake in a run config, sweep file or ``--set`` override."""


class TraceError(UserError):
    """A malformed trace file line or column."""


def require_int(where: str, value: object, lo: int, hi: int | None = None) -> int:
    """``value`` as an int if it is a whole number in ``[lo, hi]``; else a ConfigError at ``where``."""
    ok = (isinstance(value, int) or type(value).__name__.startswith(("int", "uint"))) \
        and not isinstance(value, bool)
    if ok and value >= lo and (hi is None or value <= hi):
        return int(value)
    allowed = f"an integer >= {lo}" if hi is None else f"an integer in [{lo}, {hi}]"
    raise ConfigError(where, repr(value), allowed)
