"""Build the cell-physics models (MLC programming, drift) from a RunConfig."""
from __future__ import annotations

from memsim.tech.drift import DriftParams
from memsim.tech.mlc import MlcCell
from memsim.tech.retention import Retention
from memsim.tech.technology import technology


def levels(cfg) -> int:
    """Resistance levels per cell of a config."""
    return 3 if cfg.cell.tri_level else 1 << cfg.cell.bits_per_cell


def mlc_cell(cfg) -> MlcCell:
    """The program-and-verify cell of a config.

    Unset pulse fields fall back to the SLC pulses: the lowest (crystalline)
    level is reached with a SET pulse, every other level with a RESET-type
    pulse; one verify is one array read.
    """
    c = cfg.cell
    n = levels(cfg)
    pulse_ns = c.pulse_ns if c.pulse_ns is not None else [c.set_ns] + [c.reset_ns] * (n - 1)
    pulse_pj = c.pulse_pj if c.pulse_pj is not None else [c.set_pj] + [c.reset_pj] * (n - 1)
    return MlcCell.from_dict({
        "bits_per_cell": c.bits_per_cell,
        "tri_level": c.tri_level,
        "level_log10_ohm": c.level_log10_ohm,
        "read_thresholds_log10_ohm": c.read_thresholds_log10_ohm,
        "program_sigma_decades": c.program_sigma_decades,
        "verify_band_sigma": c.verify_band_sigma,
        "pv_model": c.pv_model,
        "pv_mean_iterations": technology(cfg).iterations(cfg),
        "pv_max_iterations": c.pv_max_iterations,
        "pulse_ns": pulse_ns,
        "pulse_pj": pulse_pj,
        "verify_ns": c.verify_ns if c.verify_ns is not None else c.read_ns,
        "verify_pj": c.verify_pj if c.verify_pj is not None else c.read_pj,
    })


def retention(cfg) -> Retention | None:
    """Crystallization of amorphous levels, or None when the config has no activation energy for it."""
    c = cfg.cell
    if c.retention_activation_ev is None or not technology(cfg).crystallizes:
        return None
    return Retention(c.retention_activation_ev, c.retention_ref_k, c.retention_ref_s,
                     c.retention_fail_fraction, c.retention_avrami_n)


def drift_params(cfg) -> DriftParams:
    c = cfg.cell
    n = levels(cfg)
    return DriftParams.from_dict({
        "drift_nu": c.drift_nu if technology(cfg).drifts else [0.0] * n, "drift_nu_rel_sd": c.drift_nu_rel_sd, "drift_t0_s": c.drift_t0_s,
        "drift_t_max_s": c.drift_t_max_s, "drift_activation_ev": c.drift_activation_ev,
        "drift_reference_k": c.drift_reference_k, "retention": retention(cfg),
    }, n)
