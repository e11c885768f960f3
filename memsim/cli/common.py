"""Helpers shared by the command modules: printing and --set parsing."""
from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import click

SET_HELP = "Override a config field: section.key=value (repeatable)."


def overrides(sets: tuple[str, ...]) -> dict:
    from memsim.config import parse_assignment

    return dict(parse_assignment(s) for s in sets)


@contextmanager
def naming(config: str, sets: tuple[str, ...]) -> Iterator[None]:
    """Put CONFIG (or the --set) in front of a config error raised with a bare key while running."""
    from memsim.config.load import locate, parse_assignment
    from memsim.errors import ConfigError

    try:
        yield
    except ConfigError as exc:
        keys = {parse_assignment(s)[0] for s in sets}
        raise locate(exc, config, keys) from None


def fmt(v) -> str:
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, float):
        if v != v:
            return "-"
        if v in (float("inf"), float("-inf")):
            return str(v)
        if abs(v) >= 1e6 or (abs(v) < 1e-3 and v != 0):
            return f"{v:.4g}"
        return f"{v:,.3f}"
    return str(v)


def print_summary(summary: dict, title: str = "") -> None:
    if title:
        click.echo(title)
    width = max(len(k) for k in summary)
    for k, v in summary.items():
        click.echo(f"  {k:<{width}}  {fmt(v)}")
