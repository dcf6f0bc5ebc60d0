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
    # two injected families (back-to-back E1, half-turn E2 seen off its axis), 2 skies per radius
    # and family: 2 of 2 give a one-sided 68% lower limit of 0.32^(1/2) = 0.566 >= 0.5
    "significance": {"n_null": 9, "false_alarm": 0.2, "n_injections": 2, "injection_radii": "32:42:10", "seed": 5,
                     "efficiency_level": 0.5, "efficiency_confidence": 0.68,
                     "injection_families": ["E1", {"family": "E2", "lengths": [1.0, 1.0, 0.5]}]},
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
    best = torus["candidates"][0]  # ranked by S_eq, the score that decides detection
    assert abs(best["radius_deg"] - 36.87) <= 2.5
    assert best["orientation"] == "opposite"
    assert min(best["twist_deg"], 360 - best["twist_deg"]) < 10
    assert abs(np.dot(_vec(best["center_a"]), _vec(best["center_b"])) + 1) < 1e-6
    assert torus["bounds"] is None  # a detected map gives no bound


def test_candidates_ranked_and_tested_on_s_eq(tiny_run):
    # the score that decides detection (S_eq, which S_max per radius is) ranks and tests the
    # candidates; p = (1 + #null >= S_eq) / (1 + N) at the candidate's radius (Davison & Hinkley
    # 1997, eq. 4.11), from the stored null skies
    import pickle

    plan, summary = tiny_run
    null = np.array([pickle.load(open(plan.out_dir / "store" / "tasks" / f"null_{i:05d}.pkl", "rb"))["result"]["s_max"]
                     for i in range(plan.n_null)])
    thr = np.array(summary["calibration"]["threshold_whole_range"])
    for m in summary["maps"]:
        cands = m["candidates"]
        assert cands
        s_eq = [c["S_eq"] for c in cands]
        assert s_eq == sorted(s_eq, reverse=True)
        for c in cands:
            assert 0.0 < c["overlap"] <= 1.0 and c["S_eq"] <= c["S"] + 1e-12  # S_eq <= S for f <= 1
            i = int(np.argmin(np.abs(plan.radii_deg - c["radius_deg"])))
            assert c["above_threshold"] == (c["S_eq"] > thr[i])
            assert c["p_value_local"] == pytest.approx((1 + np.sum(null[:, i] >= c["S_eq"])) / (1 + plan.n_null))
        assert any(c["above_threshold"] for c in cands) == m["detected"]


def test_each_injected_family_has_its_skies_efficiency_and_alpha_min(tiny_run):
    from scipy.stats import beta

    plan, summary = tiny_run
    ids = [t.id for t in build_tasks(plan) if t.id.startswith("inj/")]
    assert len(ids) == 2 * 2 * 2 and {i.split("/")[1].split("-")[0] for i in ids} == {"E1", "E2"}
    fams = summary["calibration"]["families"]
    assert [f["kind"] for f in fams] == ["back-to-back", "general"]
    for f in fams:
        k = np.array(f["recovered"])
        # check: Clopper & Pearson 1934, Biometrika 26, 404: one-sided 68% lower limit B^-1(0.32; k, n - k + 1)
        lower = np.where(k > 0, beta.ppf(0.32, np.maximum(k, 1), 2 - k + 1), 0.0)
        assert np.allclose(f["efficiency_lower"], lower)
        expect = None  # the smallest radius from which the lower limit holds up to the largest
        for r, good in sorted(zip(plan.injection_radii_deg, lower >= 0.5), reverse=True):
            if not good:
                break
            expect = float(r)
        assert f["alpha_min_deg"] == expect
    iso = summary["maps"][1]
    assert iso["alpha_min_by_family"] == {f["label"]: f["alpha_min_deg"] for f in fams}
    from astropy.table import Table

    table = Table.read(plan.out_dir / "efficiency.ecsv", format="ascii.ecsv")
    assert list(table["injected_family"]) == [fams[0]["label"]] * 2 + [fams[1]["label"]] * 2
    assert np.allclose(table["lower"], fams[0]["efficiency_lower"] + fams[1]["efficiency_lower"])
    if iso["bounds"] is not None:
        src = iso["bounds"]["flat"]["sources"]
        assert src["cubic torus E1"]["calibration"] == "own"
        assert src["cubic torus E1"]["alpha_min_deg"] == fams[0]["alpha_min_deg"]
        amins = [f["alpha_min_deg"] for f in fams]
        assert src["any flat space"]["alpha_min_deg"] == (None if None in amins else max(amins))
        for row in iso["bounds"]["spherical"]:  # homogeneous rows borrow E1, the others E2
            assert row["source"]["calibration"] == "borrowed"
            assert row["source"]["alpha_min_deg"] == amins[0 if row["homogeneous"] else 1]


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

