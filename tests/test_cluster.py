"""A sweep on a real Dask cluster (scheduler and worker processes on 127.0.0.1) gives the
same table, value for value, as the local process pool."""

import pandas as pd
import pytest
from conftest import DEMO, memsim_cli

from memsim.errors import UserError
from memsim.experiment.executors import DaskCluster
from memsim.experiment.sweep import sweep

distributed = pytest.importorskip("distributed")
# A cluster takes several seconds to start; CI runs these with -m slow.
pytestmark = pytest.mark.slow

GRID = {"write.scheme": ["full_line", "flip_n_write"], "workload.read_fraction": [0.6, 0.9]}
FIXED = {"workload.requests": 1500}


@pytest.fixture(scope="module")
def cluster():
    # Loopback only; worker processes (not threads) so every task crosses a process boundary.
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as c:
        yield c


def test_cluster_table_equals_local_pool(cluster, tmp_path):
    kw = {"seeds": 2, "fixed": FIXED, "metrics": ["throughput_gbps", "read_latency_p99_ns", "energy_pj"],
          "progress": False}
    local = sweep(DEMO, GRID, workers=2, **kw)
    remote = sweep(DEMO, GRID, scheduler=cluster.scheduler_address, out=tmp_path / "c", **kw)
    pd.testing.assert_frame_equal(local, remote, check_exact=True)
    assert (remote["error"] == "").all() and len(remote) == 8
    # the cluster's results went to the cache like local ones: a local rerun reuses them all
    again = sweep(DEMO, GRID, workers=1, out=tmp_path / "c", **kw)
    pd.testing.assert_frame_equal(again, local, check_exact=True)


def test_cli_scheduler_option(cluster, tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text(f"""
[sweep]
name = "on_cluster"
base = "{DEMO}"
replications = 2
metrics = ["throughput_gbps", "write_latency_p99_ns"]
[fixed]
workload.requests = 1500
[grid]
write.scheme = ["full_line", "data_comparison"]
""")
    outs = {}
    for label, extra in (("local", ["--workers", "2"]), ("dask", ["--scheduler", cluster.scheduler_address])):
        out = memsim_cli("sweep", spec, "--quiet", "--out", tmp_path / label, *extra)
        assert out.code == 0, out.err
        outs[label] = pd.read_parquet(tmp_path / label / "runs.parquet")
    assert "Dask scheduler" in out.out
    pd.testing.assert_frame_equal(outs["local"], outs["dask"], check_exact=True)


def test_unreachable_scheduler_is_a_user_error():
    with pytest.raises(UserError, match="--scheduler"):
        DaskCluster("tcp://127.0.0.1:9", connect_timeout_s=1.0)
