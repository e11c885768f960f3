"""Typed schema of one run.

Every field has a default and a unit (in its name or its description).  The
sections are ``run``, ``cell``, ``array``, ``controller``, ``write`` and
``workload``; unknown keys are rejected.  Cell defaults come from the SLC
preset data file so the numbers (and their sources) live in one place.
"""
from __future__ import annotations

import tomllib
from importlib import resources
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field


def preset_path(name: str):
    """Path of a bundled technology preset data file."""
    return resources.files("memsim.config") / "presets" / f"{name}.toml"


def preset_names() -> list[str]:
    folder = resources.files("memsim.config") / "presets"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def load_preset(name: str) -> dict:
    with preset_path(name).open("rb") as fh:
        return tomllib.load(fh)


_SLC = load_preset("pcm_slc")["cell"]


class Section(BaseModel):
    model_config = ConfigDict(extra="forbid", validate_assignment=True)


class RunSection(Section):
    name: str = Field("run", description="Name of the run; results go to <out_dir>/<name>/.",
                      pattern=r"^[A-Za-z0-9_.-]+$")
    seed: int = Field(1, ge=0, description="Seed of every random draw of the run.")
    out_dir: str = Field("results", description="Folder that receives the results folder.")
    chunk_requests: int = Field(65536, ge=1024, description="Requests generated per chunk.")


class CellSection(Section):
    preset: str = Field("pcm_slc", description="Technology preset data file the defaults come from.")
    read_ns: float = Field(_SLC["read_ns"], gt=0, description="Array read latency, ns.")
    set_ns: float = Field(_SLC["set_ns"], gt=0, description="SET pulse width, ns.")
    reset_ns: float = Field(_SLC["reset_ns"], gt=0, description="RESET pulse width, ns.")
    read_ua: float = Field(_SLC["read_ua"], ge=0, description="Read current per bit, uA.")
    set_ua: float = Field(_SLC["set_ua"], gt=0, description="SET current per cell, uA.")
    reset_ua: float = Field(_SLC["reset_ua"], gt=0, description="RESET current per cell, uA.")
    read_pj: float = Field(_SLC["read_pj"], ge=0, description="Read energy per bit, pJ.")
    set_pj: float = Field(_SLC["set_pj"], ge=0, description="SET energy per cell, pJ.")
    reset_pj: float = Field(_SLC["reset_pj"], ge=0, description="RESET energy per cell, pJ.")
    endurance_mean: float = Field(_SLC["endurance_mean"], gt=0,
                                  description="Mean writes a cell survives.")
    endurance_cov: float = Field(_SLC["endurance_cov"], ge=0, lt=1,
                                 description="Coefficient of variation of cell endurance.")
    endurance_dist: Literal["normal", "lognormal"] = Field(
        "lognormal", description="Distribution of cell endurance: lognormal (physically sensible "
                                 "tail) or normal truncated at zero (tail far too heavy over 1e11 cells).")
    # Multi-level cells and drift (see memsim/tech/mlc.py, memsim/tech/drift.py).
    bits_per_cell: Literal[1, 2, 3] = Field(1, description="Bits stored per cell (1 = SLC).")
    level_log10_ohm: list[float] = Field(_SLC["level_log10_ohm"],
                                         description="Target log10 resistance per level, ohm, lowest first.")
    read_thresholds_log10_ohm: list[float] | None = Field(
        None, description="Read thresholds, log10 ohm; none = midpoints.")
    program_sigma_decades: float | list[float] = Field(
        _SLC["program_sigma_decades"], gt=0, description="Spread of log10 R after programming, decades.")
    verify_band_sigma: float | None = Field(
        _SLC["verify_band_sigma"], gt=0, description="Program-and-verify keeps R0 within this many sigma.")
    pv_model: Literal["geometric", "poisson"] = Field("geometric",
                                                      description="Iterations-per-write model.")
    pv_mean_iterations: float | list[float] = Field(1.0, description="Mean program-and-verify iterations per level.")
    pv_max_iterations: int = Field(16, ge=1, description="Cap on program-and-verify iterations.")
    pulse_ns: float | list[float] | None = Field(
        None, description="Programming pulse per level, ns; none = SET pulse for the lowest level, "
                          "RESET pulse for the others.")
    pulse_pj: float | list[float] | None = Field(None, description="Energy per pulse per level, pJ.")
    verify_ns: float | None = Field(None, ge=0, description="Verify read per iteration, ns; none = read_ns.")
    verify_pj: float | None = Field(None, ge=0, description="Verify energy per cell, pJ; none = read_pj.")
    drift_nu: float | list[float] = Field(_SLC["drift_nu"], description="Mean drift exponent per level.")
    drift_nu_rel_sd: float = Field(_SLC["drift_nu_rel_sd"], ge=0,
                                   description="Spread of the drift exponent, fraction of its mean.")
    drift_t0_s: float = Field(1.0, gt=0, description="Reference time of the drift law, s.")
    drift_t_max_s: float = Field(1.0e9, gt=0, description="Longest age the drift law is trusted to, s.")
    drift_activation_ev: float | None = Field(
        None, ge=0, description="Activation energy of drift, eV; none = reference temperature only.")
    drift_reference_k: float = Field(300.0, gt=0, description="Temperature the drift values hold at, K.")


