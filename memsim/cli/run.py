"""``memsim run`` and ``memsim list``."""
from __future__ import annotations

import click

from memsim.cli.common import (
    REPLACE_HELP,
    SET_HELP,
    prepare_output,
    print_summary,
    report_saved,
    save_results,
)


@click.command()
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--out", type=click.Path(file_okay=False),
              help="Results folder (default <run.out_dir>/<run.name>/run).")
@click.option("--replace", is_flag=True, help=REPLACE_HELP)
def run(config: str, sets: tuple[str, ...], out: str | None, replace: bool) -> None:
    """Run one CONFIG (TOML) and print its summary."""
    from memsim.experiment.run import simulate

    cfg, claim = prepare_output(config, sets, out, replace, "run")
    result = simulate(cfg)
    saved, err = save_results(claim, result.save, cfg.run.name)
    print_summary(result.summary, f"run {result.config['run']['name']} "
                                  f"(seed {result.seed}, {result.wall_s:.2f} s wall)")
    report_saved(saved, err)


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
