"""Injected skies scaled to a circle radius, for every kind of family the sensitivity stage takes."""

import math

import numpy as np
import pytest

from topology import injection
from topology.circles import predict_circles
from topology.cosmology import Cosmology
from topology.errors import InputError

COSMO = Cosmology()


@pytest.mark.parametrize("spec", [
    "E1",
    {"family": "E2", "lengths": [1.0, 1.0, 0.8]},
    {"family": "E3", "lengths": [1.0, 1.0, 1.3]},
    {"family": "E6", "lengths": [1.0, 1.2, 0.9]},
])
@pytest.mark.parametrize("alpha", [20.0, 37.5, 60.0])
def test_flat_injection_has_its_largest_circle_at_alpha(spec, alpha):
    # check: Cornish, Spergel & Starkman 1998, flat circles cos(alpha) = d / (2 chi_rec)
    rng = np.random.default_rng(7)
    space, obs, cosmo = injection.scaled(injection.injection_spec(spec), alpha, rng, COSMO)
    pairs = predict_circles(space, obs, 1.0)
    assert pairs and abs(math.degrees(pairs[0].radius) - alpha) < 1e-6
    assert cosmo is COSMO


def test_default_injection_is_the_cubic_torus_of_side_2_cos_alpha():
    space, obs, _ = injection.scaled(injection.injection_spec("E1"), 30.0, np.random.default_rng(1), COSMO)
    assert np.allclose(space.params["lengths"], [2 * math.cos(math.radians(30.0))] * 3)
    assert len(predict_circles(space, obs, 1.0)) == 3  # three back-to-back pairs (CSS 1998)
    assert injection.describe(injection.injection_spec("E1")) == "cubic-torus (E1)"


@pytest.mark.parametrize("spec, d_min", [
    ({"family": "lens", "p": 8, "q": 1}, 2 * math.pi / 8),
    ({"family": "dodecahedral"}, math.pi / 5),
])
def test_spherical_injection_sets_omega_k_for_alpha(spec, d_min):
    # check: spherical circles cos(alpha) = tan(d/2) / tan(chi) (CSS 1998); Clifford translations
    # of L(8,1) move every point by 2 pi / 8 and of the binary icosahedral group by pi / 5
    # (Gausmann et al. 2001)
    alpha = 35.0
    space, obs, cosmo = injection.scaled(spec, alpha, np.random.default_rng(3), COSMO)
    chi = cosmo.chi_rec_over_curvature_radius
    assert cosmo.omega_k < 0
    assert abs(math.cos(math.radians(alpha)) - math.tan(d_min / 2) / math.tan(chi)) < 1e-4
    pairs = predict_circles(space, obs, chi)
    assert abs(math.degrees(pairs[0].radius) - alpha) < 0.05


def test_injection_families_that_cannot_be_scaled_are_refused():
    with pytest.raises(InputError, match="not compact"):
        injection.check({"family": "E16", "lengths": [1.0]}, COSMO, [30.0], 32)
    with pytest.raises(InputError, match="lower \\[instrument\\] lmax"):
        injection.check({"family": "lens", "p": 8, "q": 1}, COSMO, [20.0], 256)
    with pytest.raises(InputError, match="unknown family"):
        injection.injection_spec({"family": "E99"}) and injection.check({"family": "E99"}, COSMO, [30.0], 32)