class ArraySection(Section):
    channels: int = Field(1, ge=1, le=64, description="Independent channels, each with a data bus.")
    banks: int = Field(8, ge=1, le=1024, description="Banks per channel.")
    line_bytes: int = Field(64, description="Line (access unit) size, bytes.")
    lines: int = Field(65536, ge=16, le=1 << 26,
                       description="Lines modeled with their content (the modeled capacity).")
    bank_hash: bool = Field(False, description="XOR row bits into the bank index.")
    row_lines: int = Field(0, ge=0, description="Lines per row buffer; 0 = no row buffer.")
    row_hit_ns: float = Field(10.0, gt=0, description="Read latency on a row-buffer hit, ns.")
    burst_ns: float = Field(5.0, ge=0, description="Data-bus time to move one line, ns.")
    bank_budget_ua: float = Field(38400.0, gt=0,
                                  description="Programming current a bank may draw at once, uA.")
    capacity_gib: float = Field(16.0, gt=0,
                                description="Device capacity the modeled lines stand for, GiB "
                                            "(used to scale lifetime).")


class ControllerSection(Section):
    read_queue: int = Field(64, ge=1, description="Read queue entries per bank.")
    write_queue: int = Field(32, ge=1, description="Write queue entries per bank.")
    drain_high: int = Field(24, ge=1, description="Write-queue length that starts a drain.")
    drain_low: int = Field(8, ge=0, description="Write-queue length that ends a drain.")
    idle_writes: bool = Field(True, description="Serve writes when no read waits (outside drains).")
    write_cancel: bool = Field(False, description="Abort an in-flight write when a read arrives at its "
                                                  "bank (outside drains) and re-queue it.")
    cancel_before: float = Field(0.75, gt=0, le=1, description="Cancel only writes that have done less "
                                                               "than this share of their programming.")
    write_pause: bool = Field(False, description="Pause a write between programming rounds to serve "
                                                 "reads that arrived (outside drains).")
    hint_preset: bool = Field(False, description="Act on write hints: pre-program the hinted line to "
                                                 "all-SET in idle time, so the write needs only RESET "
                                                 "pulses.")


class WriteSection(Section):
    scheme: str = Field("data_comparison",
                        description="Write scheme: full_line, data_comparison, flip_n_write or "
                                    "block_erase.")
    word_bits: Literal[8, 16, 32, 64] = Field(32, description="Flip-N-Write word width, bits.")


