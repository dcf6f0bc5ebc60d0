"""``topology run``, the main job: search the data maps, calibrate on null skies, measure what the
search can see on injected skies, turn a non-detection into bounds, write the report.

The flow, one module a step::

    plan.py      config -> RunPlan (every key checked, every input file read once)
    tasks.py     the task functions: data maps, null skies, injected skies (one sky maker)
    scan.py      the radius scan (antipodal / all-pairs): tasks, analysis, report parts
    targeted.py  the targeted test of named spaces: tasks, analysis, report parts
    output.py    the output folder (marker, lock, --force) and the report transaction
    __init__.py  run(plan): claim the folder, run the tasks through the store, analyse, publish

A kind of run is a module with ``build_tasks(plan)``, ``analyse(plan, store)``,
``write_report(plan, analysis, summary, staging)`` and ``caution(plan)``; :func:`kind_of`
chooses it. Every task's seed comes from the run seed and its id, so the results do not depend
on the engine or the number of workers; finished tasks are kept in the durable store of the
output folder, keyed by the content of their inputs, and a resumed run recomputes only the
missing or stale ones.
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import replace

from ..execution import Task, make_engine, run_tasks
from ..store import TaskStore, fingerprint
from . import output
from .plan import MapSpec, RunPlan, plan_from_config

__all__ = ["MapSpec", "RunPlan", "build_tasks", "plan_from_config", "run"]

SCREENSHOT_ENV = "TOPOLOGY_SCREENSHOT"  # "0": no page.png beside the report (the test suite sets it)


def kind_of(plan: RunPlan):
    """The module of the plan's kind of run: the targeted test or the radius scan."""
    from . import scan, targeted

    return targeted if plan.targets else scan


def task_keys(plan: RunPlan) -> tuple[str, dict]:
    """Keys of the inputs a task is computed from (:mod:`topology.store`): every task reads the
    shared inputs (mask, weights, generators, spectrum table; the package and camb versions;
    the N_side of the simulated skies); a data task also reads its own map. Returns (the key of
    simulated-sky tasks, {map name: key of its data task})."""
    own = {m.path for m in plan.maps if m.path}
    shared = {f: d for f, d in plan.inputs.items() if f not in own}
    versions = {k: v for k, v in output.versions().items() if k in ("topology", "camb")}
    common = fingerprint(shared, versions, plan.sim_nside)
    data = {m.name: fingerprint(common, plan.inputs.get(m.path) if m.path else None) for m in plan.maps}
    return common, data


def build_tasks(plan: RunPlan) -> list[Task]:
    """Every task of the run, each with the key of its inputs."""
    from . import harmonic
    from .tasks import data_id

    common, data = task_keys(plan)
    keys = {data_id(name): key for name, key in data.items()}
    if harmonic.of(plan):  # a map's likelihood reads its file, as its search does
        keys.update({harmonic.harmonic_id(f["index"], name): key for name, key in data.items()
                     for f in harmonic.of(plan)["families"]})
    tasks = kind_of(plan).build_tasks(plan) + harmonic.build_tasks(plan)
    return [replace(t, key=keys.get(t.id, common)) for t in tasks]


def run(plan: RunPlan, *, force: bool = False, resume: bool = False, show_progress: bool | None = None,
        store=None) -> dict:
    """Execute a validated plan end to end; returns the summary (also written to the folder).
    The output folder is claimed and locked for the whole run (:mod:`topology.run.output`);
    with ``store`` (e.g. a :class:`~topology.store.MemoryStore`) nothing is written."""
    if store is not None:
        return _execute(plan, None, store, show_progress)
    protected = list(plan.inputs) + ([plan.config_path] if plan.config_path else [])
    folder = output.claim(plan.out_dir, force=force, resume=resume, inputs=protected)
    try:
        try:
            store = TaskStore(folder.path / "store", plan.config_hash, resume=resume, inputs=plan.inputs)
        except BaseException:
            folder.discard()
            raise
        return _execute(plan, folder, store, show_progress)
    finally:
        folder.release()


def _execute(plan: RunPlan, folder, store, show_progress) -> dict:
    from . import harmonic

    kind = kind_of(plan)
    timings = {}
    t0 = time.perf_counter()
    tasks = build_tasks(plan)
    ex = plan.execution
    try:
        engine = make_engine(ex["engine"], ex["workers"], ex["scheduler"])
        try:
            counts = run_tasks(tasks, store, engine, show_progress)
        finally:
            engine.close()
    except BaseException:
        # a run that stops before finishing any task leaves nothing behind; otherwise the store
        # of finished tasks stays for --resume
        if folder is not None and not store.finished():
            folder.discard()
        raise
    timings["tasks_s"] = counts["elapsed_s"]
    t1 = time.perf_counter()
    analysis = kind.analyse(plan, store)
    harmonic.analyse(plan, store, analysis)
    timings["analysis_s"] = time.perf_counter() - t1
    provenance = {
        "config": plan.sections, "config_hash": plan.config_hash, "versions": output.versions(),
        "run_seed": plan.significance["seed"],
        "task_seeds": "numpy SeedSequence(entropy=run seed, spawn_key=sha256(task id)[:16] as 4 uint32)",
        "tasks": {"total": len(tasks), "computed": counts["computed"], "reused_from_store": counts["reused"]},
        "engine": {k: v for k, v in ex.items() if v is not None},
        "inputs_sha256": plan.inputs,
        "timings_s": timings,
    }
    if folder is None:  # a caller-given store (a notebook): nothing is written
        return {"maps": analysis.maps, "calibration": analysis.calibration, "provenance": provenance,
                "analysis": analysis}
    summary = {"maps": analysis.maps, "calibration": analysis.calibration,
               "caution": kind.caution(plan) + harmonic.caution(plan), "provenance": provenance}

    later_notes = []  # said once the report is in place

    def write(staging):
        from .. import report

        t2 = time.perf_counter()
        timings["report_s"] = 0.0
        tables, figures = kind.write_report(plan, analysis, summary, staging)
        tables = harmonic.write_report(plan, analysis, staging, tables)
        report.write_index(staging, summary, tables, figures, summary["caution"])
        if os.environ.get(SCREENSHOT_ENV, "1") != "0":  # page.png, when a Chromium is installed
            from ..report.browser import screenshot

            problem = screenshot(staging / "index.html", staging / "page.png")
            if problem:
                later_notes.append(problem)
        timings["report_s"] = time.perf_counter() - t2
        timings["total_s"] = time.perf_counter() - t0
        (staging / "provenance.json").write_text(json.dumps(provenance, indent=1, default=output.json_default))

    published = output.publish(folder.path, write, lambda: summary)
    for text in later_notes:  # after the report is in place: an error before it stays one line
        from ..errors import note

        note(text)
    return published
