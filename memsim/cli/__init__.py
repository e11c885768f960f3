"""Command line: parse, call experiment/, print, exit codes.

Each command group lives in its own module of this package and is listed in
``COMMAND_MODULES``; a module exposes ``COMMANDS`` (click commands).  User
mistakes print one line on stderr and exit with code 2; bugs keep their
traceback.
"""
from __future__ import annotations

import importlib
import sys

import click

from memsim.errors import UserError

COMMAND_MODULES = ["memsim.cli.run", "memsim.cli.sweep", "memsim.cli.lifetime", "memsim.cli.trace", "memsim.cli.drift", "memsim.cli.compare",
                   "memsim.cli.cell"]


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="memsim")
def main() -> None:
    """memsim: phase-change memory behind a controller, as a discrete-event model."""


for _name in COMMAND_MODULES:
    for _cmd in importlib.import_module(_name).COMMANDS:
        main.add_command(_cmd)


def entry() -> None:
    """Console-script entry point: one-line errors, exit code 2."""
    try:
        rv = main.main(standalone_mode=False)
    except UserError as exc:
        click.echo(f"error: {exc.one_line()}", err=True)
        sys.exit(2)
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(130)
    except click.ClickException as exc:
        ctx = getattr(exc, "ctx", None)
        path = ctx.command_path.split(" ", 1)[1] if ctx and " " in ctx.command_path else ""
        cmd = f"memsim {path}".strip()
        click.echo(f"error: {cmd}: {' '.join(exc.format_message().split())}", err=True)
        sys.exit(exc.exit_code)
    sys.exit(rv if isinstance(rv, int) else 0)
