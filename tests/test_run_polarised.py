"""A run of field E calibrates on polarised skies: its injected skies are polarised skies of a
flat space (topology.run.polarised), so the run derives an efficiency, an alpha_min and a bound
in E and its report names the field; a spherical injected family is refused in one line."""

import json
import pickle

import numpy as np
import pytest
from scipy import stats

from topology.cli import main

pytest.importorskip("camb")  # the E transfer of flat polarised skies (a test extra)

RUN = '''[[maps]]
name = "pol"
path = "pol.fits"
field = "E"
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


def test_e_run_injects_polarised_flat_skies_and_bounds_in_e(tmp_path, capsys):
    cfg = _config(tmp_path)
    assert main(["run", str(cfg), "--out", str(tmp_path / "out"), "--quiet"]) == 0, capsys.readouterr().err
    out = tmp_path / "out"
    summary = json.loads((out / "summary.json").read_text())
    cal = summary["calibration"]
    assert cal["field"] == "E" and summary["maps"][0]["field"] == "E"
    (fam,) = cal["families"]
    assert fam["geometry"] == "flat" and fam["n_injections"] == 2
    # recovery recomputed from the stored E searches of the injected polarised skies: S_max within
    # one step of 40 deg above the whole-range threshold of the polarised nulls
    thr = np.array(cal["threshold_whole_range"])
    found = 0
    for j in range(2):
        with open(out / "store" / "tasks" / f"inj_{fam['task_key']}_40_{j:04d}.pkl", "rb") as f:
            rec = pickle.load(f)
        s = np.asarray(rec.get("result", rec)["s_max"])
        found += bool(np.any(s > thr))
    assert fam["recovered"] == [found]
    # the one-sided lower limit: Clopper & Pearson 1934 through scipy's beta quantile
    k = found
    low = 0.0 if k == 0 else stats.beta.ppf(1 - 0.5, k, 2 - k + 1)
    assert fam["efficiency_lower"][0] == pytest.approx(low, abs=1e-9)
    assert fam["alpha_min_deg"] == (40.0 if low >= 0.3 else None)
    # the report names the field its thresholds, efficiency and bound come from
    assert "field: E" in (out / "thresholds.ecsv").read_text()
    assert "field: E" in (out / "efficiency.ecsv").read_text()
    assert "Searched field: E alone" in (out / "index.html").read_text()
    if summary["maps"][0]["bounds"]:
        assert "field: E" in (out / "flat_bounds.ecsv").read_text()
        assert "Searched in E" in (out / "bounds.tex").read_text()


def test_spherical_family_in_a_polarised_run_is_one_line(tmp_path, capsys):
    cfg = _config(tmp_path, '"E1", { family = "lens", p = 8, q = 3 }')
    code = main(["run", str(cfg), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "Traceback" not in err[0]
    assert "no polarised skies of spherical spaces" in err[0] and "injection_families #2" in err[0]
    assert not (tmp_path / "out").exists()
