"""Lumped electro-thermal cell model and crystallization kinetics."""
from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from conftest import memsim_cli
from scipy import integrate

from memsim.config import load_config
from memsim.errors import ConfigError
from memsim.experiment.cell import cell_model, load_spec, parse_spec
from memsim.report.cell_plot import save_cell
from memsim.tech.crystallization import (
    K_B_EV_PER_K,
    YEAR_S,
    ZERO_C_K,
    Kinetics,
    avrami_fraction,
    avrami_reduced_time,
)
from memsim.tech.materials import GST225

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "workloads" / "cell_demo_pillar.toml"


@pytest.fixture(scope="module")
def spec():
    return load_spec(DEMO)


@pytest.fixture(scope="module")
def phys(spec):
    return spec.physics()


# ------------------------------------------------------------- thermal node
def test_resistance_and_capacitance_by_hand(phys) -> None:
    # Fourier's law through a slab, R = d / (k A); lumped heat capacity C = c_v V.
    assert phys.r_th_k_per_w == pytest.approx(10e-9 / (1.4 * 2500e-18), rel=1e-12)
    assert phys.c_th_j_per_k == pytest.approx(1.25e6 * 1e5 * 1e-27, rel=1e-12)
    assert phys.tau_s == pytest.approx(phys.r_th_k_per_w * phys.c_th_j_per_k, rel=1e-12)


def test_temperature_rise_closed_form_and_ode(phys) -> None:
    # T(t) = T0 + P R (1 - exp(-t/(R C))): step response of a lumped heat
    # capacity behind a thermal resistance (Carslaw and Jaeger, "Conduction of
    # Heat in Solids", 1959, lumped systems; from memory).  Checked against
    # the formula and against a numerical solution of C dT/dt = P - (T - T0)/R.
    p = 150e-6
    r, c, t0 = phys.r_th_k_per_w, phys.c_th_j_per_k, phys.t0_k
    ts = np.linspace(0, 5 * r * c, 11)
    closed = t0 + p * r * (1 - np.exp(-ts / (r * c)))
    assert np.allclose(phys.temperature_k(p, ts), closed, rtol=1e-12, atol=0)
    sol = integrate.solve_ivp(lambda t, y: [(p - (y[0] - t0) / r) / c], (0, ts[-1]), [t0], t_eval=ts,
                              rtol=1e-10, atol=1e-9)
    assert np.allclose(phys.temperature_k(p, ts), sol.y[0], rtol=1e-8)


def test_reset_reaches_melting_at_the_heating_time(phys) -> None:
    d = phys.reset()
    p = d["reset_power_uw"] * 1e-6
    # Power that holds the node at melting: (Tm - T0) / R.
    assert d["reset_melt_power_uw"] * 1e-6 == pytest.approx((phys.melt_k - phys.t0_k) / phys.r_th_k_per_w)
    t_heat = d["reset_heat_ns"] * 1e-9
    assert float(phys.temperature_k(p, t_heat)) == pytest.approx(phys.melt_k, rel=1e-12)
    # Current from Joule heating P = I^2 R_on.
    assert (d["reset_current_ua"] * 1e-6) ** 2 * phys.on_resistance_ohm == pytest.approx(p, rel=1e-12)


def test_reset_energy_without_driver_floor_is_closed_form(spec) -> None:
    # No floor: E = o dT C ln(o/(o-1)) + o/(o-1) L V, independent of R (the
    # conductivity), and proportional to volume (derived from the closed form above).
    base = spec.physics()
    for k in (0.2, 1.4, 5.0):
        phys = _with(spec, k, min_pulse_ns=0.0)
        o = phys.reset_overdrive
        dt = phys.melt_k - phys.t0_k
        latent = phys.latent_heat_j_cm3 * 1e6 * phys.active_volume_nm3 * 1e-27
        want = o * dt * phys.c_th_j_per_k * math.log(o / (o - 1)) + o / (o - 1) * latent
        assert phys.reset()["reset_pj"] * 1e-12 == pytest.approx(want, rel=1e-10)
    assert base.reset()["reset_ns"] == 20.0  # the demo's driver floor binds


def _with(spec, k: float | None = None, scale: float = 1.0, **values):
    import dataclasses

    s = dataclasses.replace(spec, values={**spec.values, **{f"access.{a}": b for a, b in values.items()}})
    return s.physics(conductivity=k, scale=scale)


# ------------------------------------------------------------- kinetics
def test_avrami_fraction_matches_formula() -> None:
    # X = 1 - exp(-(k t)^n) (Avrami, J. Chem. Phys. 1939).
    kt = np.array([0.0, 0.1, 0.5, 1.0, 2.0])
    for n in (1.0, 2.5, 4.0):
        assert np.allclose(avrami_fraction(kt, n), 1 - np.exp(-kt ** n), rtol=1e-13, atol=1e-15)
        assert avrami_fraction(avrami_reduced_time(0.37, n), n) == pytest.approx(0.37, rel=1e-12)


