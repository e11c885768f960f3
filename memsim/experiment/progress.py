"""Progress bars for long commands: shown on a terminal only, after a delay.

The command line turns them on (:func:`shown`) for ``memsim run`` and
``memsim lifetime``; library calls and output to files or pipes get none.
"""
from __future__ import annotations

import sys
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from typing import TextIO, TypeVar

T = TypeVar("T")

DELAY_S = 3.0        # work shorter than this shows no bar
_stream: TextIO | None = None       # where bars go while shown (None: no bars)


@contextmanager
def shown(stream: TextIO | None = None, force: bool = False) -> Iterator[None]:
    """Show progress bars inside this block if ``stream`` (stderr) is a terminal."""
    global _stream
    stream = stream if stream is not None else sys.stderr
    old = _stream
    _stream = stream if (force or (hasattr(stream, "isatty") and stream.isatty())) else None
    try:
        yield
    finally:
        _stream = old


def track(items: Iterable[T], total: int | None, unit: str, desc: str, delay_s: float = DELAY_S) -> Iterator[T]:
    """Yield ``items`` and advance a bar by ``len(item)`` for each (when shown)."""
    if _stream is None:
        yield from items
        return
    from tqdm import tqdm

    with tqdm(total=total, unit=unit, desc=desc, delay=delay_s, leave=False, unit_scale=True,
              file=_stream, dynamic_ncols=True) as bar:
        for item in items:
            yield item
            bar.update(len(item))
