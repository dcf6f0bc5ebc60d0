"""`topology run` end to end on tiny settings: the report, determinism across engines, resume,
the false-alarm rate on fresh null skies, and bad input."""

import json
import os

import numpy as np
import pytest

from topology.cli import main
from topology.config import config_from_dict
from topology.execution import make_engine
from topology.run import build_tasks, plan_from_config, run
from topology.store import MemoryStore

TINY = {
    "maps": [
        {"name": "torus", "space": {"family": "E1", "lengths": [1.6, 1.6, 1.6]}, "sky": {"seed": 3}},
        {"name": "iso", "space": {"family": "isotropic"}, "sky": {"seed": 4}},
    ],
    "mask": {"galactic_b_deg": 10.0},
    "instrument": {"fwhm_deg": 4.0, "noise_uk": 1.0, "nside": 16, "lmax": 32},
    "search": {"radii": "27:47:5", "nside_work": 16, "fwhm_deg": 6.0, "m_max": 12, "centre_nside": 4},
    "significance": {"n_null": 9, "false_alarm": 0.2, "n_injections": 3, "injection_radii": "32:42:10", "seed": 5},
    "bounds": {"families": [{"family": "E1", "lengths": [1.9, 1.9, 1.9]}], "p_max": 6, "m_max": 3},
    "execution": {"engine": "serial"},
}


def _plan(tmp_path, data=None, **kw):
    cfg = config_from_dict(json.loads(json.dumps(data or TINY)))
    return plan_from_config(cfg, tmp_path / "out", **kw)


def _strip(summary):
    s = json.loads(json.dumps(summary, default=str))
    s["provenance"].pop("timings_s")
    s["provenance"].pop("engine")
    s["provenance"].pop("tasks")
    return s


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("run")
    plan = _plan(tmp)
    summary = run(plan)
    return plan, summary


def test_report_folder_is_complete(tiny_run):
    plan, summary = tiny_run
    out = plan.out_dir
    for name in ("summary.json", "provenance.json", "index.html", "candidates.ecsv", "thresholds.ecsv",
                 "efficiency.ecsv", "bounds.ecsv", "bounds.tex", "efficiency.png", "efficiency.pdf",
                 "smax_torus.png", "smax_torus.pdf", "sky_iso.png"):
        assert (out / name).is_file(), name
    on_disk = json.loads((out / "summary.json").read_text())
    assert [m["name"] for m in on_disk["maps"]] == ["torus", "iso"]
    for m in on_disk["maps"]:
        assert set(m) >= {"name", "detected", "candidates", "false_alarm", "n_null", "alpha_min_deg", "bounds"}
        for c in m["candidates"]:
            assert set(c) >= {"center_a", "center_b", "radius_deg", "twist_deg", "orientation", "S", "p_value"}
            assert 1 / 10 <= c["p_value"] <= 1.0  # +1 correction with 9 null skies
    html = (out / "index.html").read_text()
    assert "What these results assume" in html and "src=\"data:image/png;base64," in html
    assert "\\caption{" in (out / "bounds.tex").read_text() or on_disk["maps"][1]["bounds"] is None
    assert not [p for p in os.listdir(out) if p.startswith(".report")]


def test_torus_is_found_at_its_radius(tiny_run):
    # check: Cornish, Spergel & Starkman 1998: a cubic torus of side 1.6 chi_rec has back-to-back
    # pairs of radius arccos(0.8) = 36.87 deg, opposite orientation, twist 0 (our convention)
    _, summary = tiny_run
    torus = summary["maps"][0]
    assert torus["detected"]
    best = max(torus["candidates"], key=lambda c: c["S"])
    assert abs(best["radius_deg"] - 36.87) <= 2.5
    assert best["orientation"] == "opposite"
    assert min(best["twist_deg"], 360 - best["twist_deg"]) < 10
    assert abs(np.dot(_vec(best["center_a"]), _vec(best["center_b"])) + 1) < 1e-6
    assert torus["bounds"] is None  # a detected map gives no bound


def _vec(lonlat):
    lon, lat = np.radians(lonlat)
    return np.array([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)])


def test_same_summary_with_other_engine_and_after_resume(tiny_run, tmp_path):
    plan, summary = tiny_run
    other = run(_plan(tmp_path, engine="local", workers=2))
    assert _strip(other) == _strip(summary)
    # a finished run resumed computes nothing and writes the same summary
    again = run(plan, resume=True)
    assert again["provenance"]["tasks"]["computed"] == 0
    assert _strip(again) == _strip(summary)


