"""Workloads sized in device lines (workload.sizing = device_lines): lifetime at device scale."""
from __future__ import annotations

import numpy as np
import pytest
from conftest import DEMO, memsim_cli

from memsim.experiment.lifetime import lifetime
from memsim.policy.leveling import fixed_wear as fw
from memsim.policy.leveling.device_wear import start_gap_device_wear
from memsim.workload.device_traffic import DeviceTraffic, device_traffic, runs_of, zipf_runs

LEVELERS = ("none", "start_gap", "randomized_start_gap", "region_start_gap", "security_refresh", "hot_cold_swap")
PATTERNS = {
    "uniform": {},
    "zipf": {"workload__hot_layout": "contiguous"},
    "hot_region": {"workload__pattern": "hotspot", "workload__hot_layout": "contiguous",
                   "workload__hot_lines": 4, "workload__hot_share": 0.5},
}


def _life(lines: int, leveler: str, pattern: str) -> dict:
    kw = {"workload__pattern": pattern, **PATTERNS[pattern]}
    return lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=lines,
                    array__capacity_gib=1.0, workload__sizing="device_lines", workload__requests=4000,
                    leveling__scheme=leveler, **kw).summary


@pytest.mark.parametrize("pattern", list(PATTERNS))
@pytest.mark.parametrize("leveler", LEVELERS)
def test_lifetime_does_not_depend_on_the_modeled_line_count(leveler: str, pattern: str) -> None:
    # A workload fixed in device lines on a fixed device: array.lines 16-fold
    # apart must give the same lifetime (within 5%) or null with a note at both.
    a, b = _life(256, leveler, pattern), _life(4096, leveler, pattern)
    if a["lifetime_years"] is None or b["lifetime_years"] is None:
        assert a["lifetime_years"] is None and b["lifetime_years"] is None
        assert a["lifetime_note"] and b["lifetime_note"]
        return
    assert b["lifetime_years"] == pytest.approx(a["lifetime_years"], rel=0.05)
    assert a["lifetime_leveling_scale"] == "device"


def test_which_combinations_give_a_number() -> None:
    # Uniform traffic: every leveler; the small hot region: no leveling, plain
    # and randomized Start-Gap.  Security Refresh over the device cannot keep
    # a hot line's writes of one round small against its endurance: null.
    for lv in LEVELERS:
        assert _life(256, lv, "uniform")["lifetime_years"] > 0
    for lv in ("none", "start_gap", "randomized_start_gap"):
        assert _life(256, lv, "hot_region")["lifetime_years"] > 0
    assert _life(256, "security_refresh", "hot_region")["lifetime_note"]


def test_start_gap_uniform_is_psi_over_psi_plus_one_of_no_leveling() -> None:
    # Uniform full-line traffic: Start-Gap adds one gap move per psi writes,
    # so lifetime is psi / (psi + 1) of perfect leveling (Qureshi et al., MICRO 2009).
    none = _life(256, "none", "uniform")["lifetime_years"]
    sg = _life(256, "start_gap", "uniform")["lifetime_years"]
    assert sg / none == pytest.approx(100 / 101, rel=1e-3)


def _hot(d: int, h: int, phi: float, at: int = 1000) -> DeviceTraffic:
    b, r = runs_of(np.array([at]), np.array([h]), np.array([phi / h]), d, (1 - phi) / (d - h))
    return DeviceTraffic(b, r, True)


def _sharp(x_death: float):
    # No endurance spread: every line dies at x_death write equivalents.
    return lambda x: (np.asarray(x) >= x_death).astype(np.float64)


def test_start_gap_hot_region_closed_form() -> None:
    # Derived from the Start-Gap registers (Qureshi et al., MICRO 2009): with
    # G = (D + 1) psi device writes per gap cycle, Start advances K = W / G
    # lines over W writes.  The physical line above a contiguous region of h
    # lines with share phi takes every write of the K logical lines below it:
    #   K <= h: wear = W phi / h + K                 (no spreading at all)
    #   K >  h: wear = G phi + (W - G h) v_c + K      (the region spread over K lines)
    # with v_c = (1 - phi) / (D - h); life ends when that reaches the death wear X.
    d, h, psi, x = 1 << 24, 64, 100, 1e8
    g = (d + 1.0) * psi
    phi = 0.5
    w = fw.start_gap_writes(_hot(d, h, phi), _sharp(x), 1, psi)
    closed = x / (phi / h + 1 / g)
    assert w / g < h
    assert w == pytest.approx(closed, rel=1e-6)
    phi = 0.05
    vc = (1 - phi) / (d - h)
    w = fw.start_gap_writes(_hot(d, h, phi), _sharp(x), 1, psi)
    closed = (x - g * phi + g * h * vc) / (vc + 1 / g)
    assert w / g > h
    assert w == pytest.approx(closed, rel=1e-6)


