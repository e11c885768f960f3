"""Command line: parse, call experiment/, print, exit codes.

User mistakes print one line on stderr and exit with code 2; bugs keep their
traceback.
"""
from __future__ import annotations

import sys
from pathlib import Path

import click

from memsim.errors import UserError

SET_HELP = "Override a config field: section.key=value (repeatable)."


def _fmt(v) -> str:
    if isinstance(v, float):
        if v != v:
            return "-"
        if abs(v) >= 1e6 or (abs(v) < 1e-3 and v != 0):
            return f"{v:.4g}"
        return f"{v:,.3f}"
    return str(v)


def print_summary(summary: dict, title: str = "") -> None:
    if title:
        click.echo(title)
    width = max(len(k) for k in summary)
    for k, v in summary.items():
        click.echo(f"  {k:<{width}}  {_fmt(v)}")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="memsim")
def main() -> None:
    """memsim: phase-change memory behind a controller, as a discrete-event model."""


@main.command()
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--out", type=click.Path(file_okay=False), help="Results folder (default results/<name>).")
def run(config: str, sets: tuple[str, ...], out: str | None) -> None:
    """Run one CONFIG (TOML) and print its summary."""
    from memsim.config import parse_assignment
    from memsim.experiment.run import simulate

    overrides = dict(parse_assignment(s) for s in sets)
    result = simulate(config, overrides=overrides)
    folder = Path(out) if out else Path(result.config["run"]["out_dir"]) / result.config["run"]["name"]
    result.save(folder)
    print_summary(result.summary, f"run {result.config['run']['name']} "
                                  f"(seed {result.seed}, {result.wall_s:.2f} s wall)")
    click.echo(f"results: {folder}")


@main.command(name="list")
def list_parts() -> None:
    """List write schemes, wear levelers and technology presets."""
    from memsim.config import preset_names
    from memsim.policy.write import scheme_names

    click.echo("write schemes: " + ", ".join(scheme_names()))
    click.echo("presets:       " + ", ".join(preset_names()))


def entry() -> None:
    """Console-script entry point: one-line errors, exit code 2."""
    try:
        main.main(standalone_mode=False)
    except UserError as exc:
        click.echo(f"error: {exc.one_line()}", err=True)
        sys.exit(2)
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(130)
    except click.ClickException as exc:
        ctx = getattr(exc, "ctx", None)
        cmd = f"memsim {ctx.command_path.split(' ', 1)[1]}" if ctx and " " in ctx.command_path else "memsim"
        click.echo(f"error: {cmd}: {' '.join(exc.format_message().split())}", err=True)
        sys.exit(exc.exit_code)


if __name__ == "__main__":
    entry()