def test_rate_is_anchored_and_scales_as_arrhenius() -> None:
    # k(T2)/k(T1) = exp(-Ea/kB (1/T2 - 1/T1)) (Arrhenius); kB = 8.617333262e-5 eV/K (CODATA 2018).
    kin = Kinetics(2.3, 3.0, 358.15, 10 * YEAR_S, 0.5, 893.15, 0.0)
    kb = 8.617333262e-5
    for t1, t2 in ((358.15, 423.15), (400.0, 700.0), (500.0, 650.0)):
        assert kin.rate(t2) / kin.rate(t1) == pytest.approx(math.exp(-2.3 / kb * (1 / t2 - 1 / t1)), rel=1e-9)
    # The anchor: half crystallized after 10 years at 85 C.
    assert float(avrami_fraction(kin.rate(358.15) * 10 * YEAR_S, 3.0)) == pytest.approx(0.5, rel=1e-12)


def test_driving_force_stops_growth_at_melting_and_fades_below() -> None:
    # Wilson-Frenkel factor 1 - exp(-dG/kT) with dG ~ dH (Tm - T)/Tm (Turnbull 1950; from memory).
    kin = Kinetics(2.3, 3.0, 358.15, 10 * YEAR_S, 0.5, 893.15, 1e-4)
    assert float(kin.rate(893.15)) == 0.0
    g = kin.driving_factor(np.array([400.0, 600.0, 850.0]))
    assert np.allclose(g, 1 - np.exp(-1e-4 * (893.15 - np.array([400.0, 600.0, 850.0]))
                                     / (K_B_EV_PER_K * np.array([400.0, 600.0, 850.0]))))
    nose = kin.fastest_k(423.15)
    assert 423.15 < nose < 893.15
    assert kin.rate(nose) > kin.rate(nose - 20) and kin.rate(nose) > kin.rate(nose + 20)


def test_quench_fraction_matches_time_domain_integral(phys) -> None:
    # Additivity rule (Cahn, Acta Metall. 1956; from memory): X = 1 - exp(-(int k(T(t)) dt)^n)
    # with T(t) = T0 + (Tm - T0) exp(-t/tau), integrated here in time, not temperature.
    kin, tau, t0 = phys.kinetics, phys.tau_s, phys.t0_k
    t_end = tau * math.log((phys.melt_k - t0) / (phys.cryst_k - t0))
    val, _ = integrate.quad(lambda t: float(kin.rate(t0 + (phys.melt_k - t0) * math.exp(-t / tau))),
                            0, t_end, limit=400, epsabs=0, epsrel=1e-10)
    q = phys.quench()
    assert q["quench_crystallized_fraction"] == pytest.approx(float(avrami_fraction(val, kin.avrami_n)), rel=1e-6)
    assert q["quench_ns"] * 1e-9 == pytest.approx(t_end, rel=1e-12)
    # At the critical cooling the fraction is exactly the allowed one.
    crit_tau = q["critical_quench_ns"] / q["quench_ns"] * tau
    i = kin.cooling_integral(t0, phys.melt_k, phys.cryst_k)
    assert float(avrami_fraction(crit_tau * i, kin.avrami_n)) == pytest.approx(phys.quench_max_fraction, rel=1e-9)
    # Crystallization below Tx adds nothing on a nanosecond quench.
    below = kin.cooling_integral(t0, phys.cryst_k, t0 + 1.0) * tau
    assert below < 1e-12


def test_set_pulse_reaches_set_fraction(phys) -> None:
    s = phys.set_()
    p = s["set_power_uw"] * 1e-6
    kin = phys.kinetics
    val, _ = integrate.quad(lambda t: float(kin.rate(phys.temperature_k(p, t))), 0,
                            s["set_pulse_needed_ns"] * 1e-9, limit=400, epsabs=0, epsrel=1e-10)
    assert float(avrami_fraction(val, kin.avrami_n)) == pytest.approx(phys.set_fraction, rel=1e-6)
    assert s["set_temperature_c"] == pytest.approx(450.0)
    assert s["set_power_uw"] * 1e-6 * phys.r_th_k_per_w == pytest.approx(450.0 - 25.0)


