"""Bad inputs a new user might write: each gets one line naming the file and key, exit 2.

Every case goes through the real command-line entry point (in this process;
two in a subprocess), so a traceback, a hang or a wrong exit code shows here.
"""
import os
import subprocess
import sys

import pytest
from conftest import DEMO, ROOT, cli

SMALL = "[workload]\nrequests = 1500\n"




def assert_one_line(code, out, err, *needles):
    text = out + err
    assert code == 2, text
    assert "Traceback" not in text
    assert out == "" and err.count("\n") == 1 and err.startswith("error: "), text
    for n in needles:
        assert n in err, (n, err)


# (config text, command, key the message must name)
CONFIGS = [
    # tracebacks before
    ("[workload]\nrequests = 1e15\n", "run", "workload.requests"),
    ("[workload]\nrequests = 1000000000000000\n", "run", "workload.requests"),
    ('[cell]\npreset = "pcm_mlc2"\nprogram_sigma_decades = [0.12, 0.14, 0.15]\n', "run",
     "cell.program_sigma_decades"),
    ('[cell]\npreset = "pcm_mlc2"\nprogram_sigma_decades = [0.12, -0.14, 0.15, 0.1]\n', "run",
     "cell.program_sigma_decades"),
    # hangs before
    ("[workload]\ninterval_ns = inf\n", "run", "workload.interval_ns"),
    ("[workload]\ninterval_ns = 1e30\n", "run", "workload.interval_ns"),
    ("[array]\nlines = 67108864\n", "run", "array.lines"),
    ("[run]\nchunk_requests = 1e9\n", "run", "run.chunk_requests"),
    # huge values that overflowed machine integers inside the model
    ('[cell]\npreset = "pcm_mlc2"\npv_max_iterations = 1e300\n', "run", "cell.pv_max_iterations"),
    ("[array]\nrow_lines = 1000000000000000000000000000000\n", "run", "array.row_lines"),
    ("[array]\nbank_budget_ua = 1e300\n", "run", "array.bank_budget_ua"),
    ('[array]\nmapping = "row"\n', "run", "array.mapping"),
    ("[cache]\nenabled = true\ncapacity_lines = 100\nways = 8\n", "run", "cache.ways"),
    ('[cache]\nenabled = true\n[workload]\narrival = "closed"\n', "run", "cache.enabled"),
    ('[cache]\nreplacement = "random"\n', "run", "cache.replacement"),
    ("[cache]\nenabled = true\ncapacity_lines = 16777216\n[array]\nline_bytes = 256\n", "run",
     "cache.capacity_lines"),
    ('[[streams]]\nname = "a"\n[[streams]]\nname = "a"\n', "run", "streams[1].name"),
    ('[array]\nmapping = "bank"\n', "run", "array.mapping"),
    ("[power]\nbudget_ua = 1e300\n", "run", "power.budget_ua"),
    ("[array]\ncapacity_gib = 1e300\n", "run", "array.capacity_gib"),
    ("[refresh]\ncorrectable_bits = 1e30\n", "run", "refresh.correctable_bits"),
    ("[lifetime]\nwrite_rate_gbps = 1e300\n", "run", "lifetime.write_rate_gbps"),
    ("[cell]\nread_thresholds_log10_ohm = [1.0]\n", "run", "cell.read_thresholds_log10_ohm"),
    ("[lifetime]\nwindow_writes = 1e15\n", "lifetime", "lifetime.window_writes"),
    ("[lifetime]\nwindow_writes = 1000000000000000\n", "lifetime", "lifetime.window_writes"),
    # silent wrong answers before: NaN / infinities, one per kind of float field
    ("[cell]\ndrift_nu = nan\n", "drift", "cell.drift_nu"),
    ('[cell]\npreset = "pcm_mlc2"\ndrift_nu = [0.001, 0.02, nan, 0.1]\n', "run", "cell.drift_nu"),
    ("[workload]\nhint_lead_ns = inf\n", "run", "workload.hint_lead_ns"),
    ("[workload]\nhint_lead_ns = 1e7\n", "run", "workload.hint_lead_ns"),
    ('[workload]\nhint_lead_ns = 100.0\narrival = "closed"\n', "run", "workload.hint_lead_ns"),
    ("[workload]\nread_fraction = nan\n", "run", "workload.read_fraction"),
    ("[cell]\nverify_ns = inf\n", "run", "cell.verify_ns"),                     # optional float
    ("[cell]\nlevel_log10_ohm = [3.0, nan]\n", "run", "cell.level_log10_ohm"),  # list of floats
    ('[cell]\npreset = "pcm_mlc2"\npulse_ns = [150.0, inf, 80.0, 40.0]\n', "run", "cell.pulse_ns"),
    ("[refresh]\ninterval_s = inf\n", "run", "refresh.interval_s"),
    ("[power]\nbudget_ua = -inf\n", "run", "power.budget_ua"),
    ("[lifetime]\nwrite_rate_gbps = nan\n", "run", "lifetime.write_rate_gbps"),
    ("[array]\ncapacity_gib = inf\n", "run", "array.capacity_gib"),
    # booleans where an integer is meant, and the other way round
    ("[array]\nbanks = true\n", "run", "array.banks"),
    ("[workload]\nrequests = true\n", "run", "workload.requests"),
    ("[cell]\nbits_per_cell = true\n", "run", "cell.bits_per_cell"),
    ("[write]\nword_bits = true\n", "run", "write.word_bits"),
    ("[controller]\nidle_writes = 1\n", "run", "controller.idle_writes"),
    ("[cell]\nread_ns = true\n", "run", "cell.read_ns"),
    ('[cell]\nread_ns = "fast"\n', "run", "cell.read_ns"),
    ("[workload]\nrequests = 1500.5\n", "run", "workload.requests"),
    ("cell = 3\n", "run", "cell"),
    ('refresh = 3\n[cell]\npreset = "pcm_mlc2"\n', "run", "refresh"),
    ("[workload]\nrequests = 1979-05-27\n", "run", "workload.requests"),
    # write_pause is modelled for SLC writes only
    ('[cell]\npreset = "pcm_mlc2"\n[controller]\nwrite_pause = true\n', "run", "controller.write_pause"),
    ('[cell]\npreset = "stt_mram"\n[controller]\nwrite_pause = true\n', "run", "controller.write_pause"),
    # drift refresh over 100 s of simulated time: 6e8 refreshes, hours of work
    ('[cell]\npreset = "pcm_mlc2"\n[refresh]\npolicy = "drift"\n[workload]\ninterval_ns = 1e6\n', "run",
     "workload.requests"),
    ('[cell]\npreset = "pcm_tri"\n[controller]\nwrite_pause = true\n', "run", "controller.write_pause"),
    # queue policies: a replaced write's pulses are kept for SLC PCM only; names and ranges
    ('[cell]\npreset = "pcm_mlc2"\n[controller]\ncoalesce_writes = true\n', "run", "controller.coalesce_writes"),
    ('[cell]\npreset = "reram_slc"\n[controller]\ncoalesce_writes = true\n', "run", "controller.coalesce_writes"),
    ('[controller]\nscheduler = "fifo"\n', "run", "controller.scheduler"),
    ("[controller]\nrow_hit_cap = 0\n", "run", "controller.row_hit_cap"),
    ("[controller]\nforward_ns = nan\n", "run", "controller.forward_ns"),
    # cross-field checks name the file
    ('[write]\nscheme = "block_erase"\n[leveling]\nscheme = "start_gap"\n', "run", "leveling.scheme"),
    ("[cell]\nbits_per_cell = 2\n", "run", "cell.level_log10_ohm"),
    ('[cell]\npreset = "pcm_mlc2"\npv_mean_iterations = [1.0, 4.0]\n', "run", "cell.pv_mean_iterations"),
    ('[cell]\npreset = "pcm_mlc2"\nread_thresholds_log10_ohm = [3.5]\n', "run",
     "cell.read_thresholds_log10_ohm"),
    ('[cell]\npreset = "pcm_mlc2"\nread_thresholds_log10_ohm = [3.5, 3.6, 3.7]\n', "run",
     "cell.read_thresholds_log10_ohm"),
    ('[leveling]\nscheme = "bit_rotation"\ninner = "nope"\n', "run", "leveling.inner"),
    ('[leveling]\nscheme = "nope"\n', "run", "leveling.scheme"),
    ('[write]\nscheme = "block_erase"\n[erase]\nblock_lines = 100000\n', "run", "erase.block_lines"),
    ('[write]\nscheme = "block_erase"\n[erase]\nspare_fraction = 0.0001\n', "run", "erase.spare_fraction"),
    ('[write]\nscheme = "block_erase"\n[controller]\nhint_preset = true\n', "run", "write.scheme"),
    ('[cell]\npreset = "pcm_mlc2"\n[write]\nscheme = "block_erase"\n', "run", "write.scheme"),
    ("[cell]\ndrift_t_max_s = 0.5\n", "drift", "cell.drift_t_max_s"),
    ("[refresh]\ntemperature_k = 350.0\n", "run", "refresh.temperature_k"),
    ('[array]\nlines = 1024\n[workload]\npattern = "hot_set"\nhot_lines = 5000\n', "run", "workload.hot_lines"),
    ('[array]\nlines = 1024\n[workload]\npattern = "repeated_address"\nattack_line = 5000\n', "run",
     "workload.attack_line"),
]


