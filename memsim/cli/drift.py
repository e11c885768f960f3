"""``memsim drift``: error rates against line age and the refresh age a design needs."""
from __future__ import annotations

from pathlib import Path

import click

from memsim.cli.common import SET_HELP, fmt, naming, overrides, print_summary


@click.command()
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--out", type=click.Path(file_okay=False), help="Results folder (default results/<name>).")
def drift(config: str, sets: tuple[str, ...], out: str | None) -> None:
    """Print the error-rate table and refresh age of CONFIG's cells (no workload run)."""
    from memsim.experiment.drift import drift_report, save_drift_figure

    with naming(config, sets):
        result = drift_report(config, overrides=overrides(sets))
    run = result.config["run"]
    folder = Path(out) if out else Path(run["out_dir"]) / run["name"]
    result.save(folder)
    png = save_drift_figure(result, folder)
    t = result.tables["drift_errors"]
    cols = ["age_s", "rber_line", "p_uncorrectable"] + [c for c in t.columns if c.startswith("rber_level_")]
    click.echo("  ".join(f"{c:>14}" for c in cols))
    for _, row in t.iterrows():
        click.echo("  ".join(f"{fmt(float(row[c])):>14}" for c in cols))
    print_summary(result.summary, "\nrefresh need")
    click.echo(f"results: {folder} (figure {png.name})")


COMMANDS = [drift]
