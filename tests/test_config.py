"""Config loading, overrides and one-line errors."""
import pytest

from memsim.config import load_config
from memsim.errors import ConfigError


def test_defaults_come_from_the_slc_preset():
    cfg = load_config(None)
    # SET is slower than RESET, RESET draws more current (common practice).
    assert cfg.cell.set_ns > cfg.cell.reset_ns
    assert cfg.cell.reset_ua > cfg.cell.set_ua


def test_set_overrides_any_field():
    cfg = load_config(None, ["write.scheme=flip_n_write", "array.banks=4", "run.name=x"])
    assert cfg.write.scheme == "flip_n_write" and cfg.array.banks == 4 and cfg.run.name == "x"


def test_toml_file_and_override(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text('[array]\nbanks = 2\n[workload]\nrequests = 10\n')
    cfg = load_config(p, {"workload.requests": 20})
    assert cfg.array.banks == 2 and cfg.workload.requests == 20


@pytest.mark.parametrize("text,key,allowed", [
    ("[array]\nbankz = 2\n", "array.bankz", "one of channels"),
    ("[array]\nbanks = 'many'\n", "array.banks", "integer"),
    ("[cell]\nset_ns = -5.0\n", "cell.set_ns", "greater than 0"),
    ("[controller]\ndrain_low = 30\ndrain_high = 20\n", "controller.drain_low", "less than"),
    ("[workload]\npattern = 'spiral'\n", "workload.pattern", "uniform"),
])
def test_bad_config_names_file_key_found_allowed(tmp_path, text, key, allowed):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(ConfigError) as exc:
        load_config(p)
    msg = exc.value.one_line()
    assert str(p) in msg and key in msg and allowed in msg and "found" in msg
    assert "\n" not in msg


def test_override_error_names_the_override():
    with pytest.raises(ConfigError) as exc:
        load_config(None, ["array.banks=0"])
    assert exc.value.where == "--set array.banks"


def test_bad_assignment_syntax():
    with pytest.raises(ConfigError):
        load_config(None, ["arraybanks4"])