def test_spherical_injection_task_runs_and_finds_its_circles(tmp_path):
    # a lens-space injection at tiny settings: the sky is made with the injected Omega_K and the
    # search sees S_max at the injected radius well above that of other radii
    import json

    from topology.config import config_from_dict
    from topology.run import plan_from_config
    from topology.run.tasks import task_injection

    data = {
        "maps": [{"name": "iso", "space": {"family": "isotropic"}}],
        "instrument": {"fwhm_deg": 2.0, "noise_uk": 0.0, "nside": 32, "lmax": 40},
        "search": {"radii": "35:55:2", "nside_work": 32, "fwhm_deg": 3.0, "m_max": 24, "centre_nside": 4},
        "significance": {"n_null": 9, "false_alarm": 0.2, "n_injections": 1, "injection_radii": "45:45:10",
                         "injection_family": {"family": "lens", "p": 6, "q": 1}, "seed": 3},
        "execution": {"engine": "serial"},
    }
    plan = plan_from_config(config_from_dict(json.loads(json.dumps(data))), tmp_path / "out")
    # the older one-family key is a one-element list of injected families
    assert plan.significance["injection_families"] == [{"family": "lens", "p": 6, "q": 1}]
    res = task_injection(plan, 0, 45.0, "inj/45/0000")  # the seed of the sky this test was written on
    assert res["omega_k"] < 0
    smax = np.asarray(res["s_max"])
    i = int(np.argmin(np.abs(plan.radii_deg - res["radius_true_deg"])))
    far = np.abs(plan.radii_deg - res["radius_true_deg"]) > 3.0
    # at N_side 32, l_max 40 the m-weighted S of an exact SW pair is ~0.86-0.88 (pixel and beam
    # effects at high m); random pairs stay below ~0.77 here
    assert smax[i] > 0.8 and smax[i] > smax[far].max() + 0.05, smax


def _antipodal_fraction(spec, n_observers=6, seed=4):
    """Fraction of random observers (the injection's own draw) whose largest pairs are all back to
    back, from the predicted circles (CSS 1998)."""
    unit = injection._unit_space(injection.injection_spec(spec))
    rng = np.random.default_rng(seed)
    chi = 3.0 if unit.geometry == "flat" else 0.5 * math.pi - 0.05
    hits = 0
    for _ in range(n_observers):
        space, obs, cosmo = injection.scaled(injection.injection_spec(spec), 40.0, rng, COSMO)
        chi = 1.0 if space.geometry == "flat" else cosmo.chi_rec_over_curvature_radius
        pairs = predict_circles(space, obs, chi)
        top = [p for p in pairs if p.radius > pairs[0].radius - 1e-3]
        hits += all(float(p.center_a @ p.center_b) < -0.999 for p in top)
    return hits / n_observers


@pytest.mark.parametrize("spec, kind", [
    ("E1", "back-to-back"),
    ({"family": "dodecahedral"}, "back-to-back"),
    ({"family": "lens", "p": 8, "q": 1}, "back-to-back"),
    ({"family": "E2", "lengths": [1.0, 1.0, 0.5]}, "general"),
    ({"family": "lens", "p": 7, "q": 2}, "general"),
])
def test_kind_of_pairs_matches_the_predicted_circles(spec, kind):
    # back-to-back: every random observer sees its largest pairs back to back (pure and Clifford
    # translations); general: most observers do not (a half-turn seen off its axis, an
    # inhomogeneous lens space)
    assert injection.spec_kind(injection.injection_spec(spec)) == kind
    frac = _antipodal_fraction(spec)
    assert frac == 1.0 if kind == "back-to-back" else frac <= 1 / 3


def test_injection_families_key_alias_and_repeats():
    specs = injection.injection_specs(["E1", {"family": "E2", "lengths": [1, 1, 0.5]}])
    keys = [injection.family_key(s) for s in specs]
    assert keys[0].startswith("E1-") and keys[1].startswith("E2-") and keys[0] != keys[1]
    # 1 and 1.0 are the same length; another shape is another family (new task ids)
    assert injection.family_key({"family": "E2", "lengths": [1.0, 1.0, 0.5]}) == keys[1]
    assert injection.family_key({"family": "E2", "lengths": [1.0, 1.0, 0.6]}) != keys[1]
    assert injection.injection_specs(None, "E1") == specs[:1]
    with pytest.raises(InputError, match="listed twice"):
        injection.injection_specs(["E1", {"family": "E1", "lengths": [1.0, 1.0, 1.0]}])
    with pytest.raises(InputError, match="non-empty list"):
        injection.injection_specs([])
