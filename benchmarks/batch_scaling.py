"""Scaling of the null-calibration stage of ``topology run`` on the local engine.

Runs the same null/ tasks (isotropic skies synthesised, observed and searched) with 1 and then
2 local workers in one run and prints both wall times, the speed-up (target >= 1.7 on 2 cores)
and the peak resident memory of any worker (ru_maxrss measured inside each task). The workers
are started and warmed (imports) first and that one-off start-up, which does not grow with the
number of skies, is printed apart; the speed-up of the stage is measured after it, and the
ratio including it is printed too.

    python benchmarks/batch_scaling.py [--n-null 12] [--nside 32]
"""

from __future__ import annotations

import argparse
import os
import resource
import time

from topology.config import config_from_dict
from topology.execution import LocalEngine, Task
from topology.run import build_tasks, plan_from_config


def measured(fn, kwargs):
    """Run one task; return its result, the worker's pid and its peak RSS so far (MB)."""
    c0 = time.process_time()
    result = fn(**kwargs)
    return {"result": result, "pid": os.getpid(), "cpu_s": time.process_time() - c0,
            "maxrss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}


def config(n_null: int, nside: int) -> dict:
    return {
        "maps": [{"name": "iso", "space": {"family": "isotropic"}, "sky": {"seed": 4}}],
        "mask": {"galactic_b_deg": 10.0},
        "instrument": {"fwhm_deg": 2.0, "noise_uk": 1.0, "nside": nside, "lmax": 2 * nside},
        "search": {"radii": "25:50:5", "nside_work": nside, "fwhm_deg": 4.0, "m_max": 24, "centre_nside": 8},
        "significance": {"n_null": n_null, "false_alarm": 0.2, "n_injections": 1, "injection_radii": "30:40:10",
                         "seed": 11},
        "execution": {"engine": "local"},
    }


def warm_up() -> int:
    """Import what a null task imports (the one-off start-up cost of a worker)."""
    import healpy  # noqa: F401
    import scipy.special  # noqa: F401

    import topology.run.tasks  # noqa: F401
    import topology.search.engine  # noqa: F401
    import topology.skies.isotropic  # noqa: F401

    time.sleep(0.5)  # keep this worker busy so that every worker gets one warm-up task
    return os.getpid()


def timed(tasks, workers: int):
    eng = LocalEngine(workers)
    t_start = time.perf_counter()
    try:
        list(eng.run([Task(f"warm/{i}", warm_up, {}) for i in range(workers)]))
        startup = time.perf_counter() - t_start
        t0 = time.perf_counter()
        res = dict(eng.run(tasks))
        wall = time.perf_counter() - t0
    finally:
        eng.close()
    total = time.perf_counter() - t_start
    per_worker = {}
    for r in res.values():
        per_worker[r["pid"]] = max(per_worker.get(r["pid"], 0.0), r["maxrss_mb"])
    cpu = sum(r["cpu_s"] for r in res.values())
    print(f"{workers} worker(s): worker start-up {startup:.2f} s, then {wall:7.2f} s wall for the stage "
          f"({wall / len(tasks):.2f} s per sky; {total:.2f} s with start-up), task CPU {cpu:.1f} s, "
          f"core use {cpu / (wall * min(workers, len(tasks))):.0%} (below ~90%: other work on the machine), "
          f"peak worker RSS {max(per_worker.values()):.0f} MB, {len(per_worker)} worker process(es)")
    return wall, total, res, per_worker


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n-null", type=int, default=12)
    ap.add_argument("--nside", type=int, default=32)
    args = ap.parse_args()
    plan = plan_from_config(config_from_dict(config(args.n_null, args.nside)), "unused_out")
    nulls = [t for t in build_tasks(plan) if t.id.startswith("null/")]
    tasks = [Task(t.id, measured, {"fn": t.fn, "kwargs": t.kwargs}) for t in nulls]
    print(f"null-calibration stage: {len(tasks)} null skies at N_side {args.nside}, "
          f"{os.cpu_count()} CPUs visible, load average {os.getloadavg()[0]:.2f} (other work skews the ratio)")
    wall1, total1, res1, mem1 = timed(tasks, 1)
    wall2, total2, res2, mem2 = timed(tasks, 2)
    same = all((res1[k]["result"]["s_max"] == res2[k]["result"]["s_max"]).all() for k in res1)
    print(f"identical S_max with 1 and 2 workers: {same}")
    speedup = wall1 / wall2
    peak = max(max(mem1.values()), max(mem2.values()))
    print(f"speed-up {speedup:.2f} of the stage once workers run (target >= 1.7 on 2 cores); "
          f"{total1 / total2:.2f} including the one-off worker start-up; load average now {os.getloadavg()[0]:.2f}")
    print(f"speedup={speedup:.2f} peak_worker_mb={peak:.0f}")


if __name__ == "__main__":
    main()
