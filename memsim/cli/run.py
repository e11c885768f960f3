"""``memsim run`` and ``memsim list``."""
from __future__ import annotations

import click

from memsim.cli.common import (
    FULL_HELP,
    REPLACE_HELP,
    SET_HELP,
    naming,
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
@click.option("--full", is_flag=True, help=FULL_HELP)
def run(config: str, sets: tuple[str, ...], out: str | None, replace: bool, full: bool) -> None:
    """Run one CONFIG (TOML) and print its summary."""
    from memsim.experiment.progress import shown
    from memsim.experiment.run import simulate

    with naming(config, sets), shown():
        cfg, claim = prepare_output(config, sets, out, replace, "run")
        result = simulate(cfg)
    saved, err = save_results(claim, result.save, cfg.run.name)
    print_summary(result.summary, f"run {result.config['run']['name']} "
                                  f"(seed {result.seed}, {result.wall_s:.2f} s wall)",
                  result.config, full)
    report_saved(saved, err)


@click.command(name="list")
def list_parts() -> None:
    """List write schemes, wear levelers, refresh policies, cleaner victim policies and presets."""
    from memsim.experiment.tools import available

    parts = available()
    labels = {"write_schemes": "write schemes", "wear_levelers": "wear levelers",
              "refresh_policies": "refresh policies", "cleaner_victims": "cleaner victims",
              "presets": "presets"}
    width = max(len(v) for v in labels.values()) + 1
    for key, names in parts.items():
        click.echo(f"{labels.get(key, key) + ':':<{width}} " + ", ".join(names))


COMMANDS = [run, list_parts]