def test_resume_after_partial_store_recomputes_only_missing(tmp_path):
    plan = _plan(tmp_path)
    tasks = build_tasks(plan)
    store = MemoryStore()
    for t in tasks[:5]:
        store.put(t.id, t.fn(**t.kwargs), t.key)
    res = run(plan, store=store)
    assert res["provenance"]["tasks"] == {"total": len(tasks), "computed": len(tasks) - 5, "reused_from_store": 5}


def test_false_alarm_rate_on_fresh_null_skies(tmp_path):
    # The whole-range threshold calibrated on N null skies is exceeded by fresh isotropic skies at
    # the nominal rate, within the binomial errors of calibration and test (common practice).
    from topology import significance as sig
    from topology.execution import Task
    from topology.run.tasks import null_id, task_null

    data = json.loads(json.dumps(TINY))
    data["significance"].update(n_null=49, false_alarm=0.1)
    data["search"]["radii"] = "20:60:10"
    data["search"]["n_keep"] = 8  # the rate holds for any search settings; fewer candidates run faster
    plan = _plan(tmp_path, data)
    n_cal, n_fresh = 49, 120
    tasks = [Task(null_id(i), task_null, {"plan": plan, "task_id": null_id(i)})
             for i in range(n_cal + n_fresh)]
    eng = make_engine("local", 2)
    try:
        res = dict(eng.run(tasks))
    finally:
        eng.close()
    smax = np.array([res[f"null/{i:05d}"]["s_max"] for i in range(n_cal + n_fresh)])
    th = sig.thresholds(plan.radii_deg, smax[:n_cal], 0.1)
    rate = float((smax[n_cal:] > th.whole_range).any(axis=1).mean())
    err = np.hypot(np.sqrt(0.1 * 0.9 / n_cal), np.sqrt(0.1 * 0.9 / n_fresh))
    assert abs(rate - 0.1) < 3 * err, (rate, err)


@pytest.mark.parametrize("change, message", [
    (lambda d: d.update(maps=[]), "no maps"),
    (lambda d: d["maps"].append({"name": "x", "path": "missing.fits"}), "map file not found"),
    (lambda d: d["significance"].update(n_null=5), "need at least 9"),
    (lambda d: d["bounds"].update(families=[{"family": "E99"}]), "unknown family"),
    (lambda d: d["significance"].update(injection_radii="10:80:10"), "outside the searched radii"),
    (lambda d: d["maps"].append({"name": "torus", "space": {"family": "isotropic"}}), "used twice"),
])
def test_bad_config_is_one_line_exit_2_and_writes_nothing(tmp_path, capsys, change, message):
    data = json.loads(json.dumps(TINY))
    change(data)
    cfg = tmp_path / "run.toml"
    cfg.write_text(_toml(data))
    out = tmp_path / "out"
    code = main(["run", str(cfg), "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and message in err[0], err
    assert not out.exists()


def test_existing_output_refused_without_force(tiny_run, capsys):
    plan, _ = tiny_run
    cfg = plan.out_dir.parent / "again.toml"
    cfg.write_text(_toml(TINY))
    code = main(["run", str(cfg), "--out", str(plan.out_dir)])
    assert code == 2 and "--force" in capsys.readouterr().err


def test_resume_refuses_store_of_another_config(tiny_run, capsys):
    plan, _ = tiny_run
    data = json.loads(json.dumps(TINY))
    data["significance"]["seed"] = 99
    cfg = plan.out_dir.parent / "changed.toml"
    cfg.write_text(_toml(data))
    code = main(["run", str(cfg), "--out", str(plan.out_dir), "--resume"])
    assert code == 2 and "different config" in capsys.readouterr().err


def _toml(data) -> str:
    """A small TOML writer for the test configs (tables, arrays of tables, inline tables)."""
    def val(v):
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return json.dumps(v)
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {val(x)}" for k, x in v.items()) + " }"
        if isinstance(v, list):
            return "[" + ", ".join(val(x) for x in v) + "]"
        return repr(v)

    lines = []
    for sec, body in data.items():
        if isinstance(body, list):
            for entry in body:
                lines.append(f"[[{sec}]]")
                lines += [f"{k} = {val(v)}" for k, v in entry.items()]
        else:
            lines.append(f"[{sec}]")
            lines += [f"{k} = {val(v)}" for k, v in body.items()]
    return "\n".join(lines) + "\n"

