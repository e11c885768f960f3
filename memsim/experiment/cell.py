"""From a cell spec (geometry, material, capping layer, access device) to
SET/RESET pulses, a preset file ``memsim run`` accepts, and the trade-off tables.

A cell spec is a TOML file::

    name = "my_cell"
    material = "gst225"            # handbook table; [material] keys override it
    [geometry]    active_volume_nm3, contact_area_nm2
    [material]    melt_c, cryst_c, heat_capacity_j_cm3k, latent_heat_j_cm3,
                  atomic_volume_nm3, activation_ev, avrami_n,
                  retention_c, retention_years, retention_fraction, driving_force
    [capping]     conductivity_w_mk, thickness_nm
    [access]      current_limit_ua, on_resistance_ohm, min_pulse_ns
    [program]     ambient_c, reset_overdrive, quench_max_fraction, set_fraction, set_c
    [read]        read_ns, read_ua, read_pj   (copied into the preset)
    [sweep]       conductivity_w_mk = [...], size_scale = [...]
    [sources]     "section.key" = "where the number came from"

Every number used is reported with its source: the ``[sources]`` entry, the
handbook table's source, or "spec value, no source given".
"""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from memsim import __version__
from memsim.config.load import read_toml
from memsim.errors import ConfigError
from memsim.metrics.result import RunResult
from memsim.tech.crystallization import YEAR_S, ZERO_C_K, Kinetics, driving_ev_per_k
from memsim.tech.materials import MATERIALS
from memsim.tech.thermal import CAUTION, CellPhysics

_SPEC = {
    "geometry": {"active_volume_nm3": None, "contact_area_nm2": None},
    "material": {"melt_c": None, "cryst_c": None, "heat_capacity_j_cm3k": None, "latent_heat_j_cm3": None,
                 "atomic_volume_nm3": None, "activation_ev": None, "avrami_n": None, "retention_c": None,
                 "retention_years": None, "retention_fraction": None, "driving_force": True},
    "capping": {"conductivity_w_mk": None, "thickness_nm": None},
    "access": {"current_limit_ua": None, "on_resistance_ohm": None, "min_pulse_ns": 0.0},
    "program": {"ambient_c": 25.0, "reset_overdrive": 1.3, "quench_max_fraction": 0.01,
                "set_fraction": 0.99, "set_c": None},
    "read": {"read_ns": None, "read_ua": None, "read_pj": None},
}
_DEFAULT_SOURCE = {
    "access.min_pulse_ns": "default 0: no driver floor",
    "program.ambient_c": "default: room temperature (common practice)",
    "program.reset_overdrive": "default: 30% above the melting power (common practice margin)",
    "program.quench_max_fraction": "default: at most 1% crystallized during the quench (common practice)",
    "program.set_fraction": "default: 99% crystallized ends the SET (common practice)",
    "program.set_c": "default: the temperature of fastest crystallization",
    "material.driving_force": "default: Wilson-Frenkel driving force on",
}


@dataclasses.dataclass
class CellSpec:
    """A parsed cell spec: values by ``section.key`` and where each came from."""

    name: str
    values: dict[str, Any]
    sources: dict[str, str]
    sweep_conductivity: list[float]
    sweep_scale: list[float]
    origin: str = "<spec>"

    def physics(self, conductivity: float | None = None, scale: float = 1.0) -> CellPhysics:
        """The model inputs; ``scale`` multiplies every length of the cell."""
        v = self.values
        m = {k.split(".", 1)[1]: v[k] for k in v if k.startswith("material.")}
        melt_k = m["melt_c"] + ZERO_C_K
        drive = driving_ev_per_k(m["latent_heat_j_cm3"], m["atomic_volume_nm3"], melt_k) \
            if m["driving_force"] else 0.0
        try:
            kin = Kinetics(m["activation_ev"], m["avrami_n"], m["retention_c"] + ZERO_C_K,
                           m["retention_years"] * YEAR_S, m["retention_fraction"], melt_k, drive)
            return CellPhysics(
                active_volume_nm3=v["geometry.active_volume_nm3"] * scale ** 3,
                contact_area_nm2=v["geometry.contact_area_nm2"] * scale ** 2,
                heat_capacity_j_cm3k=m["heat_capacity_j_cm3k"], latent_heat_j_cm3=m["latent_heat_j_cm3"],
                melt_c=m["melt_c"], cryst_c=m["cryst_c"],
                capping_conductivity_w_mk=v["capping.conductivity_w_mk"] if conductivity is None
                else conductivity,
                capping_thickness_nm=v["capping.thickness_nm"],
                on_resistance_ohm=v["access.on_resistance_ohm"],
                current_limit_ua=v["access.current_limit_ua"], min_pulse_ns=v["access.min_pulse_ns"],
                ambient_c=v["program.ambient_c"], reset_overdrive=v["program.reset_overdrive"],
                quench_max_fraction=v["program.quench_max_fraction"],
                set_fraction=v["program.set_fraction"], kinetics=kin, set_c=v["program.set_c"])
        except ValueError as exc:
            raise ConfigError(self.origin, str(exc), "a physically consistent cell spec") from None


