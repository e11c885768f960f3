"""``memsim run`` and ``memsim list``."""
from __future__ import annotations

from pathlib import Path

import click

from memsim.cli.common import SET_HELP, overrides, print_summary


@click.command()
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--out", type=click.Path(file_okay=False), help="Results folder (default results/<name>).")
def run(config: str, sets: tuple[str, ...], out: str | None) -> None:
    """Run one CONFIG (TOML) and print its summary."""
    from memsim.experiment.progress import shown
    from memsim.experiment.run import simulate

    with shown():
        result = simulate(config, overrides=overrides(sets))
    folder = Path(out) if out else Path(result.config["run"]["out_dir"]) / result.config["run"]["name"]
    result.save(folder)
    print_summary(result.summary, f"run {result.config['run']['name']} "
                                  f"(seed {result.seed}, {result.wall_s:.2f} s wall)")
    click.echo(f"results: {folder}")


@click.command(name="list")
def list_parts() -> None:
    """List write schemes, wear levelers, refresh policies and technology presets."""
    from memsim.config import preset_names
    from memsim.policy.leveling import leveler_names
    from memsim.policy.refresh import POLICIES
    from memsim.policy.write import scheme_names

    click.echo("write schemes:    " + ", ".join(scheme_names()))
    click.echo("wear levelers:    " + ", ".join(leveler_names()))
    click.echo("refresh policies: " + ", ".join(POLICIES))
    click.echo("presets:          " + ", ".join(preset_names()))


COMMANDS = [run, list_parts]
