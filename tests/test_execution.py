"""Engines give identical results whatever the engine and worker count; the durable store
survives interruption and refuses another config's store."""

import os
import signal
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from topology.errors import InputError
from topology.execution import Task, make_engine, task_seed
from topology.store import TaskStore, config_hash


def draw(task_id, run_seed, n):
    rng = np.random.default_rng(task_seed(run_seed, task_id))
    return {"id": task_id, "values": rng.standard_normal(n)}


def _tasks(k=6):
    return [Task(f"null-{i:03d}", draw, {"task_id": f"null-{i:03d}", "run_seed": 42, "n": 5}) for i in range(k)]


def _collect(engine):
    try:
        return {tid: r["values"] for tid, r in engine.run(_tasks())}
    finally:
        engine.close()


def test_seed_depends_on_id_not_order():
    a = np.random.default_rng(task_seed(7, "x")).random()
    b = np.random.default_rng(task_seed(7, "x")).random()
    c = np.random.default_rng(task_seed(7, "y")).random()
    d = np.random.default_rng(task_seed(8, "x")).random()
    assert a == b and a != c and a != d


def test_serial_local_and_dask_agree():
    serial = _collect(make_engine("serial"))
    local = _collect(make_engine("local", workers=2))
    dask = _collect(make_engine("dask", workers=2))
    assert set(serial) == set(local) == set(dask)
    for k in serial:
        np.testing.assert_array_equal(serial[k], local[k])
        np.testing.assert_array_equal(serial[k], dask[k])


def test_store_resume_and_config_check(tmp_path):
    h = config_hash({"a": {"x": 1}})
    st = TaskStore(tmp_path / "store", h, resume=False)
    st.put("t1", {"v": 1})
    again = TaskStore(tmp_path / "store", h, resume=True)
    assert again.finished() == {"t1"} and again.get("t1") == {"v": 1}
    with pytest.raises(InputError, match="different config"):
        TaskStore(tmp_path / "store", config_hash({"a": {"x": 2}}), resume=True)
    with pytest.raises(InputError, match="--resume"):
        TaskStore(tmp_path / "store", h, resume=False)
    # sections that do not change results do not change the hash
    assert config_hash({"a": {"x": 1}, "execution": {"engine": "dask"}}) == h


def test_store_survives_sigkill(tmp_path):
    script = textwrap.dedent(f"""
        import sys, time
        sys.path.insert(0, {os.path.dirname(__file__)!r})
        from topology.store import TaskStore
        st = TaskStore({str(tmp_path / 'store')!r}, "h", resume=False)
        for i in range(1000):
            st.put(f"t{{i}}", {{"i": i, "pad": b"x" * 20000}})
            print(i, flush=True)
    """)
    p = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    for _ in range(30):
        p.stdout.readline()
    os.kill(p.pid, signal.SIGKILL)
    p.wait()
    st = TaskStore(tmp_path / "store", "h", resume=True)
    done = st.finished()
    assert len(done) >= 30
    for tid in done:  # every file present is whole
        assert st.get(tid)["i"] == int(tid[1:])
    leftovers = [f for f in os.listdir(tmp_path / "store" / "tasks") if f.startswith(".")]
    assert len(leftovers) <= 1  # at most the one temp file being written at the kill


def test_unknown_engine_is_input_error():
    with pytest.raises(InputError, match="unknown engine"):
        make_engine("mpi")


def _stop_at_two(x):
    """A task whose run records a stop signal without raising: what is left when the interpreter
    drops a KeyboardInterrupt raised inside a finaliser (the Python docs' 'Exception ignored in')."""
    from topology.errors import request_stop

    if x == 2:
        request_stop(signal.SIGINT)
    return x * x


def test_recorded_stop_ends_the_run_at_the_next_task(tmp_path):
    from topology.errors import clear_stop
    from topology.execution import SerialEngine
    from topology.execution import run_tasks

    store = TaskStore(tmp_path / "store", "h", resume=False)
    tasks = [Task(f"t{i}", _stop_at_two, {"x": i}) for i in range(5)]
    try:
        with pytest.raises(KeyboardInterrupt):
            run_tasks(tasks, store, SerialEngine(), show_progress=False)
    finally:
        clear_stop()
    assert store.finished() == {"t0", "t1", "t2"}  # the task that saw the signal is kept, none after
    assert run_tasks(tasks, store, SerialEngine(), show_progress=False)["computed"] == 2


def test_whole_temporary_file_is_not_a_finished_task(tmp_path):
    # a kill between writing a task's temporary file and renaming it leaves a whole pickle under
    # a dot name; resuming must not count that task as finished (its final file is missing)
    import pickle

    st = TaskStore(tmp_path / "store", "h", resume=False)
    st.put("t0", {"i": 0})
    (tmp_path / "store" / "tasks" / ".t1.abc123.pkl").write_bytes(pickle.dumps({"id": "t1", "result": {"i": 1}}))
    again = TaskStore(tmp_path / "store", "h", resume=True)
    assert again.finished() == {"t0"} and again.get("t0") == {"i": 0}
