"""``memsim lifetime``: wear engine run, lifetime in years, wear figure."""
from __future__ import annotations

from pathlib import Path

import click

from memsim.cli.common import SET_HELP, overrides, print_summary


@click.command(name="lifetime")
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--write-rate", "write_rate", type=float, metavar="GBPS",
              help="User write rate, GB/s (default lifetime.write_rate_gbps, or a short timing run).")
@click.option("--method", type=click.Choice(["both", "extrapolated", "run_to_failure"]),
              help="Lifetime method (default lifetime.method).")
@click.option("--out", type=click.Path(file_okay=False), help="Results folder (default results/<name>).")
def lifetime_cmd(config: str, sets: tuple[str, ...], write_rate: float | None, method: str | None,
                 out: str | None) -> None:
    """Estimate how long the memory of CONFIG (TOML) lasts; print the summary."""
    from memsim.experiment.lifetime import lifetime
    from memsim.experiment.progress import shown
    from memsim.report.wear_plot import save_wear_figure

    with shown():
        result = lifetime(config, write_rate_gbps=write_rate, method=method, overrides=overrides(sets))
    run = result.config["run"]
    folder = Path(out) if out else Path(run["out_dir"]) / run["name"]
    result.save(folder)
    save_wear_figure(result, folder)
    print_summary(result.summary, f"lifetime {run['name']} (seed {result.seed}, {result.wall_s:.2f} s wall)")
    click.echo(f"results: {folder}")


COMMANDS = [lifetime_cmd]
