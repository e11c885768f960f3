"""Cache of finished runs, keyed by a hash of the fully resolved config.

One small JSON file per finished run (one point of a sweep with one seed),
written atomically as soon as the run finishes.  A sweep that was killed
finds the finished runs here and redoes only the others; a sweep whose grid
grew finds the points it shares with the old grid.  Failed runs are not
cached, so they are tried again.  Each entry carries a checksum of its
content (strict JSON, ``null`` for NaN); an entry that does not match,
edited by hand or damaged, is run again.

The key hashes the resolved config (``RunConfig.model_dump()``, keys sorted),
the memsim version, a digest of the model's source code and the content of
every input file the config names (a trace file, say).  So editing a trace,
or the model between two releases, invalidates the runs it would change;
editing figures or the command line does not.  ``run.name`` and ``run.out_dir`` are left out: they
only say where results go and change no number, so renaming the base config
or the results folder keeps the cache valid.
"""
from __future__ import annotations

import copy
import hashlib
import io
import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from memsim import __version__
from memsim.metrics.files import atomic_write_bytes, atomic_write_text, dumps, strict

# Fields that place results but do not change them.
_PLACEMENT = (("run", "name"), ("run", "out_dir"))


def config_key(config: Mapping[str, Any], version: str = __version__) -> str:
    """SHA-256 hex digest of a resolved config (placement fields left out), the version
    and the content of the files it names."""
    doc = copy.deepcopy(dict(config))
    for section, key in _PLACEMENT:
        if isinstance(doc.get(section), dict):
            doc[section].pop(key, None)
    text = json.dumps({"config": doc, "version": version, "code": code_digest(), "files": input_digests(doc)},
                      sort_keys=True, separators=(",", ":"), default=_json_default)
    return hashlib.sha256(text.encode()).hexdigest()


# Code that cannot change a run's numbers: the command line, figures, and the sweep
# machinery itself (editing it must not throw away finished runs).
_NOT_MODEL = ("cli/", "report/", "experiment/sweep.py", "experiment/executors.py", "experiment/cache.py",
              "experiment/compare.py")
_CODE: list[str] = []


def code_digest() -> str:
    """SHA-256 over the model's source files (``memsim/**/*.py`` and presets, less ``_NOT_MODEL``).

    Computed once per process.
    """
    if not _CODE:
        root = Path(__file__).resolve().parents[1]
        h = hashlib.sha256()
        files = sorted(p for p in [*root.rglob("*.py"), *root.rglob("presets/*.toml")]
                       if not p.relative_to(root).as_posix().startswith(_NOT_MODEL)
                       and "__pycache__" not in p.parts)
        for p in files:
            h.update(p.relative_to(root).as_posix().encode() + b"\0" + p.read_bytes() + b"\0")
        _CODE.append(h.hexdigest())
    return _CODE[0]


_DIGESTS: dict[tuple[str, int, int], str] = {}


def input_digests(config: Mapping[str, Any]) -> dict[str, str]:
    """``{dotted key: sha256 of the file}`` for every string value that names an existing file.

    Digests are remembered per (path, size, mtime), so a sweep hashes a large
    trace once, not once per point.
    """
    out = {}
    for key, value in _leaves(config):
        value = str(value) if isinstance(value, Path) else value
        if not isinstance(value, str) or not value or len(value) > 4096:
            continue
        p = Path(value)
        try:
            if not p.is_file():
                continue
            st = p.stat()
        except OSError:
            continue
        memo = (str(p.resolve()), st.st_size, st.st_mtime_ns)
        if memo not in _DIGESTS:
            h = hashlib.sha256()
            with p.open("rb") as fh:
                for block in iter(lambda: fh.read(1 << 20), b""):
                    h.update(block)
            _DIGESTS[memo] = h.hexdigest()
        out[key] = _DIGESTS[memo]
    return out


def _leaves(node: Any, prefix: str = ""):
    if isinstance(node, Mapping):
        for k, v in node.items():
            yield from _leaves(v, f"{prefix}{k}.")
    else:
        yield prefix.rstrip("."), node


