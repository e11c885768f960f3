"""Helpers shared by the command modules: printing, --set parsing, results folders."""
from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import click

SET_HELP = "Override a config field: section.key=value (repeatable)."
REPLACE_HELP = ("Overwrite the results folder even if it holds results of other settings "
                "(re-running the same settings replaces them without it).")


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


def prepare_output(config: str, sets: tuple[str, ...], out: str | None, replace: bool, command: str,
                   **extra: Any) -> tuple[Any, Any]:
    """Resolve CONFIG with --set and claim the command's results folder, before any work.

    Returns the RunConfig and the :class:`~memsim.experiment.outputs.Claim`
    (default folder ``<run.out_dir>/<run.name>/<command>``).
    """
    from memsim.experiment.outputs import claim, default_folder, fingerprint
    from memsim.experiment.run import resolve

    cfg = resolve(config, overrides(sets))
    doc = cfg.model_dump(mode="json")
    folder = Path(out) if out else default_folder(doc, command)
    where = "--out" if out else f"{config}: run.out_dir/run.name"
    return cfg, claim(folder, command, fingerprint(doc, **extra), where=where, replace=replace,
                      source=str(config))


def save_results(claim: Any, save: Callable[[Path], Any], name: str) -> tuple[Path | None, str | None]:
    """Save through ``save(folder)`` into the claimed folder, or a rescue folder if that fails.

    Returns the folder that holds the results (None if none could be
    written) and the message to report after the printed summary.
    """
    from memsim.metrics.files import save_or_rescue

    def write(folder: Path) -> None:
        claim.mark(folder)
        save(folder)

    folder, err = save_or_rescue(write, claim.folder, name)
    return folder, err


def report_saved(folder: Path | None, err: str | None, extra: str = "") -> None:
    """The "results:" line, then the save error (exit 2) if the asked folder failed."""
    from memsim.metrics.files import SaveFailed

    if folder is not None:
        click.echo(f"results: {folder}{extra}")
    if err:
        raise SaveFailed(err)