@pytest.mark.parametrize("text,command,key", CONFIGS, ids=[f"{c[2]}-{i}" for i, c in enumerate(CONFIGS)])
def test_bad_config_one_line(tmp_path, capsys, monkeypatch, text, command, key):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(text)
    code, out, err = cli(capsys, monkeypatch, command, cfg, "--out", tmp_path / "o")
    assert_one_line(code, out, err, f"{cfg}: {key}")
    assert not (tmp_path / "o").exists()


def test_bad_override_names_the_set(tmp_path, capsys, monkeypatch):
    code, out, err = cli(capsys, monkeypatch, "run", DEMO, "--set", "array.banks=true", "--out", tmp_path / "o")
    assert_one_line(code, out, err, "--set array.banks", "True")
    code, out, err = cli(capsys, monkeypatch, "run", DEMO, "--set", "cell.bits_per_cell=2", "--out", tmp_path / "o")
    assert_one_line(code, out, err, "--set cell.bits_per_cell")


def test_non_utf8_byte_names_file_and_line(tmp_path, capsys, monkeypatch):
    cfg = tmp_path / "latin1.toml"
    cfg.write_bytes(b'[run]\nname = "x"\n# caf\xe9 au lait\n')
    code, out, err = cli(capsys, monkeypatch, "run", cfg)
    assert_one_line(code, out, err, f"{cfg}:3", "0xe9", "UTF-8")


