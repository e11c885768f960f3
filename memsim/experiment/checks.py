"""Up-front checks of the parts a config builds, before anything runs.

The schema checks each field and the rules between fields; some rules live
with the parts themselves (cell models, levelers, the erase pool).  These
parts are built here once, in miniature where that is cheap, so that a bad
combination fails before a run (or any point of a sweep) starts, and so its
error names the config file: see :func:`memsim.config.load.locate`.
"""
from __future__ import annotations

import numpy as np

from memsim.config import RunConfig
from memsim.experiment.build import build_leveler, check_names
from memsim.policy.erase import BlockPool
from memsim.policy.write import SCHEMES
from memsim.seeds import stream
from memsim.tech.array import AddressMap
from memsim.tech.models import drift_params, mlc_cell
from memsim.workload.synthetic import AddressPattern

# Levelers over more lines than this are checked when the run builds them
# (building one costs memory in proportion to the lines).
_LEVELER_CHECK_LINES = 1 << 22


def check_parts(cfg: RunConfig) -> None:
    """Build what can fail on a bad combination; raise its ConfigError (with a bare key)."""
    check_names(cfg)
    mlc_cell(cfg)          # the refresh plan builds it for single-level cells too
    if cfg.refresh.policy != "none":
        # A refresh plan at a temperature other than the drift reference needs
        # an activation energy (memsim drift reports such ages as null instead).
        drift_params(cfg).acceleration(cfg.refresh.temperature_k)
    w = cfg.workload
    if w.pattern in ("repeated_address", "hot_set"):    # cheap to build; their lines must fit the footprint
        AddressPattern(w.pattern, cfg.footprint, stream(cfg.run.seed, "requests"), attack_line=w.attack_line,
                       hot_lines=w.hot_lines)
    if cfg.footprint <= _LEVELER_CHECK_LINES:
        build_leveler(cfg, stream(cfg.run.seed, "leveler"))
    if SCHEMES[cfg.write.scheme].out_of_place:
        a, e = cfg.array, cfg.erase
        amap = AddressMap.from_config(a)
        _, bank, _ = amap.locate(np.arange(cfg.footprint))
        sizes = np.bincount(bank, minlength=amap.total_banks)
        # The smallest bank is the hardest to fit blocks and spares into.
        BlockPool(max(1, int(sizes.min())), e.block_lines, e.spare_fraction, e.init_state,
                  e.victim, e.low_watermark, e.fallback)