def test_capping_tradeoff_is_monotone(spec) -> None:
    # Less conductive capping keeps heat in: RESET power falls, quench lengthens
    # (tau = R C with R = d/(k A)); energy never rises.  Common practice of PCM cell design.
    res = cell_model(spec).tables["capping_sweep"].sort_values("capping_conductivity_w_mk")
    assert np.all(np.diff(res["reset_power_uw"]) > 0)
    assert np.all(np.diff(res["quench_ns"]) < 0)
    assert np.all(np.diff(res["reset_pj"]) >= -1e-12)
    # The demo sweep crosses from a quench that is fast enough to one that is not.
    ok = res["quench_fast_enough"].to_numpy(bool)
    assert ok[-1] and not ok[0]


def test_energy_scaling_with_size(spec) -> None:
    # Driver floor binds: E = P t_min with P ~ A ~ s^2.  No floor: E ~ C, L V ~ s^3.
    t = cell_model(spec).tables["size_sweep"]
    slope = np.polyfit(np.log(t["size_scale"]), np.log(t["reset_pj"]), 1)[0]
    assert slope == pytest.approx(2.0, abs=1e-9)
    e = [_with(spec, None, s, min_pulse_ns=0.0).reset()["reset_pj"] for s in (0.5, 1.0, 2.0)]
    assert e[1] / e[0] == pytest.approx(8.0, rel=1e-9) and e[2] / e[1] == pytest.approx(8.0, rel=1e-9)


# ------------------------------------------------------------- handbook GST
def test_gst_handbook_values() -> None:
    # Ge2Sb2Te5 melts near 600 C and crystallizes near 150 C under slow heating
    # (Yamada et al., J. Appl. Phys. 69, 1991; from memory).
    assert 580.0 <= GST225["melt_c"][0] <= 640.0
    assert 130.0 <= GST225["cryst_c"][0] <= 170.0
    # Activation energy of crystallization 2.2-2.9 eV (Friedrich et al., J. Appl. Phys. 87, 2000; from memory).
    assert 2.2 <= GST225["activation_ev"][0] <= 2.9
    for _, source in GST225.values():
        assert "from memory" in source or "common practice" in source


def test_gst_kinetics_imply_a_crystallization_temperature_near_handbook() -> None:
    # The kinetics are anchored at retention (10 years at 85 C), not at Tx;
    # heating at 10 K/min they must crystallize within ~40 K of the handbook 150 C
    # (coarse consistency check: the literature spread of Ea alone moves Tx by tens of K).
    m = {k: v for k, (v, _) in GST225.items()}
    from memsim.tech.crystallization import driving_ev_per_k

    kin = Kinetics(m["activation_ev"], m["avrami_n"], m["retention_c"] + ZERO_C_K,
                   m["retention_years"] * YEAR_S, m["retention_fraction"], m["melt_c"] + ZERO_C_K,
                   driving_ev_per_k(m["latent_heat_j_cm3"], m["atomic_volume_nm3"], m["melt_c"] + ZERO_C_K))
    tx = kin.ramp_crystallization_k(10 / 60) - ZERO_C_K
    assert abs(tx - m["cryst_c"]) <= 40.0


# ------------------------------------------------------------- files and CLI
def test_preset_is_a_valid_run_config(spec, tmp_path) -> None:
    res = cell_model(spec)
    paths = save_cell(res, tmp_path)
    cfg = load_config(paths[0])
    d = res.summary
    assert cfg.cell.reset_ns == pytest.approx(d["reset_ns"], rel=1e-5)
    assert cfg.cell.set_pj == pytest.approx(d["set_pj"], rel=1e-5)
    assert cfg.cell.read_pj == 2.0
    text = paths[0].read_text()
    assert "silicon characterisation" in text and "Yamada" in text
    assert all(p.stat().st_size > 0 for p in paths)


def test_bad_spec_names_the_key(tmp_path) -> None:
    data = tomllib.loads(DEMO.read_text())
    data["capping"]["conductivity_w_mk"] = -1.0
    with pytest.raises(ConfigError):
        parse_spec(data, "x.toml")
    data = tomllib.loads(DEMO.read_text())
    data["capping"]["conductivity"] = 1.0
    with pytest.raises(ConfigError) as err:
        parse_spec(data, "x.toml")
    assert "capping.conductivity" in err.value.where


def test_cli_cell(tmp_path) -> None:
    out = memsim_cli("cell", DEMO, "--out", tmp_path / "c")
    assert out.code == 0, out.err
    assert "silicon characterisation" in out.out
    assert (tmp_path / "c" / "demo_pillar_preset.toml").is_file()
    bad = tmp_path / "bad.toml"
    bad.write_text("name = 'x'\nmaterial = 'gst225'\n[geometry]\nactive_volume_nm3 = 'big'\n")
    out = memsim_cli("cell", bad)
    assert out.code == 2 and "geometry.active_volume_nm3" in out.err
    assert "Traceback" not in out.err and len(out.err.strip().splitlines()) == 1
