"""``memsim cell``: SET/RESET pulses of a cell from its geometry and material."""
from __future__ import annotations

from pathlib import Path

import click

from memsim.cli.common import print_summary


@click.command(name="cell")
@click.argument("spec", type=click.Path(dir_okay=False))
@click.option("--out", type=click.Path(file_okay=False), help="Results folder (default results/<name>_cell).")
def cell_cmd(spec: str, out: str | None) -> None:
    """Derive the pulses of the cell in SPEC (TOML) and write a preset for `memsim run`."""
    from memsim.experiment.cell import cell_model
    from memsim.report.cell_plot import save_cell

    result = cell_model(spec)
    s = dict(result.summary)
    caution = s.pop("caution")
    folder = Path(out) if out else Path("results") / f"{s['cell']}_cell"
    paths = save_cell(result, folder)
    print_summary(s, f"cell {s['cell']}")
    for flag, what in (("reset_within_current_limit", "RESET current exceeds the access device limit"),
                       ("set_within_current_limit", "SET current exceeds the access device limit"),
                       ("quench_fast_enough", "quench too slow: the cell recrystallizes on cooling")):
        if not s[flag]:
            click.echo(f"warning: {what}")
    click.echo(f"caution: {caution}")
    click.echo(f"preset: {paths[0]}  (memsim run {paths[0]})")
    click.echo(f"results: {folder} (figures {paths[1].name}, {paths[2].name})")


COMMANDS = [cell_cmd]
