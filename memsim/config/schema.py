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


class WriteSection(Section):
    scheme: str = Field("data_comparison",
                        description="Write scheme: full_line, data_comparison or flip_n_write.")
    word_bits: Literal[8, 16, 32, 64] = Field(32, description="Flip-N-Write word width, bits.")


class WorkloadSection(Section):
    pattern: Literal["uniform", "zipf", "hotspot", "sequential", "strided"] = Field(
        "uniform", description="Address pattern.")
    requests: int = Field(100_000, ge=1, description="Requests to issue (in lines).")
    read_fraction: float = Field(0.7, ge=0, le=1, description="Share of requests that are reads.")
    footprint_lines: int = Field(0, ge=0, description="Lines touched; 0 = all modeled lines.")
    size_lines: int = Field(1, ge=1, le=64, description="Consecutive lines per request.")
    zipf_exponent: float = Field(1.0, gt=0, description="Zipf exponent s (pattern zipf).")
    hot_fraction: float = Field(0.1, gt=0, lt=1, description="Share of footprint that is hot.")
    hot_share: float = Field(0.9, gt=0, lt=1, description="Share of accesses that go to hot lines.")
    stride_lines: int = Field(1, ge=1, description="Stride in lines (pattern strided).")
    arrival: Literal["poisson", "fixed", "onoff", "closed"] = Field(
        "poisson", description="Arrival process; closed = a fixed number outstanding.")
    interval_ns: float = Field(50.0, gt=0, description="Mean time between arrivals, ns.")
    on_ns: float = Field(20_000.0, gt=0, description="Mean burst length (arrival onoff), ns.")
    off_ns: float = Field(20_000.0, gt=0, description="Mean idle gap (arrival onoff), ns.")
    outstanding: int = Field(16, ge=1, description="Requests in flight (arrival closed).")
    data: Literal["random", "flip", "zeros", "ones"] = Field(
        "random", description="Data model of written content.")
    flip_fraction: float = Field(0.1, ge=0, le=1, description="Share of bits a write changes (data flip).")
    one_fraction: float = Field(0.1, ge=0, le=1,
                                description="Probability of a 1 bit (data zeros; data ones uses 1 - it).")


class RunConfig(Section):
    """A whole run: memory system plus workload."""

    run: RunSection = Field(default_factory=RunSection)
    cell: CellSection = Field(default_factory=CellSection)
    array: ArraySection = Field(default_factory=ArraySection)
    controller: ControllerSection = Field(default_factory=ControllerSection)
    write: WriteSection = Field(default_factory=WriteSection)
    workload: WorkloadSection = Field(default_factory=WorkloadSection)

    @property
    def footprint(self) -> int:
        return self.workload.footprint_lines or self.array.lines
