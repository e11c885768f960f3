"""memsim: a discrete-event model of phase-change memory behind a controller.

Python entry points mirror the CLI: :func:`simulate` runs one config.
"""
from __future__ import annotations

__version__ = "0.1.0"

_LAZY = {
    "simulate": ("memsim.experiment.run", "simulate"),
    "load_config": ("memsim.config", "load_config"),
    "RunConfig": ("memsim.config", "RunConfig"),
    "RunResult": ("memsim.metrics.result", "RunResult"),
    "sweep": ("memsim.experiment.sweep", "sweep"),
    "lifetime": ("memsim.experiment.lifetime", "lifetime"),
    "compare": ("memsim.experiment.compare", "compare"),
    "drift_report": ("memsim.experiment.drift", "drift_report"),
    "point_stats": ("memsim.experiment.sweep", "point_stats"),
    "cell_model": ("memsim.experiment.cell", "cell_model"),
    "make_trace": ("memsim.experiment.tools", "make_trace"),
    "trace_summary": ("memsim.experiment.tools", "trace_summary"),
    "available": ("memsim.experiment.tools", "available"),
    "plot_sweep": ("memsim.report.page", "plot_sweep"),
}

__all__ = ["RunConfig", "RunResult", "__version__", "available", "cell_model", "compare", "drift_report",
           "lifetime", "load_config", "make_trace", "plot_sweep", "point_stats", "simulate", "sweep",
           "trace_summary"]


def __getattr__(name: str):
    # Lazy so that importing a small part (e.g. memsim.tech) stays cheap.
    if name in _LAZY:
        import importlib

        mod, attr = _LAZY[name]
        return getattr(importlib.import_module(mod), attr)
    raise AttributeError(f"module 'memsim' has no attribute {name!r}")
