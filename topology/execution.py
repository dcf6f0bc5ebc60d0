"""Execution engines: run independent tasks serially, on a local process pool, or on Dask.

A task is ``Task(id, fn, kwargs)`` with ``fn`` a module-level function (picklable) that takes
keyword arguments and returns plain data. Its random draws come from
:func:`task_seed` (run seed + task id, numpy SeedSequence), so results do not depend on the
engine, the number of workers or the order in which tasks finish. Engines yield
``(task_id, result)`` as tasks finish; the caller stores each result at once.

* ``serial``: in this process, in order (debugging).
* ``local``: a process pool with one worker per core (the default); BLAS threads are pinned to
  one per worker so that workers do not compete.
* ``dask``: dask.distributed, the ``dist`` extra: connect to a running scheduler
  (``scheduler = "tcp://host:8786"``) or start a local cluster with ``workers = N``. A task on a
  worker that dies is rescheduled by Dask on another worker.
"""

from __future__ import annotations

import hashlib
import os
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from multiprocessing import get_context
from typing import Callable, Iterable, Iterator

import numpy as np

from .errors import InputError, note, raise_if_stopped

ENGINES = ("serial", "local", "dask")
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


@dataclass(frozen=True)
class Task:
    """``fn(**kwargs)`` under the name ``id``; ``key`` fingerprints the inputs it reads (a stored
    result counts as finished only for the same key, see :mod:`topology.store`)."""

    id: str
    fn: Callable
    kwargs: dict = field(default_factory=dict)
    key: str = ""


def task_seed(run_seed: int, task_id: str) -> np.random.SeedSequence:
    """SeedSequence from the run seed and a stable hash of the task id."""
    words = np.frombuffer(hashlib.sha256(task_id.encode()).digest()[:16], dtype=np.uint32)
    return np.random.SeedSequence(entropy=int(run_seed), spawn_key=tuple(int(w) for w in words))


def _call(fn, kwargs):
    return fn(**kwargs)


def default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover
        return max(1, os.cpu_count() or 1)


class SerialEngine:
    name = "serial"

    def run(self, tasks: Iterable[Task]) -> Iterator[tuple[str, object]]:
        for t in tasks:
            yield t.id, t.fn(**t.kwargs)

    def close(self):
        pass


class LocalEngine:
    """Process pool (spawned workers, one BLAS thread each), kept between :meth:`run` calls
    until :meth:`close` (so a second batch does not pay the workers' start-up again)."""

    name = "local"

    def __init__(self, workers: int | None = None):
        self.workers = workers or default_workers()
        self._pool = None

    def _get_pool(self) -> ProcessPoolExecutor:
        if self._pool is None:
            saved = {k: os.environ.get(k) for k in _THREAD_VARS}
            for k in _THREAD_VARS:
                os.environ[k] = "1"
            try:
                self._pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=get_context("spawn"))
            finally:
                for k, v in saved.items():
                    if v is None:
                        os.environ.pop(k, None)
                    else:
                        os.environ[k] = v
        return self._pool

    def run(self, tasks: Iterable[Task]) -> Iterator[tuple[str, object]]:
        tasks = list(tasks)
        if not tasks:
            return
        pool = self._get_pool()
        ok = False
        try:
            pending = {pool.submit(_call, t.fn, t.kwargs): t.id for t in tasks}
            while pending:
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in done:
                    tid = pending.pop(fut)
                    yield tid, fut.result()
            ok = True
        finally:
            if not ok:  # an error, an interrupt or an abandoned generator: stop the workers now
                self.close()

    def close(self):
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


class DaskEngine:
    """dask.distributed client: an existing scheduler or a LocalCluster of ``workers``."""

    name = "dask"

    def __init__(self, workers: int | None = None, scheduler: str | None = None):
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:
            raise InputError("the dask engine needs dask.distributed: pip install 'topology[dist]'",
                             "[execution] engine") from None
        self._cluster = None
        if scheduler:
            try:
                self.client = Client(scheduler, timeout="20s")
            except (OSError, TimeoutError) as e:
                raise InputError(f"cannot reach the Dask scheduler ({e})", f"[execution] scheduler {scheduler}") from None
        else:
            self._cluster = LocalCluster(n_workers=workers or default_workers(), threads_per_worker=1,
                                         processes=True, dashboard_address=None,
                                         env={k: "1" for k in _THREAD_VARS})
            self.client = Client(self._cluster)

    def run(self, tasks: Iterable[Task]) -> Iterator[tuple[str, object]]:
        from dask.distributed import as_completed

        tasks = list(tasks)
        if not tasks:
            return
        futures = [self.client.submit(_call, t.fn, t.kwargs, key=f"topology-{t.id}", pure=False, retries=2)
                   for t in tasks]
        ids = {f.key: t.id for f, t in zip(futures, tasks)}
        for fut in as_completed(futures):
            yield ids[fut.key], fut.result()

    def close(self):
        self.client.close()
        if self._cluster is not None:
            self._cluster.close()


def make_engine(name: str = "local", workers: int | None = None, scheduler: str | None = None):
    if name not in ENGINES:
        raise InputError(f"unknown engine {name!r}; choose one of {', '.join(ENGINES)}", "[execution] engine")
    if workers is not None and workers < 1:
        raise InputError(f"must be >= 1, got {workers}", "[execution] workers")
    if name == "serial":
        return SerialEngine()
    if name == "local":
        return LocalEngine(workers)
    return DaskEngine(workers, scheduler)


def run_tasks(tasks: list[Task], store, engine, show_progress: bool | None = None,
              label: str = "topology run") -> dict:
    """Run the tasks that ``store`` has not finished (for their key) on ``engine``, storing each
    result as it finishes; a task finished from other inputs is run again, with a note.
    Progress (:func:`topology.progress.progress`): a bar on a terminal, a line per task or per 5%
    of the tasks with the time left in a log, nothing with ``show_progress=False``.

    Returns {"computed": n, "reused": n, "elapsed_s": t}."""
    import time

    from .progress import progress

    t0 = time.perf_counter()
    todo = [t for t in tasks if not store.has(t.id, t.key)]
    stale = sum(store.stale(t.id, t.key) for t in todo)
    if stale:
        changed = getattr(store, "changed_inputs", [])
        what = f" ({', '.join(changed)} changed since they ran)" if changed else ""
        note(f"{stale} finished task(s) are recomputed: their inputs changed{what}")
    bar = progress(len(tasks), label, show_progress, initial=len(tasks) - len(todo))
    computed = 0
    try:
        keys = {t.id: t.key for t in todo}
        for tid, result in engine.run(todo):
            store.put(tid, result, keys[tid])
            computed += 1
            bar.update(1)
            raise_if_stopped()
    finally:
        bar.close()
    return {"computed": computed, "reused": len(tasks) - len(todo), "elapsed_s": time.perf_counter() - t0}
