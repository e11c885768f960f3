"""Where a command's results go, and who owns a results folder.

Each command writes its own folder: ``<run.out_dir>/<run.name>/run``,
``.../drift`` and ``.../lifetime`` (or the ``--out`` folder).  A folder
remembers what made it in ``.memsim-results.json``: the command and a
fingerprint of what decides its numbers (the resolved config less the
placement fields ``run.name`` and ``run.out_dir``, plus the command's own
options; for a sweep the sweep file, for a comparison its full description).

Before any work, :func:`claim` checks the folder: it must be writable, and
if it already holds results they must come from the same command and
fingerprint.  Re-running the same thing replaces its results silently;
anything else is refused with one line unless ``replace`` is set.
"""
from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from memsim import __version__
from memsim.errors import UserError
from memsim.metrics.files import atomic_write_text, check_folder, dumps, strict

OWNER_FILE = ".memsim-results.json"
# Files that mark a folder as holding memsim results even without an owner file
# (written by versions before owner files existed).
RESULT_FILES = ("summary.json", "runs.parquet", "sweep.json", "compare.csv", "compare.json")
_PLACEMENT = ("name", "out_dir")


def fingerprint(config: Mapping[str, Any] | None = None, **extra: Any) -> str:
    """SHA-256 of a resolved config (placement fields left out) and command options."""
    doc = strict(dict(config or {}), default=str)
    if isinstance(doc.get("run"), dict):
        doc["run"] = {k: v for k, v in doc["run"].items() if k not in _PLACEMENT}
    text = json.dumps({"config": doc, "extra": strict(extra, default=str)}, sort_keys=True,
                      separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def default_folder(config: Mapping[str, Any], command: str) -> Path:
    """``<run.out_dir>/<run.name>/<command>``."""
    run = config["run"]
    return Path(run["out_dir"]) / run["name"] / command


@dataclass(frozen=True)
class Claim:
    """A folder checked for a command's results; :meth:`mark` records the owner."""

    folder: Path
    command: str
    fingerprint: str
    source: str = ""

    def mark(self, folder: Path | None = None) -> None:
        """Write the owner file (just before the results, so a half-saved folder is owned)."""
        doc = {"command": self.command, "fingerprint": self.fingerprint, "source": self.source,
               "version": __version__}
        atomic_write_text(Path(folder or self.folder) / OWNER_FILE, dumps(doc, indent=2))


def owner(folder: Path) -> dict[str, Any] | None:
    """The owner file's content; ``{}`` for results of unknown origin; None for no results."""
    p = folder / OWNER_FILE
    try:
        doc = json.loads(p.read_text())
        return doc if isinstance(doc, dict) else {}
    except FileNotFoundError:
        pass
    except (OSError, ValueError):
        return {}
    if folder.is_dir() and any((folder / f).exists() for f in RESULT_FILES):
        return {}
    return None


def claim(folder: str | Path, command: str, fp: str, *, where: str, replace: bool = False,
          source: str = "", hint: str = "--set run.name=NAME for a folder of its own") -> Claim:
    """Check before running that ``command`` may write its results to ``folder``.

    Raises :class:`UserError` (one line naming the folder) if the folder
    cannot be written or holds other results and ``replace`` is not set.
    ``where`` names what chose the folder (``--out`` or ``run.out_dir``).
    """
    folder = check_folder(folder, where)
    have = owner(folder) if folder.is_dir() else None
    if have is not None and not replace:
        same = have.get("command") == command and have.get("fingerprint") == fp
        if not same:
            if not have:
                found = "results of unknown origin"
            elif have.get("command") != command:
                found = f"results of memsim {have.get('command')}"
            else:
                made = f" (from {have['source']})" if have.get("source") else ""
                found = f"results of memsim {command} with other settings{made}"
            raise UserError(str(folder), found,
                            f"a new folder or this one's own results; pass --replace to overwrite "
                            f"them, or {hint}")
    return Claim(folder, command, fp, source)
