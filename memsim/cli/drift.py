"""``memsim drift``: error rates against line age and the refresh age a design needs."""
from __future__ import annotations

from pathlib import Path

import click

from memsim.cli.common import (
    REPLACE_HELP,
    SET_HELP,
    fmt,
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
              help="Results folder (default <run.out_dir>/<run.name>/drift).")
@click.option("--replace", is_flag=True, help=REPLACE_HELP)
def drift(config: str, sets: tuple[str, ...], out: str | None, replace: bool) -> None:
    """Print the error-rate table and refresh age of CONFIG's cells (no workload run)."""
    from memsim.experiment.drift import drift_report
    from memsim.report.drift_plot import save_drift_figure

    with naming(config, sets):
        cfg, claim = prepare_output(config, sets, out, replace, "drift")
        result = drift_report(cfg)

    def save(folder: Path) -> None:
        result.save(folder)
        save_drift_figure(result, folder)

    saved, err = save_results(claim, save, cfg.run.name)
    t = result.tables["drift_errors"]
    cols = ["age_s", "rber_line", "p_uncorrectable"] + [c for c in t.columns if c.startswith("rber_level_")]
    click.echo("  ".join(f"{c:>14}" for c in cols))
    for _, row in t.iterrows():
        click.echo("  ".join(f"{fmt(float(row[c])):>14}" for c in cols))
    wer = result.tables.get("write_error_rate")
    if wer is not None:
        click.echo("\nwrite error rate of one attempt against pulse width (STT-MRAM)")
        cols = ["pulse_ns", "wer_set_side", "wer_reset_side", "attempts_set_side", "attempts_reset_side"]
        click.echo("  ".join(f"{c:>19}" for c in cols))
        for _, row in wer.iloc[::4].iterrows():
            click.echo("  ".join(f"{fmt(float(row[c])):>19}" for c in cols))
    print_summary(result.summary, "\nrefresh need")
    report_saved(saved, err, " (figure drift_rber.png)")


COMMANDS = [drift]
