"""Writing result files: atomic, readable by colleagues, strict JSON, checked places.

Every result file is written to a temp file in its folder and renamed into
place, so a reader never sees half a file.  ``tempfile.mkstemp`` creates
files 0600; results are meant to be shared, so the file gets the mode an
ordinary ``open()`` would give it under the user's umask (0644 with umask
022).

JSON is written strictly (RFC 8259): a number that is not finite (NaN,
infinity) is written as ``null``.  In memsim's results ``null`` means "no
meaningful value": a latency of an operation that never happened, a lifetime
that the model cannot bound, a refresh age that never comes.
"""
from __future__ import annotations

import json
import math
import os
import tempfile
import threading
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from memsim.errors import UserError

_UMASK: list[int] = []
_UMASK_LOCK = threading.Lock()


def file_mode() -> int:
    """The mode ``open()`` gives a new file: 0666 less the process umask."""
    return 0o666 & ~_umask()


def _umask() -> int:
    try:
        # Linux shows the umask without changing it (no window for other threads).
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("Umask:"):
                return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    with _UMASK_LOCK:
        old = os.umask(0o022)
        os.umask(old)
    return old


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a temp file and an atomic rename (mode per umask)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        os.fchmod(fd, file_mode())
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def atomic_write_text(path: Path, text: str) -> None:
    atomic_write_bytes(path, text.encode())


def strict(obj: Any, default: Callable[[Any], Any] | None = None) -> Any:
    """``obj`` as plain JSON types; non-finite floats become None (JSON ``null``).

    ``default`` converts objects of other types (else TypeError).
    """
    if isinstance(obj, bool) or obj is None or isinstance(obj, (str, int)):
        return obj
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, Mapping):
        return {str(k): strict(v, default) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [strict(v, default) for v in obj]
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        return strict(float(obj))
    if isinstance(obj, np.ndarray):
        return strict(obj.tolist())
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if isinstance(obj, (set, frozenset)):
        return [strict(v, default) for v in sorted(obj, key=repr)]
    if default is not None:
        return strict(default(obj))
    raise TypeError(f"not JSON serializable: {type(obj)}")


def dumps(obj: Any, default: Callable[[Any], Any] | None = None, **kwargs: Any) -> str:
    """Strict JSON text of ``obj`` (see :func:`strict`); never writes NaN or Infinity."""
    return json.dumps(strict(obj, default), allow_nan=False, **kwargs)


def _reject_constant(name: str) -> Any:
    raise ValueError(f"non-standard JSON constant {name}")


def loads_strict(text: str) -> Any:
    """Parse JSON text, refusing ``NaN``, ``Infinity`` and ``-Infinity``."""
    return json.loads(text, parse_constant=_reject_constant)


def check_folder(folder: str | Path, where: str) -> Path:
    """Check before any work that results can be written to ``folder``.

    Every existing part of the path must be a folder, and the deepest
    existing one must be writable (the rest is created when saving).  Raises
    :class:`UserError` naming ``where`` (the key or option that chose the
    folder) and the path.
    """
    folder = Path(folder)
    allowed = "a folder (or a path where one can be created) that this user can write"
    probe = folder
    while not (probe.exists() or probe.is_symlink()) and probe.parent != probe:
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        found = "a file" if probe == folder else f"a file {str(probe)!r} in its path"
        raise UserError(f"{where} {str(folder)!r}", found, allowed)
    if probe.is_symlink() and not probe.exists():
        raise UserError(f"{where} {str(folder)!r}", f"a broken link {str(probe)!r}", allowed)
    if probe.is_dir() and not os.access(probe, os.W_OK | os.X_OK):
        raise UserError(f"{where} {str(folder)!r}", f"folder {str(probe)!r} not writable", allowed)
    return folder


def save_or_rescue(save: Callable[[Path], Any], folder: str | Path, name: str
                   ) -> tuple[Path | None, str | None]:
    """Call ``save(folder)``; if the folder cannot be written, save to a new temp folder instead.

    Results that took long to compute are never lost to a bad output place.
    Returns the folder that holds the results (None if nothing could be
    written) and, when ``folder`` failed, a one-line message saying why and
    where the results went.
    """
    folder = Path(folder)
    try:
        save(folder)
        return folder, None
    except OSError as exc:
        reason = exc.strerror or str(exc)
        bad = f" at {exc.filename!r}" if getattr(exc, "filename", None) else ""
        msg = UserError(str(folder), f"a place that cannot be written ({reason}{bad})",
                        "a writable folder").one_line()
    alt = rescue_folder(name)
    if alt is not None:
        try:
            save(alt)
            return alt, f"{msg}; the results were saved to {alt} instead"
        except OSError:
            pass
    return None, f"{msg}; no results file could be written (the summary above is all there is)"


def rescue_folder(name: str) -> Path | None:
    """A new folder in the temp directory for results that could not go where asked."""
    safe = "".join(c if c.isalnum() or c in "_.-" else "-" for c in name)[:60] or "results"
    try:
        alt = Path(tempfile.mkdtemp(prefix=f"memsim-{safe}-"))
        os.chmod(alt, 0o777 & ~_umask())
        return alt
    except OSError:
        return None


class SaveFailed(UserError):
    """Results could not be written where asked (they may have been saved elsewhere)."""

    def __init__(self, message: str) -> None:
        Exception.__init__(self, message)
        self.where, self.found, self.allowed = "", message, ""

    def __str__(self) -> str:
        return self.found