def test_randomized_start_gap_removes_the_hot_region_effect() -> None:
    # The static randomizer scatters the region's lines: a hot line then
    # wears a physical line for one gap cycle only, G phi / h, far below the
    # death wear, while plain Start-Gap keeps the whole region above one line.
    d, h, psi, x = 1 << 24, 64, 100, 1e8
    cdf = _sharp(x)
    sg = fw.start_gap_writes(_hot(d, h, 0.5), cdf, 1, psi)
    none = fw.none_writes(_hot(d, h, 0.5), cdf, 1)
    rsg = fw.randomized_start_gap_writes(_hot(d, h, 0.5), cdf, 1, psi)
    assert sg == pytest.approx(none, rel=1e-3)          # no better than no leveling
    assert rsg > 1000 * sg
    # Where the region sits, or whether it is one run at all, does not matter to it.
    rng = np.random.default_rng(3)
    scattered = device_traffic(_Wl("hotspot", "scattered", h, 0.5), d, rng)
    assert fw.randomized_start_gap_writes(scattered, cdf, 1, psi) == pytest.approx(rsg, rel=1e-9)
    assert fw.randomized_start_gap_writes(_hot(d, h, 0.5, at=d // 3), cdf, 1, psi) == pytest.approx(rsg, rel=1e-9)


class _Wl:
    def __init__(self, pattern: str, layout: str, hot_lines: int, hot_share: float, zipf_exponent: float = 1.0):
        self.pattern, self.hot_layout, self.hot_lines = pattern, layout, hot_lines
        self.hot_share, self.zipf_exponent = hot_share, zipf_exponent


def test_start_gap_wear_agrees_with_the_block_form_at_one_line_per_block() -> None:
    # Cross-check with memsim.policy.leveling.device_wear (checked there against a
    # replay of the real leveler): one modeled line per device line.
    n, psi = 4096, 100
    rates = np.full(n, 0.5 / (n - 8))
    rates[100:108] = 0.5 / 8
    t = _hot(n, 8, 0.5, at=100)
    for w in (1e6, 3e7, 1e9, 5e10):
        a = start_gap_device_wear(rates, w, psi, 1.0)
        b = fw.start_gap_wear(t, np.arange(n), w, psi)
        assert b.max() == pytest.approx(a.max(), rel=1e-3)


def test_zipf_runs_hold_the_zipf_shares() -> None:
    # Shares k^-s / H_{d,s} (the Zipf law); generalized harmonic number summed directly.
    d, s = 200_000, 1.0
    b, r = zipf_runs(d, s)
    k = np.arange(1, d + 1, dtype=np.float64)
    exact = k**-s / np.sum(k**-s)
    assert np.sum(r * np.diff(b)) == pytest.approx(1.0, rel=1e-12)
    assert r[0] == pytest.approx(exact[0], rel=1e-4)
    mid = np.searchsorted(b, 150_000, side="right") - 1
    assert r[mid] == pytest.approx(exact[b[mid]:b[mid + 1]].mean(), rel=1e-4)


def test_timing_run_lifetime_keys_follow_the_device_layout() -> None:
    from memsim.experiment.run import simulate

    s = [simulate(None, array__lines=n, array__capacity_gib=1.0, workload__requests=3000,
                  workload__sizing="device_lines", workload__pattern="hotspot",
                  workload__hot_layout="contiguous", workload__hot_lines=4, lifetime__write_rate_gbps=1.0,
                  leveling__scheme="start_gap").summary for n in (256, 4096)]
    assert s[0]["lifetime_years"] == pytest.approx(s[1]["lifetime_years"], rel=0.05)
    assert s[0]["lifetime_traffic"] == "device_lines"


@pytest.mark.parametrize("over, key", [
    (("workload.sizing=device_lines", "workload.pattern=sequential"), "workload.sizing"),
    (("workload.sizing=device_lines", "workload.footprint_lines=100"), "workload.footprint_lines"),
    (("workload.sizing=device_lines", "workload.size_lines=2"), "workload.size_lines"),
    (("workload.sizing=device_lines", "workload.pattern=hotspot", "workload.hot_lines=100000000000000"),
     "workload.hot_lines"),
    (("workload.sizing=lines",), "workload.sizing"),
])
def test_bad_sizing_is_one_line_naming_the_key(over: tuple, key: str, tmp_path) -> None:
    args = [a for o in over for a in ("--set", o)]
    r = memsim_cli("lifetime", DEMO, *args, "--write-rate", "1", "--out", tmp_path / "out")
    assert r.code == 2
    assert r.err.count("\n") == 1 and key in r.err


def test_fold_puts_a_small_hot_region_on_one_or_two_modeled_lines() -> None:
    from memsim.config import RunConfig
    from memsim.workload.device_traffic import folded_address

    cfg = RunConfig.model_validate({"array": {"lines": 1024, "capacity_gib": 1.0},
                                    "workload": {"pattern": "hotspot", "sizing": "device_lines",
                                                 "hot_layout": "contiguous", "hot_lines": 4, "hot_share": 0.5}})
    fold = folded_address(cfg, 1024)
    e = fold.expected_shares()
    assert e.sum() == pytest.approx(1.0, rel=1e-12)
    hot = np.sort(e)[::-1]
    # Half the writes on the 4 hot device lines, the rest spread over 2^24 - 4.
    assert hot[:2].sum() == pytest.approx(0.5 + 2 * 0.5 * (1 << 14) / ((1 << 24) - 4), rel=1e-3)
    # Draws follow the expected shares (binomial 5-sigma bound on the hot lines' count).
    x = fold.draw(np.random.default_rng(5), 200_000)
    top = np.argsort(e)[::-1][:2]
    got = np.isin(x, top).mean()
    assert abs(got - hot[:2].sum()) < 5 * np.sqrt(0.25 / 200_000)
    assert x.min() >= 0 and x.max() < 1024


def _trace(path, rng: np.random.Generator, d: int, hot: tuple[int, ...], n: int = 4000) -> None:
    # Half the writes on a few adjacent device lines, the rest spread over the device.
    lines = np.where(rng.random(n) < 0.5, rng.choice(hot, n), rng.integers(0, d, n))
    rows = "\n".join(f"{10 * i},W,{q}" for i, q in enumerate(lines.tolist()))
    path.write_text("time_ns,op,line\n" + rows + "\n")


def test_trace_addresses_are_device_lines(tmp_path) -> None:
    d = 1 << 24                                   # 1 GiB of 64-byte lines
    hot = (5_000_000, 5_000_001, 5_000_002, 5_000_003)
    tr = tmp_path / "t.csv"
    _trace(tr, np.random.default_rng(2), d, hot)
    base = {"workload__pattern": "trace", "workload__trace": str(tr), "workload__sizing": "device_lines",
            "array__capacity_gib": 1.0, "workload__read_fraction": 0.0}

    def years(lines: int, lv: str) -> float:
        return lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=lines,
                        leveling__scheme=lv, **base).summary["lifetime_years"]

    # The device addresses decide, not the modeled line count.
    for lv in ("none", "start_gap"):
        assert years(4096, lv) == pytest.approx(years(256, lv), rel=0.05)
    # A trace's counted shares take many values, a few of them very hot: the
    # normal approximation of randomized Start-Gap does not hold -> null at both.
    assert years(4096, "randomized_start_gap") is None and years(256, "randomized_start_gap") is None
    # Four adjacent device lines with half the writes: plain Start-Gap cannot
    # move across them in the device's life (K = W / ((D + 1) psi) < 4, the
    # closed form above, Qureshi et al., MICRO 2009), so it lasts as long as no
    # leveling.
    assert years(256, "start_gap") == pytest.approx(years(256, "none"), rel=0.02)

    # The timing run folds device line q onto modeled line floor(q N / D).
    from memsim.experiment.build import write_stream
    from memsim.experiment.run import resolve

    cfg = resolve(None, {k.replace("__", "."): v for k, v in base.items()} | {"array.lines": 1024})
    w = np.concatenate(list(write_stream(cfg, endless=False)))
    assert w.max() < 1024
    top = np.bincount(w, minlength=1024).argmax()
    assert top == hot[0] * 1024 // d


def test_trace_line_beyond_the_device_is_one_line_error(tmp_path) -> None:
    tr = tmp_path / "t.csv"
    tr.write_text("time_ns,op,line\n0,W,20000000\n")
    r = memsim_cli("run", DEMO, "--set", "workload.pattern=trace", "--set", f"workload.trace={tr}",
                   "--set", "workload.sizing=device_lines", "--set", "array.capacity_gib=1",
                   "--out", tmp_path / "o")
    assert r.code == 2 and r.err.count("\n") == 1 and "t.csv" in r.err


def test_levelers_without_a_device_lines_evaluation_give_null_with_a_note() -> None:
    from memsim.experiment.run import simulate

    s = _life(256, "bit_rotation", "uniform")
    assert s["lifetime_years"] is None and "not evaluated" in s["lifetime_note"]
    t = simulate(None, array__lines=256, array__capacity_gib=1.0, workload__requests=2000,
                 workload__sizing="device_lines", leveling__scheme="bit_rotation").summary
    assert t["lifetime_years"] is None and "not evaluated" in t["lifetime_note"]


@pytest.mark.parametrize("leveler", ["none", "start_gap"])
def test_device_lines_agree_with_the_modeled_evaluation_at_one_line_per_device_line(leveler: str) -> None:
    # A small device (4096 lines) modeled line for line: the same contiguous
    # hot region of 64 lines with half the writes, once sized in device lines
    # (median from the expected dead count) and once as a share of the
    # modeled lines (sampled cells; checked against a replay of the real
    # leveler in tests/test_device_wear.py).  Within 3% (the spread of the
    # weakest sampled line).
    cap = 4096 * 64 / 2**30
    common = dict(write_rate_gbps=1.0, array__lines=4096, array__capacity_gib=cap, workload__pattern="hotspot",
                  workload__hot_layout="contiguous", workload__hot_share=0.5, leveling__scheme=leveler,
                  workload__read_fraction=0.0, lifetime__window_writes=400_000)
    a = lifetime(None, method="extrapolated", workload__sizing="device_lines", workload__hot_lines=64,
                 **common).summary
    b = lifetime(None, method="both" if leveler == "none" else "extrapolated", workload__hot_fraction=64 / 4096,
                 lifetime__endurance_scale=1e4, **common).summary
    assert a["lifetime_years"] == pytest.approx(b["lifetime_years"], rel=0.03)
    if leveler == "none":
        # Replaying every write to failure (scaled endurance, no leveler to outrun).
        assert a["lifetime_years"] == pytest.approx(b["lifetime_replay_years"], rel=0.03)


@pytest.mark.parametrize("at", [5000, 1022])
def test_security_refresh_regions_closed_form(at: int) -> None:
    # Regions of R device lines, each re-keyed over many rounds: every line
    # of region g wears at phi_g / R (1 + 1 / interval) (Seong et al., ISCA
    # 2010).  A hot run of 4 lines with half the writes inside one region,
    # or across a region boundary (at 1022: two regions share it).  The
    # median end of life solves sum_g R cdf(W rate_g) = ln 2 (derived here).
    from scipy.optimize import brentq

    from memsim.metrics.death_law import DeathLaw
    from memsim.tech.endurance import EnduranceModel

    d, r, interval, h, phi = 1 << 20, 1024, 100, 4, 0.5
    law = DeathLaw(EnduranceModel(1e8, 0.2), 512, 2, 0.5)
    cold = (1 - phi) / (d - h)
    b, v = runs_of(np.array([at]), np.array([h]), np.array([phi / h]), d, cold)
    traffic = DeviceTraffic(b, v, True)
    weak = float(law.ppf(np.array([1.0 / d]))[0])
    got = fw.security_refresh_writes(traffic, law.cdf, 1, interval, weak, r)
    share = np.full(d // r, cold * r)
    for q in range(at, at + h):
        share[q // r] += phi / h - cold
    step = 1 + 1 / interval
    want = brentq(lambda w: r * float(law.cdf(w * share / r * step).sum()) - np.log(2), 1.0, 1e20, rtol=1e-12)
    assert got == pytest.approx(want, rel=1e-6)


@pytest.mark.parametrize("pattern", list(PATTERNS))
def test_security_refresh_regions_do_not_depend_on_the_modeled_line_count(pattern: str) -> None:
    kw = {"workload__pattern": pattern, **PATTERNS[pattern]}
    a, b = (lifetime(None, write_rate_gbps=1.0, method="extrapolated", array__lines=n, array__capacity_gib=1.0,
                     workload__sizing="device_lines", workload__requests=4000, leveling__scheme="security_refresh",
                     leveling__region_lines=1024, **kw).summary for n in (256, 4096))
    assert a["lifetime_years"] > 0 and a["lifetime_leveling_scale"] == "device"
    assert b["lifetime_years"] == pytest.approx(a["lifetime_years"], rel=0.05)


def test_security_refresh_regions_agree_with_the_modeled_evaluation_at_one_line_per_device_line() -> None:
    # The same 4096-line device and hot region (64 lines, half the writes)
    # sized in device lines and as a share of the modeled lines, regions of
    # 256 lines (the modeled figure is checked against a replay in
    # tests/test_device_wear.py).  Within 3% (the spread of the weakest sampled line).
    cap = 4096 * 64 / 2**30
    common = dict(write_rate_gbps=1.0, method="extrapolated", array__lines=4096, array__capacity_gib=cap,
                  workload__pattern="hotspot", workload__hot_layout="contiguous", workload__hot_share=0.5,
                  leveling__scheme="security_refresh", leveling__region_lines=256, leveling__interval=4,
                  workload__read_fraction=0.0, lifetime__window_writes=400_000)
    a = lifetime(None, workload__sizing="device_lines", workload__hot_lines=64, **common).summary
    b = lifetime(None, workload__hot_fraction=64 / 4096, **common).summary
    assert b["lifetime_leveling_scale"] == "device"
    assert a["lifetime_years"] == pytest.approx(b["lifetime_years"], rel=0.03)


@pytest.mark.parametrize("pattern", ["hotspot", "zipf"])
def test_region_start_gap_agrees_with_the_modeled_evaluation_at_one_line_per_device_line(pattern: str) -> None:
    # Region Start-Gap (Qureshi et al., MICRO 2009) on a 4096-line device,
    # sized in device lines and as modeled lines one per device line (the
    # modeled figure is checked against a replay in tests/test_device_wear.py);
    # first death.  Within 3% (the spread of the weakest sampled line).
    cap = 4096 * 64 / 2**30
    common = dict(write_rate_gbps=1.0, method="extrapolated", array__lines=4096, array__capacity_gib=cap,
                  workload__pattern=pattern, workload__hot_layout="contiguous", workload__hot_share=0.5,
                  leveling__scheme="region_start_gap", leveling__psi=20, lifetime__capacity_loss=0.0,
                  workload__read_fraction=0.0, lifetime__window_writes=400_000)
    a = lifetime(None, workload__sizing="device_lines", workload__hot_lines=64, **common).summary
    b = lifetime(None, workload__hot_fraction=64 / 4096, **common).summary
    assert b["lifetime_leveling_scale"] == "device"
    assert a["lifetime_years"] == pytest.approx(b["lifetime_years"], rel=0.03)


def test_region_start_gap_uniform_is_psi_over_psi_plus_one_of_no_leveling() -> None:
    # Uniform traffic: each region's lines take its writes and one gap move
    # per psi of them, over n + 1 lines for n logical ones (Qureshi et al.,
    # MICRO 2009); n = 2^21 here, so psi / (psi + 1) of no leveling.
    none = _life(256, "none", "uniform")["lifetime_years"]
    rsg = _life(256, "region_start_gap", "uniform")["lifetime_years"]
    assert rsg / none == pytest.approx(100 / 101, rel=1e-3)


def test_trace_made_in_device_lines_holds_device_lines_and_replays_to_the_same_run(tmp_path) -> None:
    # trace make on a workload sized in device lines writes the device lines
    # (up to capacity / line size), not the folded modeled ones; replayed with
    # the same sizing the trace folds to the same stream, so the run agrees.
    from memsim import make_trace, simulate
    from memsim.workload.trace import read_trace

    cfg = {"array": {"lines": 1024, "capacity_gib": 1.0},
           "workload": {"pattern": "hotspot", "sizing": "device_lines", "hot_layout": "contiguous",
                        "hot_lines": 8, "hot_share": 0.5, "requests": 6000, "data": "random"},
           "run": {"seed": 4}}
    tr = tmp_path / "dev.csv"
    make_trace(cfg, tr)
    lines = np.concatenate([c.line for c in read_trace(tr, footprint=1 << 24)])
    assert lines.max() >= 1024                       # device lines, not modeled ones
    assert lines.max() < 1 << 24
    direct = simulate(cfg).summary
    replay = simulate({**cfg, "workload": {"pattern": "trace", "trace": str(tr), "sizing": "device_lines",
                                           "data": "random"}}).summary
    for key in ("write_latency_mean_ns", "read_latency_mean_ns", "cells_programmed_per_write", "simulated_ns"):
        assert replay[key] == direct[key], key