def test_config_path_is_a_folder(tmp_path, capsys, monkeypatch):
    code, out, err = cli(capsys, monkeypatch, "run", tmp_path)
    assert_one_line(code, out, err, str(tmp_path), "is a directory")


def run_ok(capsys, monkeypatch, *args):
    from memsim.cli import entry

    monkeypatch.setattr(sys, "argv", ["memsim", *map(str, args)])
    with pytest.raises(SystemExit) as exc:
        entry()
    out = capsys.readouterr()
    assert exc.value.code == 0, out.err
    return out.out


def test_byte_order_mark_is_accepted(tmp_path, capsys, monkeypatch):
    cfg = tmp_path / "bom.toml"
    cfg.write_bytes(b"\xef\xbb\xbf" + b'[run]\nname = "bom"\n' + SMALL.encode())
    out = run_ok(capsys, monkeypatch, "run", cfg, "--out", tmp_path / "o")
    assert "run bom" in out and (tmp_path / "o" / "summary.json").is_file()


def test_per_level_sigma_list_runs(tmp_path, capsys, monkeypatch):
    from memsim.config import load_config
    from memsim.tech.models import mlc_cell

    text = ('[cell]\npreset = "pcm_mlc2"\nprogram_sigma_decades = [0.12, 0.14, 0.15, 0.10]\n'
            "[workload]\nrequests = 1000\n")
    cfg = tmp_path / "mlc.toml"
    cfg.write_text(text)
    out = run_ok(capsys, monkeypatch, "run", cfg, "--out", tmp_path / "o")
    assert "requests" in out and (tmp_path / "o" / "summary.json").is_file()
    c = load_config(cfg)
    assert c.workload.requests == 1000 and isinstance(c.workload.requests, int)
    # The list reaches the cell model level by level.
    assert mlc_cell(c).program_sigma_decades == (0.12, 0.14, 0.15, 0.10)


@pytest.mark.parametrize("text,key", [
    (b"[array]\nbanks = true\n", "array.banks"),
    (b"[cell]\nread_ns = 1\n# \xff\n", ":3"),
])
def test_bad_config_in_a_subprocess(tmp_path, text, key):
    cfg = tmp_path / "bad.toml"
    cfg.write_bytes(text)
    p = subprocess.run([sys.executable, "-m", "memsim.cli", "run", str(cfg), "--out", str(tmp_path / "o")],
                       capture_output=True, text=True, cwd=tmp_path,
                       env={**os.environ, "PYTHONPATH": str(ROOT)}, timeout=120, check=False)
    assert_one_line(p.returncode, p.stdout, p.stderr, f"{cfg}{'' if key.startswith(':') else ': '}{key}")


# --- sweeps: every point and metric name checked before any point runs ---------------


def write_sweep(tmp_path, body, name="s.toml"):
    p = tmp_path / name
    p.write_text(f'[sweep]\nbase = "{DEMO}"\nreplications = 1\n' + body)
    return p


