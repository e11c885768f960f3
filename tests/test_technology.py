"""Sibling technologies behind one interface: ReRAM and STT-MRAM."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from conftest import memsim_cli

from memsim import simulate
from memsim.config import load_config
from memsim.errors import ConfigError
from memsim.experiment.build import check_names
from memsim.experiment.drift import drift_report
from memsim.tech.models import drift_params, mlc_cell
from memsim.tech.technology import TECHNOLOGIES, stt_write_error_rate, technology, uses_verify

ROOT = Path(__file__).resolve().parents[1]


def cfg(preset: str, **kw):
    return load_config({"cell": {"preset": preset}, **kw})


def test_stt_write_error_rate_is_the_thermal_activation_formula() -> None:
    # WER = exp(-(t/tau0) exp(-Delta (1 - I/Ic0))), thermally activated switching
    # (Koch, Katine, Sun, Phys. Rev. Lett. 92, 2004; from memory).
    for t, i, delta in ((20.0, 97.0, 45.0), (50.0, 90.0, 40.0), (5.0, 99.0, 60.0)):
        want = math.exp(-(t / 1.0) * math.exp(-delta * (1 - i / 100.0)))
        assert float(stt_write_error_rate(t, i, delta, 100.0, 1.0)) == pytest.approx(want, rel=1e-12)
    # ln WER falls linearly with pulse width, and faster at a higher current.
    t = np.array([5.0, 10.0, 20.0, 40.0])
    lw = np.log(stt_write_error_rate(t, 97.0, 45.0, 100.0))
    assert np.allclose(np.diff(lw) / np.diff(t), -math.exp(-45 * 0.03), rtol=1e-12)
    assert stt_write_error_rate(20.0, 98.0, 45.0, 100.0) < stt_write_error_rate(20.0, 97.0, 45.0, 100.0)
    with pytest.raises(ConfigError):
        stt_write_error_rate(20.0, 120.0, 45.0, 100.0)  # above Ic0: not the thermally activated regime


def test_stt_iterations_follow_the_write_error_rate() -> None:
    c = cfg("stt_mram")
    tech = technology(c)
    wer = tech.write_error_rates(c)
    cell = mlc_cell(c)
    # Geometric attempts: mean 1/(1 - WER); a write is given up after the cap
    # with probability WER^cap.
    assert np.allclose(cell.pv_mean_iterations, [1 / (1 - w) for w in wer], rtol=1e-12)
    assert np.allclose(cell.p_unconverged(), [w ** c.cell.pv_max_iterations for w in wer], rtol=1e-9)
    assert wer[0] == pytest.approx(math.exp(-20 * math.exp(-45 * (1 - 0.97))), rel=1e-12)


def test_stt_run_energy_matches_expected_attempts() -> None:
    c = cfg("stt_mram", workload={"requests": 20000, "read_fraction": 0.0, "interval_ns": 400.0})
    res = simulate(c).summary
    cell = mlc_cell(c)
    # Random data under data-comparison write: programmed cells go to either level
    # with probability 1/2; energy per programmed cell = sum_l m_l (pulse_l + verify) / 2.
    per_cell = float(np.mean(cell.mean_iterations() * cell.iteration_pj()))
    cells = res["cells_programmed_per_write"] * res["writes"]
    assert res["energy_mlc_program_pj"] / cells == pytest.approx(per_cell, rel=2e-3)


def test_technologies_have_one_interface() -> None:
    assert set(TECHNOLOGIES) == {"pcm", "reram", "stt_mram"}
    assert not uses_verify(cfg("pcm_slc")) and uses_verify(cfg("reram_slc")) and uses_verify(cfg("stt_mram"))
    r = cfg("reram_slc").cell
    assert r.set_ns < r.reset_ns and r.set_ua < r.reset_ua  # asymmetric SET and RESET
    for preset in ("reram_slc", "stt_mram"):
        c = cfg(preset)
        d = drift_params(c)
        assert d.retention is None and max(d.drift_nu) == 0.0
        s = drift_report(c).summary
        assert s["refresh_age_status"] == "not_in_window" and s["retention_refresh_age_s"] is None


def test_pcm_only_features_are_rejected() -> None:
    with pytest.raises(ConfigError) as err:
        check_names(cfg("stt_mram", write={"scheme": "block_erase"}))
    assert err.value.where == "write.scheme"


def test_compare_across_technologies(tmp_path) -> None:
    out = memsim_cli("compare", ROOT / "workloads" / "demo.toml",
                     "--vary", "cell.preset=pcm_slc,reram_slc,stt_mram", "--set", "workload.requests=3000",
                     "--workers", "1", "--quiet", "--out", tmp_path / "c")
    assert out.code == 0, out.err
    assert "reram_slc" in out.out and "stt_mram" in out.out


def test_stt_run_reports_its_write_error_rates() -> None:
    c = cfg("stt_mram", workload={"requests": 500})
    s = simulate(c).summary
    want = stt_write_error_rate([20.0, 20.0], [97.0, 98.0], 45.0, 100.0, 1.0)
    assert [s["write_error_rate_set_side"], s["write_error_rate_reset_side"]] == pytest.approx(list(want), rel=1e-12)
    assert "write_error_rate_set_side" not in simulate(cfg("pcm_slc", workload={"requests": 500})).summary


def test_stt_error_table_against_pulse_width_and_its_inverse() -> None:
    # WER(t) = exp(-(t/tau0) exp(-Delta (1 - I/Ic0))) (Koch, Katine and Sun, Phys. Rev. Lett. 92,
    # 2004; from memory): ln WER falls linearly in t, and the pulse for a target error rate inverts it.
    from memsim.tech.technology import stt_error_table, stt_pulse_for_error_rate

    cfg = load_config(None, {"cell.preset": "stt_mram"})
    c = cfg.cell
    tab = stt_error_table(cfg, np.array([5.0, 10.0, 20.0, 40.0]))
    rate = math.exp(-c.stt_delta * (1 - c.set_ua / c.stt_ic0_ua)) / c.stt_attempt_ns
    np.testing.assert_allclose(np.log(tab["wer_set_side"]), -tab["pulse_ns"] * rate, rtol=1e-12)
    assert (np.diff(tab["wer_reset_side"]) < 0).all()
    np.testing.assert_allclose(tab["attempts_set_side"], 1 / (1 - tab["wer_set_side"]), rtol=1e-12)
    t = stt_pulse_for_error_rate(1e-9, c.set_ua, c.stt_delta, c.stt_ic0_ua, c.stt_attempt_ns)
    assert stt_write_error_rate(t, c.set_ua, c.stt_delta, c.stt_ic0_ua, c.stt_attempt_ns) == pytest.approx(1e-9)
    s = drift_report(None, cell__preset="stt_mram", refresh__max_fail_prob=1e-9)
    assert s.summary["stt_set_pulse_for_target_ns"] == pytest.approx(t)
    assert "write_error_rate" in s.tables
