"""``memsim lifetime``: wear engine run, lifetime in years, wear figure."""
from __future__ import annotations

from pathlib import Path

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


@click.command(name="lifetime")
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--write-rate", "write_rate", type=float, metavar="GBPS",
              help="User write rate, GB/s (default lifetime.write_rate_gbps, or a short timing run).")
@click.option("--method", type=click.Choice(["both", "extrapolated", "run_to_failure"]),
              help="Lifetime method (default lifetime.method).")
@click.option("--out", type=click.Path(file_okay=False),
              help="Results folder (default <run.out_dir>/<run.name>/lifetime).")
@click.option("--replace", is_flag=True, help=REPLACE_HELP)
@click.option("--full", is_flag=True, help=FULL_HELP)
def lifetime_cmd(config: str, sets: tuple[str, ...], write_rate: float | None, method: str | None,
                 out: str | None, replace: bool, full: bool) -> None:
    """Estimate how long the memory of CONFIG (TOML) lasts; print the summary."""
    from memsim.experiment.lifetime import lifetime
    from memsim.experiment.progress import shown
    from memsim.report.wear_plot import save_wear_figure

    with naming(config, sets), shown():
        cfg, claim = prepare_output(config, sets, out, replace, "lifetime", write_rate_gbps=write_rate,
                                    method=method)
        result = lifetime(cfg, write_rate_gbps=write_rate, method=method)

    def save(folder: Path) -> None:
        result.save(folder)
        save_wear_figure(result, folder)

    saved, err = save_results(claim, save, cfg.run.name)
    run = result.config["run"]
    print_summary(result.summary, f"lifetime {run['name']} (seed {result.seed}, {result.wall_s:.2f} s wall)",
                  result.config, full)
    report_saved(saved, err)


COMMANDS = [lifetime_cmd]
