"""``memsim sweep`` (run a sweep file) and ``memsim plot`` (figures and report of its results)."""
from __future__ import annotations

import math
import signal
import time
from pathlib import Path

import click

from memsim.cli.common import fmt
from memsim.errors import ConfigError

MAX_PRINTED_POINTS = 30
PRINTED_METRICS = 3


def _terminate(signum, frame):
    # SIGTERM ends the sweep like Ctrl-C: the pool shuts down, cached runs stay.
    raise KeyboardInterrupt


@click.command(name="sweep")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--workers", type=int, default=None,
              help="Local processes (default: one per core; 1 = run in this process; "
                   "ignored with --scheduler).")
@click.option("--scheduler", metavar="ADDRESS",
              help="Run on the Dask cluster whose scheduler listens at ADDRESS (tcp://HOST:PORT).")
@click.option("--out", type=click.Path(file_okay=False), help="Results folder (default results/<sweep name>).")
@click.option("--replace", is_flag=True,
              help="Use the results folder even if another sweep file's results are in it.")
@click.option("--quiet", is_flag=True, help="No progress bar.")
def sweep_cmd(file: str, workers: int | None, scheduler: str | None, out: str | None, replace: bool,
              quiet: bool) -> None:
    """Run every point x seed of the sweep FILE (TOML); finished runs are cached and reused.

    The folder belongs to the sweep file: running the same file again (its
    grid grown, say) reuses the cached runs; another file whose results would
    go to the same folder is refused unless --replace.
    """
    from memsim.experiment.outputs import claim, fingerprint
    from memsim.experiment.sweep import load_sweep, run_sweep
    from memsim.metrics.files import SaveFailed, check_folder

    if not Path(file).is_file():
        raise ConfigError(file, "no such file", "a path to a sweep file (TOML)")
    spec = load_sweep(file)
    folder = Path(out) if out else Path("results") / spec.name
    source = str(Path(file).resolve())
    where = "--out" if out else f"{file}: sweep.name"
    owned = claim(folder, "sweep", fingerprint(sweep_file=source), where=where, replace=replace, source=file,
                  hint="set sweep.name (or --out) for a folder of its own")
    check_folder(owned.folder / "cache", where)
    t0 = time.perf_counter()
    old = signal.signal(signal.SIGTERM, _terminate)
    try:
        res = run_sweep(spec, workers=workers, scheduler=scheduler, out=folder,
                        progress=False if quiet else None)
    finally:
        signal.signal(signal.SIGTERM, old)
    if res.folder is not None and not res.save_error:
        owned.mark(res.folder)
    points = res.runs["point"].nunique()
    click.echo(f"sweep {spec.name}: {len(res.runs)} runs ({points} points x {len(spec.seeds)} seeds) "
               f"on {res.executor}: {res.ran} ran, {res.reused} from cache, {res.failed} failed, "
               f"{time.perf_counter() - t0:.1f} s")
    _print_means(res, spec.varied)
    if res.folder is not None:
        click.echo(f"results: {res.folder}  (runs.csv, point_stats.csv; figures: memsim plot {res.folder})")
    if res.save_error:
        raise SaveFailed(res.save_error)
    if res.failed:
        first = res.runs.loc[res.runs["error"] != "", "error"].iloc[0]
        click.echo(f"error: {res.failed} of {len(res.runs)} runs failed; first: {first}", err=True)
        raise SystemExit(1)


def _print_means(res, varied: list[str]) -> None:
    """Mean +/- interval half-width of the first few metrics, one line per point."""
    st = res.stats
    metrics = list(dict.fromkeys(st["metric"]))[:PRINTED_METRICS]
    if not metrics or st["point"].nunique() > MAX_PRINTED_POINTS:
        return
    rows = [[*varied, *metrics]]
    for _, g in st.groupby(["point", *varied], sort=False):
        cells = [str(g[k].iloc[0]) for k in varied]
        for m in metrics:
            r = g[g["metric"] == m]
            mean, half = r["mean"].iloc[0], r["ci_half"].iloc[0]
            cells.append(fmt(float(mean)) + (f" ± {fmt(float(half))}" if math.isfinite(half) else ""))
        rows.append(cells)
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for r in rows:
        click.echo("  " + "  ".join(c.ljust(w) for c, w in zip(r, widths)))


@click.command(name="plot")
@click.argument("results_dir", type=click.Path(file_okay=False))
@click.option("--metric", "metrics", multiple=True, metavar="NAME",
              help="Metric to draw (repeatable; default: the kept metrics, a few if many).")
def plot_cmd(results_dir: str, metrics: tuple[str, ...]) -> None:
    """Draw the standard figures of a sweep's RESULTS_DIR and write its report.md."""
    from memsim.report.page import plot_sweep

    out = plot_sweep(results_dir, metrics or None)
    figures, page = out["figures"], out["report"]
    for p in figures:
        click.echo(f"figure: {p} (+ .svg)")
    click.echo(f"report: {page}")


COMMANDS = [sweep_cmd, plot_cmd]
