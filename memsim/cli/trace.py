"""``memsim trace make`` (a trace from the synthetic generator) and ``memsim trace info``."""
from __future__ import annotations

import math

import click

from memsim.cli.common import SET_HELP, overrides


@click.group(name="trace")
def trace_group() -> None:
    """Make, check and summarize request traces (replay one with workload.pattern = "trace")."""


@trace_group.command(name="make")
@click.argument("spec", type=click.Path(dir_okay=False))
@click.argument("out", type=click.Path(dir_okay=False))
@click.option("--set", "sets", multiple=True, metavar="KEY=VALUE", help=SET_HELP)
@click.option("--with-data", is_flag=True,
              help="Store the content of every write (drawn from the data model). Without it a "
                   "replay draws the content from its own data model.")
def make_cmd(spec: str, out: str, sets: tuple[str, ...], with_data: bool) -> None:
    """Write the request stream that the run config SPEC describes to the trace OUT.

    SPEC's [workload] section (a synthetic pattern) and run.seed decide the
    requests; OUT ends in .csv, .csv.gz or .parquet.  Replaying OUT with the
    same seed and memory settings gives the same run as SPEC itself.
    """
    from memsim.experiment.tools import make_trace

    made = make_trace(spec, out, with_data=with_data, overrides=overrides(sets))
    n, counts = made["requests"], [made["reads"], made["writes"]]
    click.echo(f"wrote {n:,} requests to {out}: {counts[0]:,} reads, {counts[1]:,} writes, "
               + ("write content stored" if with_data else "no write content"))
    if made["closed_loop"]:
        if made["streams"]:
            click.echo('arrival "closed": time_ns is the streams\' merge order only; replay with '
                       'workload.arrival = "closed"')
        else:
            click.echo('arrival "closed": every time_ns is 0; replay with workload.arrival = "closed"')


def _pct(x: float) -> str:
    return "-" if math.isnan(x) else f"{100 * x:5.1f} %"


def _print_info(file: str, info: dict) -> None:
    kind = {"text": "text", "gzip": "gzip text", "parquet": "Parquet"}[info["kind"]]
    content = "with write content" if info["has_data"] else "no write content"
    click.echo(f"trace {file} ({kind}; columns {','.join(info['columns'])}; {content})")
    hist = info["reuse_histogram"]
    n = info["requests"]
    rows = [("rows", f"{info['rows']:,}", "trace rows; a row of size_lines n asks for n lines"),
            ("line requests", f"{n:,}", "")]
    for op in ("reads", "writes", "hints"):
        rows.append((op, f"{info[op]:,}", f"{_pct(info[f'{op[:-1]}_fraction'])} of line requests"))
    rows.append(("footprint", f"{info['footprint_lines']:,} lines",
                 f"{info['footprint_bytes']:,} bytes at {info['line_bytes']} B/line"))
    if n:
        rows.append(("time", f"{info['first_time_ns']:,.1f} .. {info['last_time_ns']:,.1f} ns",
                     f"span {info['span_ns']:,.1f} ns"))
        rate = info["request_rate_per_s"]
        rows.append(("line request rate", "-" if math.isnan(rate) else f"{rate / 1e6:,.3f} M/s", ""))
    if info["skip_bad"]:
        rows.append(("bad lines skipped", f"{info['bad_lines']:,}", ""))
    width = max(len(r[0]) for r in rows)
    vwidth = max(len(r[1]) for r in rows)
    for key, value, extra in rows:
        click.echo(f"  {key:<{width}}  {value:>{vwidth}}  {extra}".rstrip())
    for line in info["bad_examples"]:
        click.echo(f"    {line}")
    if info["bad_lines"] > len(info["bad_examples"]):
        click.echo(f"    ... {info['bad_lines'] - len(info['bad_examples']):,} more")
    reuses = int(hist["accesses"].sum())
    scope = (f"first {info['reuse_window_accesses']:,} reads and writes" if info["reuse_sampled"]
             else "reads and writes")
    click.echo(f"reuse distance (distinct other lines since the last access to the line; {scope}; "
               f"{info['reuse_cold_accesses']:,} first accesses left out)")
    if not reuses:
        click.echo("  no line is accessed twice")
        return
    click.echo(f"  {'distance':>17}  {'accesses':>12}  {'share':>7}")
    for lo, hi, count, frac in hist[["distance_lo", "distance_hi", "accesses", "fraction"]].itertuples(
            index=False):
        span = f"{lo:,}" if lo == hi else f"{lo:,}-{hi:,}"
        click.echo(f"  {span:>17}  {count:>12,}  {_pct(frac):>7}")
    click.echo(f"  median {info['reuse_distance_median']:,.0f}")


@trace_group.command(name="info")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--skip-bad", is_flag=True, help="Skip malformed lines and count them instead of stopping.")
@click.option("--line-bytes", type=click.IntRange(min=1), default=64, show_default=True,
              help="Bytes per line (the length of write content).")
@click.option("--footprint", type=click.IntRange(min=1), default=None,
              help="Also check that every line index is below this.")
def info_cmd(file: str, skip_bad: bool, line_bytes: int, footprint: int | None) -> None:
    """Check the trace FILE and summarize it: mix, footprint, rate, reuse distances."""
    from memsim.experiment.tools import trace_summary

    info = trace_summary(file, skip_bad=skip_bad, line_bytes=line_bytes, footprint=footprint)
    _print_info(file, info)


COMMANDS = [trace_group]