def entry_text(key: str, config: Mapping[str, Any], summary: Mapping[str, Any],
               tables: Mapping[str, pd.DataFrame], wall_s: float) -> str:
    """The JSON text of a cache entry for one finished run.

    Tables are stored column-wise (``{"columns": [...], "data": [[...], ...]}``)
    so they read back into the same DataFrame.  The text is strict JSON
    (``null`` for a value that is NaN or infinite) and carries a
    ``checksum`` of everything else in it (:func:`entry_checksum`).
    """
    doc = {
        "key": key,
        "version": __version__,
        "config": dict(config),
        "summary": dict(summary),
        "tables": {name: {"columns": [str(c) for c in t.columns],
                          "data": t.astype(object).values.tolist()} for name, t in tables.items()},
        "wall_s": float(wall_s),
    }
    body = strict(doc)
    body["checksum"] = entry_checksum(body)
    return dumps(body)


def entry_checksum(entry: Mapping[str, Any]) -> str:
    """SHA-256 over an entry's content (every field but ``checksum``), in canonical JSON.

    Floats survive a JSON round trip exactly, so the checksum of an entry
    read back equals the one written unless the file was changed.
    """
    body = {k: v for k, v in entry.items() if k != "checksum"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


def table_from_entry(entry: Mapping[str, Any], name: str) -> pd.DataFrame | None:
    """A table stored in a cache entry, or None when the entry lacks it."""
    t = entry.get("tables", {}).get(name)
    if t is None:
        return None
    return pd.DataFrame(t["data"], columns=t["columns"])


class RunCache:
    """Folder of cache entries, one ``<key>.json`` per finished run.

    Parameters
    ----------
    folder:
        Where the entries live; created on the first write.
    """

    def __init__(self, folder: str | Path) -> None:
        self.folder = Path(folder)
        self.rejected = 0

    def path(self, key: str) -> Path:
        return self.folder / f"{key}.json"

    def get(self, key: str, tables: tuple[str, ...] = ()) -> dict[str, Any] | None:
        """The entry for ``key`` if it exists, is intact and holds every table in ``tables``.

        An unreadable entry (e.g. from a disk that filled up) or one whose
        checksum does not match its content (edited by hand, damaged, or
        written before entries had checksums) counts as missing and is redone;
        such entries are counted in ``rejected``.
        """
        p = self.path(key)
        try:
            entry = json.loads(p.read_text())
        except FileNotFoundError:
            return None
        except (OSError, ValueError):
            self.rejected += 1
            return None
        if (not isinstance(entry, dict) or entry.get("key") != key or "summary" not in entry
                or entry.get("checksum") != _checksum_or_none(entry)):
            self.rejected += 1
            return None
        if any(name not in entry.get("tables", {}) for name in tables):
            return None
        return entry

    def put_text(self, key: str, text: str) -> None:
        """Store an entry given as its JSON text, atomically."""
        atomic_write_text(self.path(key), text)

    def keys(self) -> list[str]:
        if not self.folder.is_dir():
            return []
        return sorted(p.stem for p in self.folder.glob("*.json"))


def write_frame(df: pd.DataFrame, folder: str | Path, stem: str, csv: bool = True) -> list[Path]:
    """Write ``df`` as ``<stem>.parquet`` (and ``<stem>.csv``), each atomically.

    The bytes are produced in memory first, so a failure while encoding leaves
    any older file in place, and a reader never sees a half-written file.
    """
    folder = Path(folder)
    buf = io.BytesIO()
    df.to_parquet(buf, index=False)
    paths = [folder / f"{stem}.parquet"]
    atomic_write_bytes(paths[0], buf.getvalue())
    if csv:
        paths.append(folder / f"{stem}.csv")
        atomic_write_text(paths[1], df.to_csv(index=False))
    return paths


def _checksum_or_none(entry: Mapping[str, Any]) -> str | None:
    try:
        return entry_checksum(entry)
    except (TypeError, ValueError):
        return None


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        return float(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON serializable: {type(obj)}")
