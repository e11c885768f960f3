"""Typed schema of one run.

Every field has a default and a unit (in its name or its description).  The
sections are ``run``, ``cell``, ``array``, ``controller``, ``write``,
``workload``, ``refresh``, ``leveling``, ``lifetime``, ``power``,
``erase``, ``cache`` and ``energy``; unknown keys are rejected.  Cell defaults come from the SLC preset
data file so the numbers (and their sources) live in one place.

Fields that name a part (``write.scheme``, ``leveling.scheme``,
``leveling.inner``, ``refresh.policy``, ``erase.victim``) are plain strings
here: their registries live in ``policy/``, an outer layer this module may
not import.  :mod:`memsim.experiment.checks` checks the names against the
registries when a run config is resolved and writes the registered names
into these fields' descriptions.

Types are strict (pydantic strict mode) where a loose reading would give a
silently wrong run: an integer field takes integers only (not ``true``, not
``1e5``), a switch takes only ``true``/``false``, a number field takes no
``true``/``false`` or string, and no number field takes NaN or an infinity
(none of them has a meaning for infinity; a field that some day needs it must
say so in its description and opt out).  Sizes that cannot fit in memory or
run in sane time are bounded here, before anything runs.
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from importlib import resources
from importlib.resources.abc import Traversable
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field
from pydantic_core import PydanticCustomError

from memsim.registry import Registry


@dataclass(frozen=True)
class Preset:
    """A bundled technology preset: a TOML data file of config defaults (``cell.preset``)."""

    name: str
    summary: str            # the file's first comment line

    def path(self) -> Traversable:
        return resources.files("memsim.config") / "presets" / f"{self.name}.toml"

    def load(self) -> dict:
        with self.path().open("rb") as fh:
            return tomllib.load(fh)


def _bundled_presets() -> list[Preset]:
    folder = resources.files("memsim.config") / "presets"
    out = []
    for p in sorted(folder.iterdir(), key=lambda p: p.name):
        if p.name.endswith(".toml"):
            head = []
            for line in p.read_text().splitlines():
                if not line.startswith("#"):
                    break
                head.append(line.lstrip("# "))
            first = " ".join(head).split(". ")[0].split(": ")[0].rstrip(".")
            out.append(Preset(p.name[:-5], first))
    return out


# Presets are found by name here like every other named part (memsim.registry).
PRESETS: Registry[Preset] = Registry("technology preset", "cell.preset", load=_bundled_presets)


def preset_path(name: str) -> Traversable:
    """Path of a bundled technology preset data file."""
    return PRESETS.get_part(name).path()


def preset_names() -> list[str]:
    """Names of the bundled technology presets."""
    return PRESETS.names()


def load_preset(name: str) -> dict:
    """The tables of bundled preset ``name`` (ConfigError naming cell.preset if unknown)."""
    return PRESETS.get_part(name).load()


_SLC = load_preset("pcm_slc")["cell"]


def _whole(value: Any) -> Any:
    """Refuse booleans for an integer choice (``Literal[1, 2, 3]`` would take ``true`` as 1)."""
    if isinstance(value, bool):
        raise PydanticCustomError("int_type", "an integer (not true/false)")
    return value


# The two integer choices: a Literal lets True through as 1 even in strict mode.
WholeChoice = BeforeValidator(_whole)


def _levels(lo: float, strict_lo: bool):
    """One number for every level, or a list with one number per level, each ``> lo`` (or ``>= lo``).

    The per-level length is checked against ``cell.bits_per_cell`` after the
    whole config is read (see ``memsim.config.load.check_consistency``).
    """
    bound = f"> {lo:g}" if strict_lo else f">= {lo:g}"

    def check(value: Any) -> Any:
        items = value if isinstance(value, list) else [value]
        if isinstance(value, list) and not value:
            raise PydanticCustomError("level_values", "one number, or a list with one number per level")
        for v in items:
            ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and (
                v > lo if strict_lo else v >= lo)
            if not ok:
                raise PydanticCustomError(
                    "level_values", "finite numbers {bound} (one, or one per level); {bad} is not",
                    {"bound": bound, "bad": repr(v)})
        return [float(v) for v in value] if isinstance(value, list) else float(value)

    return BeforeValidator(check)


PerLevelPositive = Annotated[float | list[float], _levels(0.0, True)]
PerLevelNonNegative = Annotated[float | list[float], _levels(0.0, False)]
PerLevelAtLeastOne = Annotated[float | list[float], _levels(1.0, False)]

# The largest run the timing engine takes: every request keeps its arrival,
# finish and latency (25 bytes) until the summary, and the engine serves
# roughly 10^5 requests per second (measured on the demo config), so 5e7
# requests is about 1.3 GB and ten minutes or so.
MAX_REQUESTS = 50_000_000
# The wear engine fast-forwards roughly 10^7 writes per second (measured on
# workloads/lifetime_tide_archive.toml); 1e10 writes is a long but finite run.
MAX_WINDOW_WRITES = 10_000_000_000
# Times beyond a day of simulated time between two events are not a memory
# workload; they only push the clock towards overflow.
MAX_GAP_NS = 86_400e9
# Content of the modeled lines (array.lines x array.line_bytes) a run may hold:
# the write path keeps it with per-line state of a few hundred bytes more per
# line (measured: about 3 GB for 4 Mi lines of 64 bytes).
MAX_MODELED_BYTES = 1 << 30
# Longest hint lead: the trace reader's default bound on how far a hint may
# run ahead (memsim.workload.trace_format.DEFAULT_MAX_LEAD_NS), so a trace made
# from the config replays; longer leads make the generator hold every request
# in between.
MAX_LEAD_NS = 1e6
# A kiloampere: far beyond any chip, small enough that cells per round stay machine integers.
MAX_CURRENT_UA = 1e9
# Why a bound is there, appended to the one-line error that quotes it.
LIMIT_NOTES = {
    "run.chunk_requests": "each chunk of requests is held in memory with its write content",
    "workload.requests": "every request's latency is kept in memory; use more seeds or a sweep for more",
    "lifetime.window_writes": "a longer window would run for hours",
    "workload.interval_ns": "a day of simulated time",
    "workload.on_ns": "a day of simulated time",
    "workload.off_ns": "a day of simulated time",
    "workload.hint_lead_ns": "the longest lead a trace replays",
}


class Section(BaseModel):
    # strict: no bool for a number, no number for a bool, no float for an int.
    # allow_inf_nan=False: NaN and infinities are refused in every float field.
    model_config = ConfigDict(extra="forbid", validate_assignment=True, strict=True, allow_inf_nan=False)


class RunSection(Section):
    name: str = Field("run", description="Name of the run; results go to <out_dir>/<name>/.",
                      pattern=r"^[A-Za-z0-9_.-]+$")
    seed: int = Field(1, ge=0, description="Seed of every random draw of the run.")
    out_dir: str = Field("results", description="Folder that receives the results folder.")
    chunk_requests: int = Field(65536, ge=1024, le=1 << 22,
                                description="Requests generated per chunk (memory grows with it).")
    engine: Literal["fast", "reference"] = Field(
        "fast", description="Timing engine: fast (compiled) or reference (simpy); a feature the fast "
                            "engine lacks runs on the reference (summary key engine).")
    keep_requests: bool = Field(False, description="Keep per-request arrival and finish times in memory "
                                                   "(the summary never needs them).")


class CellSection(Section):
    preset: str = Field("pcm_slc", description="Technology preset data file the defaults come from.")
    technology: Literal["pcm", "reram", "stt_mram"] = Field(
        "pcm", description="Cell technology (memsim/tech/technology.py): pcm, reram or stt_mram.")
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
    bits_per_cell: Annotated[Literal[1, 2, 3], WholeChoice] = Field(1, description="Bits stored per cell (1 = SLC).")
    tri_level: bool = Field(False, description="Tri-level cells: three levels per cell, two cells per "
                                               "3-bit word (bits_per_cell is then not used).")
    level_log10_ohm: list[float] = Field(_SLC["level_log10_ohm"],
                                         description="Target log10 resistance per level, ohm, lowest first.")
    read_thresholds_log10_ohm: list[float] | None = Field(
        None, description="Read thresholds, log10 ohm; none = midpoints.")
    program_sigma_decades: PerLevelPositive = Field(
        _SLC["program_sigma_decades"], description="Spread of log10 R after programming, decades.")
    verify_band_sigma: float | None = Field(
        _SLC["verify_band_sigma"], gt=0, description="Program-and-verify keeps R0 within this many sigma.")
    pv_model: Literal["geometric", "poisson"] = Field("geometric",
                                                      description="Iterations-per-write model.")
    pv_mean_iterations: PerLevelAtLeastOne = Field(1.0, description="Mean program-and-verify iterations per level.")
    pv_max_iterations: int = Field(16, ge=1, le=1024, description="Cap on program-and-verify iterations.")
    pulse_ns: PerLevelNonNegative | None = Field(
        None, description="Programming pulse per level, ns; none = SET pulse for the lowest level, "
                          "RESET pulse for the others.")
    pulse_pj: PerLevelNonNegative | None = Field(None, description="Energy per pulse per level, pJ.")
    verify_ns: float | None = Field(None, ge=0, description="Verify read per iteration, ns; none = read_ns.")
    verify_pj: float | None = Field(None, ge=0, description="Verify energy per cell, pJ; none = read_pj.")
    drift_nu: PerLevelNonNegative = Field(_SLC["drift_nu"], description="Mean drift exponent per level.")
    drift_nu_rel_sd: float = Field(_SLC["drift_nu_rel_sd"], ge=0,
                                   description="Spread of the drift exponent, fraction of its mean.")
    drift_t0_s: float = Field(1.0, gt=0, description="Reference time of the drift law, s.")
    drift_t_max_s: float = Field(1.0e9, gt=0, description="Longest age the drift law is trusted to, s.")
    drift_activation_ev: float | None = Field(
        None, ge=0, description="Activation energy of drift, eV; none = reference temperature only.")
    drift_reference_k: float = Field(300.0, gt=0, description="Temperature the drift values hold at, K.")
    # STT-MRAM switching, thermally activated regime (memsim/tech/technology.py).
    stt_delta: float = Field(60.0, gt=0, description="STT-MRAM thermal stability factor (energy barrier / kT).")
    stt_ic0_ua: float = Field(200.0, gt=0, description="STT-MRAM critical switching current, uA.")
    stt_attempt_ns: float = Field(1.0, gt=0, description="STT-MRAM attempt time tau0, ns.")
    # Crystallization of the amorphous state at temperature (memsim/tech/retention.py).
    retention_activation_ev: float | None = Field(
        _SLC.get("retention_activation_ev"), gt=0,
        description="Activation energy of crystallization of the amorphous state, eV; none = not modeled.")
    retention_ref_k: float = Field(_SLC.get("retention_ref_k", 358.15), gt=0,
                                   description="Temperature of the retention anchor, K.")
    retention_ref_s: float = Field(_SLC.get("retention_ref_s", 3.15576e8), gt=0,
                                   description="Age at which retention_fail_fraction of amorphous cells "
                                               "have crystallized at retention_ref_k, s.")
    retention_fail_fraction: float = Field(_SLC.get("retention_fail_fraction", 0.5), gt=0, lt=1,
                                           description="Share of failed cells at the retention anchor.")
    retention_avrami_n: float = Field(_SLC.get("retention_avrami_n", 3.0), gt=0,
                                      description="Avrami exponent of crystallization (Weibull shape of "
                                                  "failure times).")


class ArraySection(Section):
    channels: int = Field(1, ge=1, le=64, description="Independent channels, each with a data bus.")
    banks: int = Field(8, ge=1, le=1024, description="Banks per channel.")
    line_bytes: int = Field(64, description="Line (access unit) size, bytes.")
    lines: int = Field(65536, ge=16, le=1 << 26,
                       description="Lines modeled with their content (the modeled capacity).")
    bank_hash: bool = Field(False, description="XOR row bits into the bank index.")
    mapping: Literal["line", "row"] = Field(
        "line", description="Interleaving order: line = consecutive lines to different channels, then "
                            "banks; row = a row of row_lines consecutive lines stays in one bank, rows "
                            "interleaved across channels, then banks (needs row_lines >= 1).")
    row_lines: int = Field(0, ge=0, le=1 << 26, description="Lines per row buffer; 0 = no row buffer.")
    row_hit_ns: float = Field(10.0, gt=0, description="Read latency on a row-buffer hit, ns.")
    burst_ns: float = Field(5.0, ge=0, description="Data-bus time to move one line, ns.")
    bank_budget_ua: float = Field(38400.0, gt=0, le=MAX_CURRENT_UA,
                                  description="Programming current a bank may draw at once, uA.")
    capacity_gib: float = Field(16.0, gt=0, le=1 << 20,
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
    scheduler: Literal["fcfs", "fr_fcfs"] = Field(
        "fcfs", description="Order within a bank's read queue and write queue: fcfs = oldest first; "
                            "fr_fcfs = requests to the open row first, then oldest (user writes then "
                            "open and hit rows as reads do).")
    row_hit_cap: int = Field(4, ge=1, le=1024,
                             description="fr_fcfs: most times younger row hits may pass a queued "
                                         "request; then it is served next (no starvation).")
    coalesce_writes: bool = Field(False, description="A user write to a line whose earlier write still "
                                                     "waits (not started) in the queue replaces it; the "
                                                     "replaced write completes then and programs no cells.")
    forward_reads: bool = Field(False, description="A read of a line with a waiting write in its bank's "
                                                   "write queue is answered from the queue after "
                                                   "forward_ns, without a bank access.")
    forward_ns: float = Field(5.0, gt=0, le=1e6,
                              description="Latency of a read answered from the write queue, ns.")


class WriteSection(Section):
    scheme: str = Field("data_comparison", description="Write scheme (memsim list shows the names).")
    word_bits: Annotated[Literal[8, 16, 32, 64], WholeChoice] = Field(32, description="Flip-N-Write word width, bits.")


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
    hot_lines: int = Field(16, ge=1, description="Size of the hot set (hot_set); with sizing device_lines, "
                                                 "of the hotspot's hot region, in device lines.")
    sizing: Literal["device_share", "device_lines"] = Field(
        "device_share", description="How uniform, zipf and hotspot traffic maps onto the device: "
                                    "device_share = footprint and hot region are shares of the device "
                                    "(each modeled line stands for its device lines); device_lines = laid "
                                    "out on the device's own lines, the hot region hot_lines device lines "
                                    "and a Zipf rank one device line, whatever array.lines is.")
    requests: int = Field(100_000, ge=1, le=MAX_REQUESTS,
                          description="Requests to issue (in lines); at most 5e7 per run (use seeds "
                                      "or a sweep for more).")
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
    interval_ns: float = Field(50.0, gt=0, le=MAX_GAP_NS, description="Mean time between arrivals, ns.")
    on_ns: float = Field(20_000.0, gt=0, le=MAX_GAP_NS, description="Mean burst length (arrival onoff), ns.")
    off_ns: float = Field(20_000.0, gt=0, le=MAX_GAP_NS, description="Mean idle gap (arrival onoff), ns.")
    outstanding: int = Field(16, ge=1, description="Requests in flight (arrival closed).")
    hint_lead_ns: float = Field(0.0, ge=0, le=MAX_LEAD_NS, description="Announce every write by a hint this long "
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
    inner: str = Field("none", description="Bit rotation: line remapper underneath it (a wear leveler name).")


class LifetimeSection(Section):
    method: Literal["extrapolated", "run_to_failure", "both"] = Field(
        "both", description="Lifetime method of memsim lifetime.")
    ecp_entries: int = Field(6, ge=0, description="Failed cells a line survives (ECP correction entries); "
                                                 "6 = ECP-6, the usual baseline.")
    capacity_loss: float = Field(0.0, ge=0, lt=1,
                                 description="End of life at this share of lines dead; 0 = first dead line.")
    endurance_scale: float = Field(1e4, ge=1, description="Run to failure: endurance divided by this.")
    write_rate_gbps: float = Field(0.0, ge=0, le=1e6, description="Write rate for years, GB/s; 0 = from the run.")
    window_writes: int = Field(0, ge=0, le=MAX_WINDOW_WRITES,
                               description="User writes the wear engine measures (at most 1e10); 0 = "
                                           "workload.requests.")
    timing_max_noise: float = Field(0.1, gt=0, le=10.0, description="Timing runs: largest relative counting noise "
                                                           "of the most-worn line, sqrt(2 ln lines / its "
                                                           "writes), for which a lifetime is given; above "
                                                           "it the lifetime keys are null.")


class RefreshSection(Section):
    policy: str = Field("none", description="Refresh policy (memsim list shows the names).")
    interval_s: float = Field(3600.0, gt=0, description="Refresh period of the periodic policy, s.")
    temperature_k: float = Field(300.0, gt=0, description="Operating temperature, K.")
    correctable_bits: int = Field(8, ge=0, le=2048,
                                 description="Bit errors the line ECC corrects (at most the bits of a line).")
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
    victim: str = Field("greedy", description="Cleaner's victim choice (memsim list shows the names).")
    low_watermark: int = Field(2, ge=2, description="Free blocks below which the bank cleans in the "
                                                    "foreground.")
    idle_blocks: int = Field(4, ge=0, description="Free blocks the bank keeps by cleaning in idle time.")
    fallback: Literal["in_place", "wait"] = Field(
        "in_place", description="When no initialized line is free: write in place, or wait for a clean.")


class PowerSection(Section):
    budget_ua: float = Field(0.0, ge=0, le=MAX_CURRENT_UA, description="Programming current the scope may draw at once, uA; "
                                                    "0 = only the per-bank budget.")
    scope: Literal["channel", "device"] = Field("device", description="What shares the budget.")


class CacheSection(Section):
    enabled: bool = Field(False, description="A DRAM cache in front of the PCM (write-back, write-allocate; "
                                             "the PCM sees line fills and dirty evictions only).")
    capacity_lines: int = Field(16384, ge=1, le=1 << 24, description="Lines the cache holds.")
    ways: int = Field(16, ge=1, le=4096, description="Lines per set (capacity_lines / ways sets; "
                                                     "ways = capacity_lines is fully associative).")
    replacement: Literal["lru", "fifo"] = Field("lru", description="Victim choice: lru (least recently "
                                                                   "used) or fifo (first in, first out).")
    hit_ns: float = Field(50.0, gt=0, le=MAX_GAP_NS,
                          description="Latency of a cache hit and of every write, ns (from memory: a DRAM "
                                      "access of tens of ns).")
    access_pj_per_bit: float = Field(4.0, ge=0, description="Energy of a cache line access per bit, pJ "
                                                            "(from memory: a few pJ per bit for DRAM).")


class EnergySection(Section):
    background_mw_per_bank: float = Field(0.0, ge=0, le=1e6,
                                          description="Background (standby) power of a bank, mW; "
                                                      "0 = not counted.")
    peripheral_pj_per_access: float = Field(0.0, ge=0, description="Decoders, sense and drive circuits per "
                                                                   "array access (read, write, move, "
                                                                   "refresh), pJ; 0 = not counted.")
    io_pj_per_bit: float = Field(0.0, ge=0, description="Data bus and I/O energy per bit moved between "
                                                        "controller and PCM, pJ; 0 = not counted.")
    row_hit_pj_per_bit: float | None = Field(
        None, ge=0, description="Energy per bit of a read served from the open row, pJ; none = charged "
                                "as a full array read.")


class StreamSection(Section):
    """One request stream of a mix (``[[streams]]``); the rest of ``[workload]`` applies to all."""

    name: str = Field(..., pattern=r"^[A-Za-z0-9_]+$", description="Name of the stream (in its summary keys).")
    pattern: Literal["uniform", "zipf", "hotspot", "sequential", "strided", "trace"] = Field(
        "uniform", description="Address pattern of the stream (trace replays the stream's trace file).")
    trace: str = Field("", description="Trace file of pattern trace (the formats of workload.trace); "
                                       "a relative path is taken from the config file's folder.")
    time_scale: float = Field(1.0, gt=0, le=1e6, description="Pattern trace: the trace's arrival times are "
                                                         "multiplied by this (0.5 = twice the rate).")
    start_ns: float = Field(0.0, ge=0, le=MAX_GAP_NS, description="Delay added to every arrival of the "
                                                              "stream, ns.")
    requests: int = Field(10_000, ge=1, le=MAX_REQUESTS, description="Requests the stream issues (in lines; "
                                                                   "a trace stream replays its whole trace).")
    read_fraction: float = Field(0.7, ge=0, le=1, description="Share of the stream's requests that are reads.")
    arrival: Literal["poisson", "fixed", "onoff"] = Field("poisson", description="Arrival process.")
    interval_ns: float = Field(100.0, gt=0, le=MAX_GAP_NS, description="Mean time between arrivals, ns.")
    offset_lines: int = Field(0, ge=0, description="First line of the stream's address range.")
    footprint_lines: int = Field(0, ge=0, description="Lines the stream touches from offset_lines on; "
                                                      "0 = up to the end of the modeled lines.")
    zipf_exponent: float = Field(1.0, gt=0, description="Zipf exponent s (pattern zipf).")
    hot_fraction: float = Field(0.1, gt=0, lt=1, description="Share of the footprint that is hot (hotspot).")
    hot_share: float = Field(0.9, gt=0, lt=1, description="Share of accesses to hot lines (hotspot).")
    stride_lines: int = Field(1, ge=1, description="Stride in lines (pattern strided).")


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
    cache: CacheSection = Field(default_factory=CacheSection)
    energy: EnergySection = Field(default_factory=EnergySection)
    streams: list[StreamSection] = Field(
        default_factory=list, description="Mixed streams merged by arrival time ([[streams]]); empty = "
                                          "the one stream of [workload].")

    @property
    def footprint(self) -> int:
        return self.workload.footprint_lines or self.array.lines

    @property
    def device_lines(self) -> int:
        """Lines of the whole device (``array.capacity_gib`` in lines of ``array.line_bytes``)."""
        return int(self.array.capacity_gib * 2**30 // self.array.line_bytes)
