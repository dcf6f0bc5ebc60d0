"""`topology run` with the targeted search: a lens-space sky is detected as that lens space, an
isotropic sky is not, thresholds come from null skies searched for every target, and a space
whose own skies are always recovered is excluded where it is not detected."""

import json

import numpy as np
import pytest

from topology import significance as sig
from topology.config import config_from_dict
from topology.errors import InputError
from topology.run import plan_from_config, run

TARGETED = {
    "cosmology": {"omega_k": -0.03},
    "maps": [
        {"name": "lens", "space": {"family": "lens", "p": 8, "q": 1}, "sky": {"seed": 3}},
        {"name": "iso", "space": {"family": "isotropic"}, "sky": {"seed": 4}},
    ],
    "instrument": {"fwhm_deg": 4.0, "noise_uk": 1.0, "nside": 16, "lmax": 24},
    "search": {"mode": "targeted", "radii": "10:80:1", "nside_work": 16, "fwhm_deg": 5.0, "m_max": 12,
               "orientation_nside": 1, "n_keep": 8, "targets": [{"family": "lens", "p": 8, "q": 1}]},
    "significance": {"n_null": 9, "false_alarm": 0.2, "n_injections": 3, "efficiency_level": 0.6, "seed": 2},
    "execution": {"engine": "serial"},
}


@pytest.fixture(scope="module")
def targeted_run(tmp_path_factory):
    plan = plan_from_config(config_from_dict(json.loads(json.dumps(TARGETED))),
                            tmp_path_factory.mktemp("targeted") / "out")
    return plan, run(plan)


def test_lens_sky_detected_as_its_space_and_isotropic_sky_not(targeted_run):
    # check: in L(8,1) every observer sees back-to-back circle pairs of one radius, cos(alpha) =
    # tan(pi/8) / tan(chi_rec/R_c) (Cornish, Spergel & Starkman 1998; Gausmann et al. 2001)
    plan, summary = targeted_run
    lens, iso = summary["maps"]
    assert lens["detected"] and not iso["detected"]
    t = lens["targets"][0]
    assert t["S_combined"] > 0.85 and t["Z_combined"] > t["threshold"]
    # check: Stouffer et al. 1949, Z = sum S_eq / sqrt(P) = sqrt(P) times the mean
    assert t["Z_combined"] == pytest.approx(t["S_combined"] * np.sqrt(t["n_pairs_used"]), rel=1e-9)
    assert t["p_value"] == pytest.approx(1 / 10)  # above every null sky: the +1-corrected minimum
    chi = plan.cosmology.chi_rec_over_curvature_radius
    alpha = np.degrees(np.arccos(np.tan(np.pi / 8) / np.tan(chi)))
    assert all(abs(c["radius_deg"] - alpha) < 1e-6 for c in lens["candidates"])
    assert iso["targets"][0]["Z_combined"] < iso["targets"][0]["threshold"]


def test_thresholds_are_the_null_quantiles_and_exclusion_follows_efficiency(targeted_run):
    plan, summary = targeted_run
    out = plan.out_dir
    th = summary["calibration"]
    assert th["efficiency"][0] >= 2 / 3  # skies of L(8,1) itself are recovered
    iso = summary["maps"][1]["targets"][0]
    # excluded needs the exact one-sided 95% lower limit, not the fraction, to reach the level
    # check: Clopper & Pearson 1934, Biometrika 26, 404: B^-1(0.05; k, n - k + 1); 3 of 3 give
    # 0.05^(1/3) = 0.368 < 0.6, so 3 skies can never exclude at 0.6
    from scipy.stats import beta

    k = round(iso["efficiency"] * 3)
    assert iso["efficiency_lower"] == pytest.approx(0.0 if k == 0 else beta.ppf(0.05, k, 3 - k + 1))
    assert beta.ppf(0.05, 3, 1) == pytest.approx(0.05 ** (1 / 3))
    assert iso["excluded"] == (iso["efficiency_lower"] >= 0.6) and not iso["excluded"]
    for name in ("summary.json", "index.html", "bounds.tex", "thresholds.ecsv", "efficiency.ecsv",
                 "candidates.ecsv", "targets_lens.png", "sky_iso.png"):
        assert (out / name).is_file(), name
    assert "excluded" in (out / "bounds.tex").read_text()


def test_targeted_threshold_matches_significance_module(targeted_run, tmp_path):
    # the stored null statistics give back the reported threshold (no smoothing across targets)
    import pickle

    plan, summary = targeted_run
    null = []
    for i in range(9):
        with open(plan.out_dir / "store" / "tasks" / f"null_{i:05d}.pkl", "rb") as fh:
            null.append(pickle.load(fh)["result"]["z_comb"])
    th = sig.thresholds([0], np.array(null), 0.2, smooth=False)
    assert summary["calibration"]["threshold_whole_range"][0] == pytest.approx(th.whole_range[0])
    assert summary["calibration"]["threshold_local"][0] == pytest.approx(np.quantile(null, 0.8, method="higher"))


@pytest.mark.parametrize("change, message", [
    (lambda d: d["search"].pop("targets"), "at least one target"),
    (lambda d: d["search"].update(targets=[{"family": "lense"}]), "did you mean"),
    (lambda d: d["search"].update(mode="antipodal"), "only with mode"),
    (lambda d: d["cosmology"].update(omega_k=0.0), "omega_k"),
])
def test_bad_targets_are_refused_at_plan_time(change, message, tmp_path):
    data = json.loads(json.dumps(TARGETED))
    change(data)
    with pytest.raises(InputError, match=message):
        plan_from_config(config_from_dict(data), tmp_path / "out")


def test_targeted_latex_compiles(targeted_run, tmp_path):
    from rendering import compile_latex

    plan, _ = targeted_run
    compile_latex(plan.out_dir / "bounds.tex", tmp_path)