SWEEPS = [
    ("[fixed]\nworkload.requests = 1500\n[grid]\narray.banks = [4, true]\n", "grid.array.banks"),
    ("[fixed]\nworkload.requests = 1500\n[grid]\narray.banks = [4, -2]\n", "grid.array.banks"),
    ("[fixed]\nworkload.requests = 1500\n[grid]\nworkload.read_fraction = [0.5, nan]\n",
     "grid.workload.read_fraction"),
    ('[fixed]\nworkload.requests = 1500\n[grid]\nwrite.scheme = ["full_line", "magic"]\n', "grid.write.scheme"),
    (("[fixed]\nworkload.requests = 1500\n[grid]\nwrite.scheme = [\"full_line\"]\n"
      "[[zipped]]\ncontroller.write_queue = [16, 32]\ncontroller.drain_high = [12, 40]\n"),
     "zipped.controller.drain_high"),
    ("[fixed]\nworkload.requests = 1500\n[grid]\n", "grid"),
    ("[fixed]\nworkload.requests = 1500\n[grid]\nworkload.read_fraction = [1979-05-27]\n",
     "grid.workload.read_fraction"),
    ("[fixed]\nworkload.requests = inf\n[grid]\nwrite.scheme = [\"full_line\"]\n", "fixed.workload.requests"),
    ("[fixed]\nworkload.requests = 1500\n", "grid"),
]


@pytest.mark.parametrize("body,key", SWEEPS)
def test_bad_sweep_fails_before_any_point_runs(tmp_path, capsys, monkeypatch, body, key):
    p = write_sweep(tmp_path, body)
    code, out, err = cli(capsys, monkeypatch, "sweep", p, "--workers", "1", "--quiet", "--out", tmp_path / "o")
    assert_one_line(code, out, err, f"{p}: {key}")
    assert not (tmp_path / "o").exists()          # no run was written


def test_misspelt_sweep_metric_fails_up_front(tmp_path, capsys, monkeypatch):
    p = write_sweep(tmp_path, 'metrics = ["throughput_gbps", "read_latncy_p99_ns"]\n'
                    "[fixed]\nworkload.requests = 1500\n[grid]\nwrite.scheme = [\"full_line\", \"flip_n_write\"]\n")
    code, out, err = cli(capsys, monkeypatch, "sweep", p, "--workers", "1", "--quiet", "--out", tmp_path / "o")
    assert_one_line(code, out, err, f"{p}: sweep.metrics", "'read_latncy_p99_ns'", "read_latency_p99_ns")
    assert "'throughput_gbps'" not in err and not (tmp_path / "o").exists()
    assert len(err) < 300                         # the closest keys, not all of them


def test_misspelt_compare_metric_fails_before_any_run(tmp_path, capsys, monkeypatch):
    code, out, err = cli(capsys, monkeypatch, "compare", ROOT / "workloads" / "demo.toml",
                         "--vary", "write.scheme=full_line,flip_n_write", "--set", "workload.requests=1500",
                         "--metric", "read_latncy_p99_ns", "--workers", "1", "--out", tmp_path / "c")
    assert_one_line(code, out, err, "--metric", "'read_latncy_p99_ns'", "read_latency_p99_ns")
    assert not (tmp_path / "c" / "cache").exists()       # no run was made


def test_lifetime_with_write_hints_finishes(tmp_path, capsys, monkeypatch):
    # The wear engine's write stream has no arrival times: hints must not hold it back.
    out = run_ok(capsys, monkeypatch, "lifetime", ROOT / "workloads" / "lifetime_tide_archive.toml",
                 "--set", "workload.hint_lead_ns=100", "--set", "workload.requests=2000",
                 "--method", "extrapolated", "--write-rate", "1", "--out", tmp_path / "l")
    assert "lifetime_years" in out


def test_metric_of_a_later_point_kind_is_found(tmp_path):
    from memsim.experiment.sweep import make_spec, run_sweep

    # erase keys exist only for block_erase points; the probe goes on until it meets one.
    spec = make_spec(DEMO, {"write.scheme": ["full_line", "block_erase"]}, seeds=1,
                     fixed={"workload.requests": 1500}, metrics=["throughput_gbps", "erase_energy_share"])
    out = run_sweep(spec, workers=1, progress=False)
    assert out.failed == 0 and list(out.runs["write.scheme"]) == ["full_line", "block_erase"]


# --- trace info labels rows and line requests ------------------------------------------


def test_trace_info_labels_rows_and_line_requests(capsys, monkeypatch):
    from memsim.workload.trace import trace_info

    trace = ROOT / "workloads" / "quayside_ledger.csv.gz"
    info, _ = trace_info(trace)
    # the example trace: 3,000 rows of two lines each (see its header)
    assert info["rows"] == 3000 and info["requests"] == info["line_requests"] == 6000
    out = run_ok(capsys, monkeypatch, "trace", "info", trace)
    lines = {ln.strip().split("  ")[0]: ln for ln in out.splitlines() if ln.startswith("  ")}
    assert "3,000" in lines["rows"] and "6,000" in lines["line requests"]
    assert "of line requests" in lines["reads"]