def _number(where: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ConfigError(where, repr(value), "a finite number")
    return float(value)


def parse_spec(data: dict, origin: str = "<spec>") -> CellSpec:
    """Validate a spec dict (as read from TOML) into a :class:`CellSpec`."""
    known = set(_SPEC) | {"name", "material", "sweep", "sources", "description"}
    for key in data:
        if key not in known:
            raise ConfigError(f"{origin}: {key}", "unknown key", ", ".join(sorted(known)))
    name = data.get("name", "cell")
    if not isinstance(name, str) or not name or not all(c.isalnum() or c in "_.-" for c in name):
        raise ConfigError(f"{origin}: name", repr(name), "letters, digits, _ . -")
    base: dict[str, tuple[float, str]] = {}
    if "material" in data and not isinstance(data["material"], str):
        raise ConfigError(f"{origin}: material", repr(data["material"]), "a table name: " + ", ".join(MATERIALS))
    if isinstance(data.get("material"), str):
        if data["material"] not in MATERIALS:
            raise ConfigError(f"{origin}: material", repr(data["material"]), ", ".join(MATERIALS))
        base = MATERIALS[data["material"]]
    given_sources = data.get("sources", {})
    if not isinstance(given_sources, dict):
        raise ConfigError(f"{origin}: sources", repr(given_sources), "a table of 'section.key' = 'source'")
    values: dict[str, Any] = {}
    sources: dict[str, str] = {}
    for section, keys in _SPEC.items():
        table = data.get(section, {})
        if section == "material" and isinstance(table, str):
            table = {}
        if not isinstance(table, dict):
            raise ConfigError(f"{origin}: {section}", repr(table), "a table")
        for key in table:
            if key not in keys:
                raise ConfigError(f"{origin}: {section}.{key}", "unknown key", ", ".join(keys))
        for key, default in keys.items():
            dotted = f"{section}.{key}"
            if key in table:
                raw = table[key]
                if key == "driving_force":
                    if not isinstance(raw, bool):
                        raise ConfigError(f"{origin}: {dotted}", repr(raw), "true or false")
                    values[dotted] = raw
                else:
                    values[dotted] = _number(f"{origin}: {dotted}", raw)
                sources[dotted] = given_sources.get(dotted, "spec value, no source given")
            elif section == "material" and key in base:
                values[dotted], sources[dotted] = base[key]
                sources[dotted] = f"{data['material']} table: {sources[dotted]}"
            elif default is not None or key in ("set_c",):
                values[dotted] = default
                sources[dotted] = _DEFAULT_SOURCE.get(dotted, "default")
            else:
                raise ConfigError(f"{origin}: {dotted}", "nothing",
                                  "a number" + (" (or name a material table)" if section == "material" else ""))
    sweep = data.get("sweep", {})
    if not isinstance(sweep, dict):
        raise ConfigError(f"{origin}: sweep", repr(sweep), "a table")
    for key in sweep:
        if key not in ("conductivity_w_mk", "size_scale"):
            raise ConfigError(f"{origin}: sweep.{key}", "unknown key", "conductivity_w_mk, size_scale")

    def grid(key: str, default: list[float]) -> list[float]:
        vals = sweep.get(key, default)
        if not isinstance(vals, list) or len(vals) < 2:
            raise ConfigError(f"{origin}: sweep.{key}", repr(vals), "a list of at least 2 numbers > 0")
        out = [_number(f"{origin}: sweep.{key}", x) for x in vals]
        if min(out) <= 0:
            raise ConfigError(f"{origin}: sweep.{key}", repr(vals), "numbers > 0")
        return sorted(out)

    k0 = values["capping.conductivity_w_mk"]
    cond = grid("conductivity_w_mk", list(np.geomspace(k0 / 20, k0 * 5, 25)))
    scale = grid("size_scale", [0.25, 0.35, 0.5, 0.7, 1.0, 1.4, 2.0])
    spec = CellSpec(name, values, sources, cond, scale, origin)
    spec.physics()  # validate the combination now, with the file named
    return spec


def load_spec(path: str | Path) -> CellSpec:
    return parse_spec(read_toml(path), str(path))


def _sweep_rows(spec: CellSpec) -> tuple[pd.DataFrame, pd.DataFrame]:
    cols = ["reset_power_uw", "reset_current_ua", "reset_ns", "reset_pj", "quench_ns", "critical_quench_ns",
            "quench_crystallized_fraction", "quench_fast_enough", "set_ns", "set_pj", "set_current_ua"]
    rows = []
    for k in spec.sweep_conductivity:
        d = spec.physics(conductivity=k).derive()
        rows.append({"capping_conductivity_w_mk": k, **{c: d[c] for c in cols}})
    capping = pd.DataFrame(rows)
    rows = []
    for s in spec.sweep_scale:
        p = spec.physics(scale=s)
        d = p.derive()
        rows.append({"size_scale": s, "active_volume_nm3": p.active_volume_nm3,
                     "contact_area_nm2": p.contact_area_nm2, "thermal_time_constant_ns":
                     d["thermal_time_constant_ns"], **{c: d[c] for c in cols}})
    return capping, pd.DataFrame(rows)


def cell_model(spec: str | Path | dict | CellSpec) -> RunResult:
    """Derive SET/RESET pulses of a cell spec (path, dict or :class:`CellSpec`).

    ``summary`` holds every derived number (units in the names) and the
    caution; ``tables`` holds ``capping_sweep`` (against capping-layer
    conductivity), ``size_sweep`` (against a linear scale of the cell) and
    ``sources`` (each input, its value and where it came from).  The preset
    text is in ``result.config["preset_toml"]``.
    """
    if isinstance(spec, (str, Path)):
        spec = load_spec(spec)
    elif isinstance(spec, dict):
        spec = parse_spec(spec)
    phys = spec.physics()
    derived = phys.derive()
    kin = phys.kinetics
    # What the kinetics imply for a 10 K/min heating ramp, to set beside the handbook cryst_c.
    derived["cryst_c_implied_at_10k_per_min"] = kin.ramp_crystallization_k(10.0 / 60.0) - ZERO_C_K
    summary: dict[str, Any] = {"cell": spec.name, **derived, "caution": CAUTION}
    capping, size = _sweep_rows(spec)
    sources = pd.DataFrame([{"input": k, "value": spec.values[k], "source": spec.sources[k]}
                            for k in spec.values])
    text = preset_toml(spec, derived)
    return RunResult(summary, {"capping_sweep": capping, "size_sweep": size, "sources": sources},
                     {"spec": {k: v for k, v in spec.values.items()}, "preset_toml": text}, 0, __version__)


def preset_toml(spec: CellSpec, d: dict[str, Any]) -> str:
    """A run config holding the derived ``[cell]`` pulses, each line saying where it came from."""
    def src(key: str) -> str:
        return f"{spec.values[key]:g}: {spec.sources[key]}"

    law = "lumped thermal model (memsim cell)"
    lines = [
        f"# Cell '{spec.name}' derived by memsim {__version__} from {spec.origin}.",
        f"# {CAUTION}",
        "# Inputs and their sources:",
        *[f"#   {k} = {src(k)}" for k in spec.values if spec.values[k] is not None
          and not isinstance(spec.values[k], bool)],
        "# Energies are those dissipated in the cell (I^2 R_on x pulse); driver and wiring losses",
        "# are not included.",
    ]
    warn = []
    if not d["reset_within_current_limit"]:
        warn.append(f"RESET needs {d['reset_current_ua']:.0f} uA, above the access device limit")
    if not d["set_within_current_limit"]:
        warn.append(f"SET needs {d['set_current_ua']:.0f} uA, above the access device limit")
    if not d["quench_fast_enough"]:
        warn.append(f"quench too slow: {d['quench_crystallized_fraction']:.3g} crystallizes on cooling")
    lines += [f"# WARNING: {w}" for w in warn]
    lines += ["", "[cell]"]
    vals = [
        ("read_ns", spec.values["read.read_ns"], src("read.read_ns")),
        ("set_ns", d["set_ns"], (f"{law}: time to {spec.values['program.set_fraction']:g} crystallized at "
                                 f"{d['set_temperature_c']:.0f} C (JMAK + Arrhenius), driver floor "
                                 f"{spec.values['access.min_pulse_ns']:g} ns")),
        ("reset_ns", d["reset_ns"], (f"{law}: heat to melting + latent heat "
                                     f"({d['reset_pulse_needed_ns']:.3g} ns), driver floor "
                                     f"{spec.values['access.min_pulse_ns']:g} ns")),
        ("read_ua", spec.values["read.read_ua"], src("read.read_ua")),
        ("set_ua", d["set_current_ua"], f"{law}: sqrt(P_set / R_on)"),
        ("reset_ua", d["reset_current_ua"], f"{law}: sqrt(overdrive x P_melt / R_on)"),
        ("read_pj", spec.values["read.read_pj"], src("read.read_pj")),
        ("set_pj", d["set_pj"], f"{law}: P_set x set_ns"),
        ("reset_pj", d["reset_pj"], f"{law}: P_reset x reset_ns"),
    ]
    for key, value, why in vals:
        lines.append(f"{key} = {float(value):.6g}  # {why}")
    return "\n".join(lines) + "\n"

