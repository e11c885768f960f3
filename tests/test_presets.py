"""Bundled technology presets: valid, consistent with each other, sourced."""
from __future__ import annotations

import re

import pytest

from memsim.config import load_config, load_preset, preset_names
from memsim.config.schema import preset_path

MARKERS = ("from memory", "illustrative", "common practice", "invented", "formula")


@pytest.mark.parametrize("name", preset_names())
def test_preset_is_a_valid_config(name: str) -> None:
    cfg = load_config({"cell": {"preset": name}})
    assert cfg.cell.preset == name


@pytest.mark.parametrize("name", preset_names())
def test_preset_has_provenance_and_no_working_text(name: str) -> None:
    text = preset_path(name).read_text()
    for word in ("TODO", "Proposed", "lead decides", "XXX", "FIXME"):
        assert word not in text, word
    # Each [cell] value line carries a source marker on its line or in the
    # comment block right above it.
    lines = text.splitlines()
    for i, line in enumerate(lines):
        if re.match(r"^[a-z_0-9]+\s*=", line):
            block = [line]
            j = i - 1
            while j >= 0 and (lines[j].startswith("#") or re.match(r"^[a-z_0-9]+\s*=", lines[j])):
                block.append(lines[j])
                j -= 1
            assert any(m in " ".join(block) for m in MARKERS), f"{name}: {line}"


def test_read_energy_is_one_value_for_one_source() -> None:
    # pcm_slc and pcm_mlc2 cite one table (Lee et al., ISCA 2009) for the read energy per bit.
    assert load_preset("pcm_mlc2")["cell"]["verify_pj"] == load_preset("pcm_slc")["cell"]["read_pj"]
    assert load_preset("pcm_mlc2")["cell"]["verify_ns"] == load_preset("pcm_slc")["cell"]["read_ns"]