class WorkloadSection(Section):
    pattern: Literal["uniform", "zipf", "hotspot", "sequential", "strided",
                     "repeated_address", "birthday_attack", "hot_set", "trace"] = Field(
        "uniform", description="Address pattern (repeated_address, birthday_attack and hot_set wear the "
                               "memory out on purpose; trace replays workload.trace).")
    trace: str = Field("", description="Trace file replayed by pattern trace (text, .gz or .parquet); "
                                       "a relative path is taken from the config file's folder.")
    skip_bad: bool = Field(False, description="Skip malformed trace lines (and count them) "
                                              "instead of stopping.")
    attack_line: int = Field(0, ge=0, description="Line hammered by repeated_address.")
    burst: int = Field(1000, ge=1, description="Writes per hammered line (birthday_attack).")
    hot_lines: int = Field(16, ge=1, description="Size of the hot set (hot_set).")
    requests: int = Field(100_000, ge=1, description="Requests to issue (in lines).")
    read_fraction: float = Field(0.7, ge=0, le=1, description="Share of requests that are reads.")
    footprint_lines: int = Field(0, ge=0, description="Lines touched; 0 = all modeled lines.")
    size_lines: int = Field(1, ge=1, le=64, description="Consecutive lines per request.")
    zipf_exponent: float = Field(1.0, gt=0, description="Zipf exponent s (pattern zipf).")
    hot_fraction: float = Field(0.1, gt=0, lt=1, description="Share of footprint that is hot.")
    hot_share: float = Field(0.9, gt=0, lt=1, description="Share of accesses that go to hot lines.")
    hot_layout: Literal["scattered", "contiguous"] = Field(
        "scattered", description="Where hot lines sit (hotspot, zipf): scattered over the footprint, or "
                                 "one run of adjacent lines (zipf: rank k on line k).")
    stride_lines: int = Field(1, ge=1, description="Stride in lines (pattern strided).")
    arrival: Literal["poisson", "fixed", "onoff", "closed"] = Field(
        "poisson", description="Arrival process; closed = a fixed number outstanding.")
    interval_ns: float = Field(50.0, gt=0, description="Mean time between arrivals, ns.")
    on_ns: float = Field(20_000.0, gt=0, description="Mean burst length (arrival onoff), ns.")
    off_ns: float = Field(20_000.0, gt=0, description="Mean idle gap (arrival onoff), ns.")
    outstanding: int = Field(16, ge=1, description="Requests in flight (arrival closed).")
    hint_lead_ns: float = Field(0.0, ge=0, description="Announce every write by a hint this long "
                                                       "before it, ns; 0 = no hints.")
    data: Literal["random", "flip", "zeros", "ones"] = Field(
        "random", description="Data model of written content.")
    flip_fraction: float = Field(0.1, ge=0, le=1, description="Share of bits a write changes (data flip).")
    one_fraction: float = Field(0.1, ge=0, le=1,
                                description="Probability of a 1 bit (data zeros; data ones uses 1 - it).")


class LevelingSection(Section):
    scheme: str = Field("none", description="Wear leveler (memsim list shows the names).")
    psi: int = Field(100, ge=1, description="Start-Gap: user writes between gap moves.")
    regions: int = Field(8, ge=1, description="Region Start-Gap: number of regions.")
    randomize: bool = Field(False, description="Region Start-Gap: randomize addresses first.")
    rounds: int = Field(4, ge=1, description="Feistel rounds of the address randomizer.")
    region_lines: int = Field(0, ge=0, description="Lines per region (security_refresh, hot_cold_swap); "
                                                  "0 = the scheme's default.")
    interval: int = Field(100, ge=1, description="Writes between key-rotation swaps (security_refresh) or "
                                                "between rotation steps (bit_rotation).")
    period: int = Field(10000, ge=1, description="Hot/cold swap: writes between swaps.")
    table_writes_per_swap: int = Field(2, ge=0, description="Hot/cold swap: table line writes per swap.")
    step: int = Field(8, ge=1, description="Bit rotation: bits the offset advances per step.")
    inner: str = Field("none", description="Bit rotation: line remapper underneath it.")


