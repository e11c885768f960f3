"""Helpers shared by the command modules: printing and --set parsing."""
from __future__ import annotations

import click

SET_HELP = "Override a config field: section.key=value (repeatable)."


def overrides(sets: tuple[str, ...]) -> dict:
    from memsim.config import parse_assignment

    return dict(parse_assignment(s) for s in sets)


def fmt(v) -> str:
    """A value as printed in tables: four significant digits, ``-`` for null."""
    from memsim.report.summary_text import fmt_value

    return fmt_value(v)


FULL_HELP = "Print every summary key, also those of features that are off."


def print_summary(summary: dict, title: str = "", config: dict | None = None, full: bool = False) -> None:
    """Print a summary in sections (see :mod:`memsim.report.summary_text`)."""
    from memsim.report.summary_text import summary_lines

    if title:
        click.echo(title)
    for line in summary_lines(summary, config, full):
        click.echo(line)
