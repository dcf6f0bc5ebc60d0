"""Batch runs that survive interruption: a Dask LocalCluster gives the serial summary, a driver
killed part-way (SIGKILL, SIGINT, SIGTERM) resumes without recomputing finished tasks, and a
Dask worker killed part-way does not change the result."""

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from test_pipeline import TINY, _strip, _toml
from topology.cli import main
from topology.config import load_config
from topology.run import build_tasks, plan_from_config, run

_DRIVER = "import sys; from topology.cli import main; sys.exit(main(sys.argv[1:]))"


def _summary(out: Path) -> dict:
    return json.loads((out / "summary.json").read_text())


def _task_files(out: Path) -> list:
    folder = out / "store" / "tasks"
    return [p for p in folder.glob("*.pkl") if not p.name.startswith(".")] if folder.is_dir() else []


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """An uninterrupted serial run of TINY from a TOML file: (config path, summary, task count)."""
    tmp = tmp_path_factory.mktemp("batch")
    cfg = tmp / "tiny.toml"
    cfg.write_text(_toml(TINY))
    out = tmp / "serial"
    assert main(["run", str(cfg), "--out", str(out), "--engine", "serial", "--quiet"]) == 0
    n_tasks = len(build_tasks(plan_from_config(load_config(cfg), out)))
    return cfg, _summary(out), n_tasks


def test_dask_local_cluster_matches_serial(reference, tmp_path):
    cfg, ref, n_tasks = reference
    out = tmp_path / "dask"
    run(plan_from_config(load_config(cfg), out, engine="dask", workers=2), show_progress=False)
    got = _summary(out)
    assert got["provenance"]["engine"]["engine"] == "dask"
    assert got["provenance"]["tasks"] == {"total": n_tasks, "computed": n_tasks, "reused_from_store": 0}
    assert _strip(got) == _strip(ref)


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGINT, signal.SIGTERM], ids=["SIGKILL", "SIGINT", "SIGTERM"])
def test_driver_interrupted_then_resumed(reference, tmp_path, sig):
    cfg, ref, n_tasks = reference
    out = tmp_path / "out"
    p = subprocess.Popen([sys.executable, "-c", _DRIVER, "run", str(cfg), "--out", str(out), "--engine", "serial",
                          "--quiet"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        while len(_task_files(out)) < 3 and p.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert p.poll() is None, "the run ended before it could be interrupted"
        os.kill(p.pid, sig)
        p.wait(timeout=60)
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()
    assert p.returncode != 0
    assert not (out / "summary.json").exists()
    kept = len(_task_files(out))
    assert 3 <= kept < n_tasks
    assert main(["run", str(cfg), "--out", str(out), "--resume", "--quiet"]) == 0
    got = _summary(out)
    tasks = got["provenance"]["tasks"]
    assert tasks["computed"] + tasks["reused_from_store"] == tasks["total"] == n_tasks
    # every task finished before the interruption is reused, none recomputed
    assert tasks["reused_from_store"] == kept
    assert _strip(got) == _strip(ref)


def test_killed_dask_worker_run_completes(reference, tmp_path):
    from dask.distributed import Client, LocalCluster

    cfg, ref, n_tasks = reference
    out = tmp_path / "dask_kill"
    env = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None, env=env) as cluster, \
            Client(cluster) as client:
        pids = client.run(os.getpid)
        victim = sorted(pids.values())[0]
        killed = threading.Event()
        at_kill = []

        def kill_one_worker():
            deadline = time.monotonic() + 120
            while len(_task_files(out)) < 2 and time.monotonic() < deadline:
                time.sleep(0.05)
            at_kill.append(len(_task_files(out)))
            os.kill(victim, signal.SIGKILL)
            killed.set()

        killer = threading.Thread(target=kill_one_worker, daemon=True)
        killer.start()
        plan = plan_from_config(load_config(cfg), out, engine="dask", scheduler=cluster.scheduler_address)
        run(plan, show_progress=False)
        killer.join(timeout=5)
    assert killed.is_set() and at_kill[0] < n_tasks  # the worker died part-way through the run
    got = _summary(out)
    assert len(_task_files(out)) == n_tasks
    assert got["provenance"]["tasks"] == {"total": n_tasks, "computed": n_tasks, "reused_from_store": 0}
    assert _strip(got) == _strip(ref)