class LifetimeSection(Section):
    method: Literal["extrapolated", "run_to_failure", "both"] = Field(
        "both", description="Lifetime method of memsim lifetime.")
    ecp_entries: int = Field(6, ge=0, description="Failed cells a line survives (ECP correction entries); "
                                                 "6 = ECP-6, the usual baseline.")
    capacity_loss: float = Field(0.0, ge=0, lt=1,
                                 description="End of life at this share of lines dead; 0 = first dead line.")
    endurance_scale: float = Field(1e4, ge=1, description="Run to failure: endurance divided by this.")
    write_rate_gbps: float = Field(0.0, ge=0, description="Write rate for years, GB/s; 0 = from the run.")
    window_writes: int = Field(0, ge=0, description="User writes the wear engine measures; 0 = "
                                                   "workload.requests.")
    timing_max_noise: float = Field(0.1, gt=0, description="Timing runs: largest relative counting noise "
                                                           "of the most-worn line, sqrt(2 ln lines / its "
                                                           "writes), for which a lifetime is given; above "
                                                           "it the lifetime keys are null.")


class RefreshSection(Section):
    policy: Literal["none", "periodic", "drift", "scrub"] = Field(
        "none", description="Refresh policy: none, periodic (every line every interval_s), drift "
                            "(a line is refreshed when its age since its last write reaches the refresh "
                            "age), scrub (a read that sees more than scrub_errors errors rewrites the line).")
    interval_s: float = Field(3600.0, gt=0, description="Refresh period of the periodic policy, s.")
    temperature_k: float = Field(300.0, gt=0, description="Operating temperature, K.")
    correctable_bits: int = Field(8, ge=0, description="Bit errors the line ECC corrects.")
    max_fail_prob: float = Field(1e-9, gt=0, lt=1,
                                 description="Target probability that a line is uncorrectable at refresh.")
    fail_model: Literal["binomial", "exact"] = Field("binomial", description="Line failure model.")
    scrub_errors: int = Field(4, ge=0, description="Errors a read may see before scrub rewrites the line.")
    start: Literal["spread", "fresh"] = Field(
        "spread", description="Line ages at the start: spread evenly over one refresh interval "
                              "(steady state) or all freshly written.")
    scan_fraction: float = Field(1 / 16, gt=0, le=1,
                                 description="Refresh scan period as a fraction of the refresh age.")


class EraseSection(Section):
    block_lines: int = Field(16, ge=1, description="Lines per erase block (write.scheme block_erase).")
    spare_fraction: float = Field(0.15, gt=0, lt=1, description="Over-provisioned share of physical lines.")
    init_state: Literal["set", "reset"] = Field(
        "set", description="State blocks are bulk-initialized to (set: writes need only RESET pulses).")
    victim: Literal["greedy", "cost_benefit", "fifo"] = Field("greedy",
                                                              description="Cleaner's victim choice.")
    low_watermark: int = Field(2, ge=2, description="Free blocks below which the bank cleans in the "
                                                    "foreground.")
    idle_blocks: int = Field(4, ge=0, description="Free blocks the bank keeps by cleaning in idle time.")
    fallback: Literal["in_place", "wait"] = Field(
        "in_place", description="When no initialized line is free: write in place, or wait for a clean.")


class PowerSection(Section):
    budget_ua: float = Field(0.0, ge=0, description="Programming current the scope may draw at once, uA; "
                                                    "0 = only the per-bank budget.")
    scope: Literal["channel", "device"] = Field("device", description="What shares the budget.")


class RunConfig(Section):
    """A whole run: memory system plus workload."""

    run: RunSection = Field(default_factory=RunSection)
    cell: CellSection = Field(default_factory=CellSection)
    array: ArraySection = Field(default_factory=ArraySection)
    controller: ControllerSection = Field(default_factory=ControllerSection)
    write: WriteSection = Field(default_factory=WriteSection)
    workload: WorkloadSection = Field(default_factory=WorkloadSection)
    refresh: RefreshSection = Field(default_factory=RefreshSection)
    leveling: LevelingSection = Field(default_factory=LevelingSection)
    lifetime: LifetimeSection = Field(default_factory=LifetimeSection)
    power: PowerSection = Field(default_factory=PowerSection)
    erase: EraseSection = Field(default_factory=EraseSection)

    @property
    def footprint(self) -> int:
        return self.workload.footprint_lines or self.array.lines
