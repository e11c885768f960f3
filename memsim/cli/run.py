"""``memsim run`` and ``memsim list``."""
from __future__ import annotations

from pathlib import Path

import click

from memsim.cli.common import FULL_HELP, SET_HELP, overrides, print_summary


@click.command()
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--out", type=click.Path(file_okay=False), help="Results folder (default results/<name>).")
@click.option("--full", is_flag=True, help=FULL_HELP)
def run(config: str, sets: tuple[str, ...], out: str | None, full: bool) -> None:
    """Run one CONFIG (TOML) and print its summary."""
    from memsim.experiment.run import simulate

    result = simulate(config, overrides=overrides(sets))
    folder = Path(out) if out else Path(result.config["run"]["out_dir"]) / result.config["run"]["name"]
    result.save(folder)
    print_summary(result.summary, f"run {result.config['run']['name']} "
                                  f"(seed {result.seed}, {result.wall_s:.2f} s wall)",
                  result.config, full)
    click.echo(f"results: {folder}")


@click.command(name="list")
def list_parts() -> None:
    """List write schemes, wear levelers, refresh policies and technology presets."""
    from memsim.experiment.tools import available

    parts = available()
    labels = {"write_schemes": "write schemes", "wear_levelers": "wear levelers",
              "refresh_policies": "refresh policies", "presets": "presets"}
    width = max(len(v) for v in labels.values()) + 1
    for key, names in parts.items():
        click.echo(f"{labels.get(key, key) + ':':<{width}} " + ", ".join(names))


COMMANDS = [run, list_parts]
