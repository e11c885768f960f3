"""``memsim compare``: one config under several settings, side by side."""
from __future__ import annotations

import math
import signal
import time
from pathlib import Path

import click
import pandas as pd

from memsim.cli.common import REPLACE_HELP, SET_HELP, fmt, overrides

VARY_HELP = ("One setting: KEY=VALUE[,KEY=VALUE...], optionally 'LABEL: ...' before it; or KEY=V1,V2,... "
             "for one setting per value (repeatable; the settings of every --vary are compared).")
WORKLOAD_HELP = ("A workload: a run config FILE applied over CONFIG ('LABEL:FILE' names it), or overrides "
                 "written like --vary (repeatable; default: the workload of CONFIG).")


def _terminate(signum, frame):
    # SIGTERM ends the comparison like Ctrl-C: the pool shuts down, finished runs stay cached.
    raise KeyboardInterrupt


@click.command(name="compare")
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--vary", "vary", multiple=True, required=True, metavar="SETTING", help=VARY_HELP)
@click.option("--workload", "workloads", multiple=True, metavar="FILE|SETTING", help=WORKLOAD_HELP)
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP + " Applies to every run.")
@click.option("--seeds", type=int, default=1, show_default=True,
              help="Seeds per run; the first is the config's run.seed, every setting gets the same seeds.")
@click.option("--metric", "metrics", multiple=True, metavar="NAME",
              help="Summary key to show (repeatable; default: the usual ones the runs report).")
@click.option("--workers", type=int, default=None,
              help="Local processes (default: one per core; 1 = run in this process).")
@click.option("--out", type=click.Path(file_okay=False),
              help="Results folder (default results/<run.name>_compare).")
@click.option("--replace", is_flag=True, help=REPLACE_HELP)
@click.option("--quiet", is_flag=True, help="No progress bar.")
def compare_cmd(config: str, vary: tuple[str, ...], workloads: tuple[str, ...], sets: tuple[str, ...],
                seeds: int, metrics: tuple[str, ...], workers: int | None, out: str | None,
                replace: bool, quiet: bool) -> None:
    """Run CONFIG's workload under each --vary setting and print them side by side.

    Writes compare.csv (one row per workload and setting: mean over seeds and
    95% interval half-width of each metric) and compare.png (grouped bars).
    """
    from memsim.errors import ConfigError
    from memsim.experiment.compare import make_compare_spec, run_compare
    from memsim.experiment.outputs import claim, fingerprint
    from memsim.metrics.files import SaveFailed, check_folder, save_or_rescue
    from memsim.report.compare_plot import save_compare_figure

    if not Path(config).is_file():
        raise ConfigError(config, "no such file", "a path to a run config (TOML)")
    items = list(vary)
    spec = make_compare_spec(config, items, seeds=seeds, fixed=overrides(sets),
                             workloads=list(workloads) if workloads else None,
                             metrics=list(metrics) or None, source="--vary", fixed_origin="--set")
    folder = Path(out) if out else Path("results") / spec.name
    # What the comparison is, wherever it is run from: the config by its absolute path.
    described = {**{k: v for k, v in spec.to_json().items() if k != "name"}, "base": str(Path(config).resolve())}
    where = "--out" if out else f"{config}: run.name"
    owned = claim(folder, "compare", fingerprint(comparison=described), where=where, replace=replace,
                  source=config, hint="--out FOLDER for a folder of its own")
    check_folder(owned.folder / "cache", where)
    t0 = time.perf_counter()
    old = signal.signal(signal.SIGTERM, _terminate)
    try:
        res = run_compare(spec, workers=workers, out=folder, progress=False if quiet else None,
                          where="--metric")
    finally:
        signal.signal(signal.SIGTERM, old)
    if res.folder is not None and not res.save_error:
        owned.mark(res.folder)
    error = res.save_error
    png = None
    if res.folder is not None:
        where, err = save_or_rescue(lambda f: save_compare_figure(res.table, f), res.folder, spec.name)
        png = None if where is None else where / "compare.png"   # the stem save_compare_figure uses
        error = "; ".join(e for e in (error, err) if e)
    n_set, n_wl, n_seed = len(spec.settings), len(spec.workloads), len(spec.seeds)
    click.echo(f"compare {spec.name}: {n_set} settings x {n_wl} workload{'s' if n_wl > 1 else ''} x "
               f"{n_seed} seed{'s' if n_seed > 1 else ''} = {len(res.runs)} runs: "
               + (f"{res.ran} ran ({res.executor}), " if res.ran else "")
               + f"{res.reused} from cache, {time.perf_counter() - t0:.1f} s")
    for g in spec.settings:
        if g.labelled:
            click.echo(f"  {g.label}: {g.changes() or 'the config as it is'}")
    for wl in spec.workloads:
        click.echo("")
        for line in side_by_side(res.table, wl.label, res.metrics, spec.level):
            click.echo(line)
    if res.folder is not None:
        click.echo(f"\nresults: {res.folder}  (compare.csv" + (f", {png.name}" if png else "") + ")")
    if error:
        raise SaveFailed(error)


def side_by_side(table: pd.DataFrame, workload: str, metrics: list[str], level: float = 0.95) -> list[str]:
    """Lines of one workload's block: metrics (with units) as rows, settings as columns."""
    from memsim.report.figures import axis_label

    part = table[table["workload"] == workload]
    seeds = int(part["seeds"].iloc[0]) if len(part) else 0
    note = f"mean ± {level:.0%} CI half-width over {seeds} seeds" if seeds > 1 else "one seed"
    rows = [["", *map(str, part["setting"])]]
    for m in metrics:
        cells = [axis_label(m)]
        for mean, half in zip(part[m], part[m + "_ci_half"]):
            cell = fmt(float(mean))
            if math.isfinite(float(mean)) and math.isfinite(float(half)):
                cell += f" ± {fmt(float(half))}"
            cells.append(cell)
        rows.append(cells)
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = [f"workload {workload} ({note})"]
    for r in rows:
        lines.append("  " + "  ".join([r[0].ljust(widths[0]), *(c.rjust(w) for c, w in zip(r[1:], widths[1:]))]))
    return lines


COMMANDS = [compare_cmd]
