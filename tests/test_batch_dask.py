"""Batch on a Dask distributed cluster (a LocalCluster stands in for a lab's cluster)."""

from __future__ import annotations

import json

import pytest

distributed = pytest.importorskip("distributed")

from fringecount import batch as B  # noqa: E402
from fringecount.errors import InputError  # noqa: E402

from test_batch import _archive, needs_core, scripted_analyse  # noqa: E402  (tests/ is on sys.path under pytest)

pytestmark = needs_core


@pytest.fixture(scope="module")
def cluster():
    # Two worker processes (so that one can die in the crash test while the other goes
    # on), one thread each. Dask does not retry a task whose worker died, to stay short;
    # the batch itself runs such clips once more, one at a time (a clip that was only
    # queued on the dying worker must still complete).
    import dask

    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                      dashboard_address=":0", silence_logs=50) as c:
            yield c


def test_dask_batch_matches_the_local_batch(tmp_path, cluster):
    src = _archive(tmp_path / "src", {"a.avi": "ok 3.5", "b.avi": "bad", "sub/c.avi": "ok -1.0",
                                      "d.avi": "bug"})
    local = B.run_batch(src, tmp_path / "local", jobs=0, analyse=scripted_analyse).table
    on_dask = B.run_batch(src, tmp_path / "dask", dask=cluster.scheduler_address,
                          analyse=scripted_analyse).table
    columns = ["clip", "status", "total_fringes", "error", "result_dir", "n_gaps"]
    assert on_dask[columns].equals(local[columns])
    assert list(on_dask["status"]) == ["ok", "error", "error", "ok"]
    for d in on_dask["result_dir"].dropna():  # written by the workers into the shared folder
        assert json.loads((tmp_path / "dask" / d / "summary.json").read_text())["frames"] == 2
    assert (tmp_path / "dask" / "batch.csv").exists()


def test_dask_batch_resumes_and_accepts_a_client(tmp_path, cluster):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0", "b.avi": "ok 2.0"})
    out = tmp_path / "out"
    with distributed.Client(cluster, set_as_default=False) as client:
        first = B.run_batch(src, out, dask=client, analyse=scripted_analyse).table
        (src / "a.avi").write_text("exit")  # would kill the worker if analysed again
        second = B.run_batch(src, out, dask=client, analyse=scripted_analyse).table
        assert client.status == "running"  # a client passed in is not closed
    assert list(first["reused"]) == [False, False]
    assert list(second["reused"]) == [True, True] and list(second["total_fringes"]) == [1.0, 2.0]


def test_relative_paths_reach_workers_started_elsewhere(tmp_path, cluster, monkeypatch):
    # The workers were started in another folder: relative clip, log and output paths
    # must reach them as absolute paths.
    _archive(tmp_path / "src", {"a.avi": "ok 5.0"})
    (tmp_path / "src" / "a_log.csv").write_text("time_s,wavelength_nm\n0,632.99\n")
    (tmp_path / "m.csv").write_text("path,wavelengths\nsrc/a.avi,src/a_log.csv\n")
    monkeypatch.chdir(tmp_path)
    t = B.run_batch("m.csv", "out", dask=cluster.scheduler_address, analyse=scripted_analyse).table
    assert t.loc[0, "status"] == "ok", t.loc[0, "error"]
    summary = json.loads((tmp_path / "out" / t.loc[0, "result_dir"] / "summary.json").read_text())
    assert summary["clip"] == str(tmp_path / "src" / "a.avi")
    assert summary["settings"]["wavelength_log"] == str(tmp_path / "src" / "a_log.csv")


def test_unreachable_scheduler_is_an_input_error(tmp_path, monkeypatch):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0"})
    # Nothing listens on this loopback address; keep the connect timeout short.
    import dask

    with dask.config.set({"distributed.comm.timeouts.connect": "0.5s"}):
        with pytest.raises(InputError, match="cannot reach the Dask scheduler"):
            B.run_batch(src, tmp_path / "out", dask="tcp://127.0.0.1:9", analyse=scripted_analyse,
                        dask_timeout_s=0.5)


def test_missing_dask_is_a_clear_input_error(tmp_path, monkeypatch):
    import sys

    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0"})
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if not installed
    with pytest.raises(InputError, match="pip install 'fringecount\\[cluster\\]'"):
        B.run_batch(src, tmp_path / "out", dask="tcp://127.0.0.1:9", analyse=scripted_analyse)


def test_a_clip_that_kills_its_dask_worker_is_an_error_row(tmp_path, cluster):
    src = _archive(tmp_path / "src", {"a.avi": "ok 1.0", "b.avi": "exit", "c.avi": "ok 2.0"})
    t = B.run_batch(src, tmp_path / "out", dask=cluster.scheduler_address, analyse=scripted_analyse).table
    assert list(t["status"]) == ["ok", "error", "ok"], list(t["error"])
    assert list(t["total_fringes"].fillna(-1)) == [1.0, -1, 2.0]
    assert "KilledWorker" in t.loc[1, "error"]
