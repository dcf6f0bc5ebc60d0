"""A run of field T+E calibrates on polarised skies: its injected skies are polarised skies of a
flat space (topology.run.polarised), so the run derives an efficiency, an alpha_min and a bound
for T alone, E alone and T + E on the same skies, and its report names the field; a spherical
injected family is refused in one line."""

import json
import pickle

import numpy as np
import pytest
from scipy import stats

from topology import significance
from topology.cli import main

pytest.importorskip("camb")  # the E transfer of flat polarised skies (a test extra)

RUN = '''[[maps]]
name = "pol"
path = "pol.fits"
field = "T+E"
[instrument]
fwhm_deg = 8.0
noise_uk = 1.0
noise_pol_uk = 0.01
nside = 16
lmax = 32
terms = ["sw", "doppler", "isw"]
[search]
radii = "40:40:1"
nside_work = 8
fwhm_deg = 6.0
m_max = 8
centre_nside = 2
[significance]
n_null = 3
false_alarm = 0.5
injection_radii = "40:40:10"
n_injections = 2
efficiency_level = 0.3
efficiency_confidence = 0.5
injection_families = [{families}]
seed = 3
[execution]
engine = "serial"
'''


def _config(folder, families='"E1"'):
    from topology.config import config_from_dict
    from topology.scenario import cosmology_from_config
    from topology.skies.polarised import observe_polarised, polarised_sky, write_iqu_fits

    if not (folder / "pol.fits").exists():  # the data: a polarised isotropic sky (no circles)
        sky = polarised_sky(cosmology_from_config(config_from_dict({})), lmax=32, seed=5)
        iqu = observe_polarised(sky, nside=16, fwhm_deg=8.0, noise_uk=1.0, noise_pol_uk=0.01, seed=5, lmax=32)
        write_iqu_fits(folder / "pol.fits", iqu, [("POLCCONV", "COSMO", "Q/U convention")])
    cfg = folder / "run.toml"
    cfg.write_text(RUN.replace("{families}", families))
    return cfg


def _stored(out, task):
    with open(out / "store" / "tasks" / f"{task.replace('/', '_')}.pkl", "rb") as f:
        rec = pickle.load(f)
    return rec.get("result", rec)


def _lower(k, n, confidence=0.5):
    """One-sided lower limit of k of n (Clopper & Pearson 1934) through scipy's beta quantile."""
    return 0.0 if k == 0 else float(stats.beta.ppf(1 - confidence, k, n - k + 1))


def test_te_run_injects_polarised_flat_skies_and_reports_each_field(tmp_path, capsys):
    cfg = _config(tmp_path)
    assert main(["run", str(cfg), "--out", str(tmp_path / "out"), "--quiet"]) == 0, capsys.readouterr().err
    out = tmp_path / "out"
    summary = json.loads((out / "summary.json").read_text())
    cal = summary["calibration"]
    assert cal["field"] == "T+E" and summary["maps"][0]["field"] == "T+E"
    (fam,) = cal["families"]
    assert fam["geometry"] == "flat" and fam["n_injections"] == 2
    # T alone, E alone and T + E on the same skies: each field's recovery recomputed from the stored
    # searches of the injected polarised skies against that field's null thresholds, and its
    # efficiency lower limit against scipy's beta quantile
    rows = {r["field"]: r for r in cal["by_field"]}
    assert list(rows) == ["T", "E", "T+E"]
    for field, row in rows.items():
        thr = np.array(row["threshold_whole_range"])
        found = 0
        for j in range(2):
            rec = _stored(out, f"inj/{fam['task_key']}/40/{j:04d}")
            s = np.asarray(rec["s_max"] if field == "T+E" else rec["s_max_fields"][field])
            found += bool(np.any(s > thr))
        (f,) = row["families"]
        assert f["recovered"] == [found] and f["efficiency_lower"][0] == pytest.approx(_lower(found, 2), abs=1e-9)
        assert f["alpha_min_deg"] == (40.0 if _lower(found, 2) >= 0.3 else None)
        if field != "T+E":  # the field's thresholds come from its own null S_max (the same skies)
            null = np.array([_stored(out, f"null/{i:05d}")["s_max_fields"][field] for i in range(3)])
            want = significance.thresholds(np.array([40.0]), null, 0.5).whole_range
            assert thr == pytest.approx(want, rel=1e-12)
    assert rows["T+E"]["families"][0]["recovered"] == fam["recovered"]
    assert set(summary["maps"][0]["by_field"]) == {"T", "E", "T+E"}
    # the report names the field its thresholds, efficiency and bound come from, and has the table
    assert "field: T+E" in (out / "thresholds.ecsv").read_text()
    assert "field: T+E" in (out / "efficiency.ecsv").read_text()
    assert "T alone, E alone and T + E" in (out / "fields.ecsv").read_text()
    html = (out / "index.html").read_text()
    assert "Searched field: T and E combined" in html and "T alone, E alone and T+E (same skies)" in html
    if summary["maps"][0]["bounds"]:
        assert "field: T+E" in (out / "flat_bounds.ecsv").read_text()
        assert "Searched in T+E" in (out / "bounds.tex").read_text()


def test_te_search_keeps_each_maps_own_smax(tmp_path):
    # the T and E S_max a T + E search records per radius are those of a search of T alone and of
    # E alone (same hierarchy), so a T+E run calibrates the three fields on the same skies
    import dataclasses

    from topology.config import load_config
    from topology.run import tasks as T
    from topology.run.plan import plan_from_config
    from topology.run.polarised import simulate_polarised

    plan = plan_from_config(load_config(_config(tmp_path)), tmp_path / "o")
    iqu = simulate_polarised(plan, None, None, T.run_cosmology(plan), 7)
    m, pol = T.polarised_input_of(plan, iqu, "sky")
    fields = T.smax_by_field(T.search_values(m, plan, "sky", polarised=pol), plan.radii_deg)
    t = T.smax_by_radius(T.search_values(m, plan, "sky"), plan.radii_deg)
    e = T.smax_by_radius(T.search_values(m, plan, "sky", polarised=dataclasses.replace(pol, field="E")),
                         plan.radii_deg)
    assert np.all(np.isfinite(t)) and np.all(np.isfinite(e))
    assert np.array_equal(fields["T"], t) and np.array_equal(fields["E"], e)


def test_spherical_family_in_a_polarised_run_is_one_line(tmp_path, capsys):
    cfg = _config(tmp_path, '"E1", { family = "lens", p = 8, q = 3 }')
    code = main(["run", str(cfg), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "Traceback" not in err[0]
    assert "no polarised skies of spherical spaces" in err[0] and "injection_families #2" in err[0]
    assert not (tmp_path / "out").exists()
