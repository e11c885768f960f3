"""Named parts found by name: one convention for every kind a config may name.

A :class:`Registry` maps a name to a part (a class, or a small object) of one
kind: write schemes, wear levelers, refresh policies, cleaner victim
policies, technology presets.  Each part carries its ``name`` and a one-line
``summary`` (by default the first line of its docstring); the registry gives
the names in registration order, looks a name up with a one-line
:class:`~memsim.errors.ConfigError` naming the config key, and describes
itself for ``memsim list`` and the schema's field descriptions.

The registry lives here, in the innermost layer, so any layer may hold one;
the registries themselves live with the parts they hold (``policy/`` for
policies, ``config/`` for presets).
"""
from __future__ import annotations

import sys
from collections.abc import Callable, Iterator, Mapping
from typing import Any, Generic, TypeVar

from memsim.errors import ConfigError

T = TypeVar("T")


def summary_of(part: Any) -> str:
    """The part's ``summary`` attribute, else the first sentence of its class's or module's docstring."""
    text = getattr(part, "summary", None)
    if isinstance(text, str) and text:
        return text
    doc = part.__dict__.get("__doc__") if isinstance(part, type) else None
    if not doc:
        doc = getattr(sys.modules.get(getattr(part, "__module__", "")), "__doc__", None)
    first = " ".join((doc or "").strip().split("\n\n")[0].split())
    return first.split(". ")[0].rstrip(".")


class Registry(Mapping[str, T], Generic[T]):
    """Parts of one ``kind`` by name; ``key`` is the config key that names one (for errors).

    Parts are added with :meth:`add` (also usable as a class decorator) or
    come from ``load``, a function called once on first use that returns the
    parts (for parts found on disk, such as preset files).
    """

    def __init__(self, kind: str, key: str, load: Callable[[], list[T]] | None = None) -> None:
        self.kind = kind
        self.key = key
        self._load = load
        self._parts: dict[str, T] = {}

    def _all(self) -> dict[str, T]:
        if self._load is not None:
            load, self._load = self._load, None
            for part in load():
                self.add(part)
        return self._parts

    def add(self, part: T, name: str | None = None) -> T:
        """Register ``part`` under ``name`` (default ``part.name``); returns it (a decorator)."""
        name = name or part.name  # type: ignore[attr-defined]
        if name in self._parts:
            raise ValueError(f"{self.kind} {name!r} registered twice")
        self._parts[name] = part
        return part

    def __getitem__(self, name: str) -> T:
        return self._all()[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._all())

    def __len__(self) -> int:
        return len(self._all())

    def names(self) -> list[str]:
        """Registered names, in registration order."""
        return list(self._all())

    def get_part(self, name: Any, where: str | None = None) -> T:
        """The part called ``name``; a ConfigError at ``where`` (default the key) if there is none."""
        if isinstance(name, str) and name in self._all():
            return self._parts[name]
        raise ConfigError(where or self.key, repr(name), "one of " + ", ".join(self.names()))

    def check(self, name: Any, where: str | None = None) -> None:
        """Raise the ConfigError of :meth:`get_part` unless ``name`` is registered."""
        self.get_part(name, where)

    def describe(self) -> dict[str, str]:
        """``{name: one-line summary}`` of every part."""
        return {n: summary_of(p) for n, p in self._all().items()}

    def choices(self) -> str:
        """The names as a phrase for a field description: ``one of a, b or c``."""
        names = self.names()
        return "one of " + (", ".join(names[:-1]) + " or " + names[-1] if len(names) > 1 else "".join(names))

    def __repr__(self) -> str:
        return f"Registry({self.kind!r}: {', '.join(self.names())})"
