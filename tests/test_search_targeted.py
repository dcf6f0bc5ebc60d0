"""The targeted search on a masked sky: which predicted pairs enter S_comb (both circles kept >=
min_kept and jointly kept fraction f >= min_overlap) and how they combine (the mean of the
chance-equivalent S_eq of statistic.rank_score), checked against a direct computation of each
pair's S and f from the map with healpy."""

import healpy as hp
import numpy as np
import pytest

from test_search_fields import invariant_field
from topology import geometry as geo
from topology.circles import circle_points
from topology.config import config_from_dict
from topology.maps import as_skymap, prepare_map
from topology.scenario import scenario_from_config
from topology.search import SearchSettings
from topology.search import statistic as st
from topology.search import targeted as tg
from topology.search.context import SearchContext
from topology.search.engine import validate
from topology.search.modes import TargetedMode

NSIDE = 32
LENGTHS = [1.6, 1.6, 1.6]  # E1: cos(alpha) = L / (2 chi_rec) = 0.8, alpha = 36.87 deg, pairs on the axes
SETTINGS = dict(mode="targeted", radii_deg=(30.0, 40.0), nside_work=NSIDE, fwhm_deg=4.0, m_max=16, n_phi=160,
                orientation_nside=4, n_keep=32, power_fraction=1.0)  # power_fraction 1: m_cut = m_max


def _mask() -> np.ndarray:
    """Kept pixels: the +z circle (lat 53.1 deg) cut at longitudes [0, 150) and the -z circle at
    [180, 330) (each keeps ~58%, jointly only lon 150-180 and 330-360); and a patch over the upper
    arc of the +x circle (lat 12-45, |lon| < 40), which the -x circle does not share."""
    lon, lat = hp.pix2ang(NSIDE, np.arange(hp.nside2npix(NSIDE)), lonlat=True)
    north = (lat > 44) & (lat < 62) & (lon < 150)
    south = (lat < -44) & (lat > -62) & (lon >= 180) & (lon < 330)
    xpatch = (lat > 12) & (lat < 45) & ((lon < 40) | (lon > 320))
    return ~(north | south | xpatch)


@pytest.fixture(scope="module")
def masked_search():
    sc = scenario_from_config(config_from_dict({"space": {"family": "E1", "lengths": LENGTHS},
                                                "observer": {"position": [0.0, 0.0, 0.0]}}, "test"))
    obs = geo.Observer.make("flat", [0.0, 0.0, 0.0])
    sky = invariant_field(sc.space, obs, NSIDE, 5)
    s = validate(SearchSettings(**SETTINGS))
    prepared = prepare_map(as_skymap(sky), as_skymap(_mask().astype(float)), nside_work=s.nside_work,
                           fwhm_deg=s.fwhm_deg)
    ctx = SearchContext(prepared, s, sc)
    mode = TargetedMode()
    res = mode.run_task(ctx, 0)
    return ctx, mode, res


def _direct(ctx, res):
    """Per predicted pair at the found rotation R: S, jointly kept fraction f and the kept fraction
    of each circle, computed directly. Circle A at phi_k = 2 pi k / N (the circle convention of
    topology.circles); its matched points on B by the holonomy itself: a translation along the
    pair's axis u maps the sphere point x to x - 2 (x . u) u seen from the observer (check: E1
    back-to-back circles, Cornish, Spergel & Starkman 1998), so B is not sampled through the
    predicted twist. Values by bilinear interpolation (healpy.get_interp_weights; a sample is kept
    when its four pixels are), kept mean removed, T_m by an explicit DFT, f(phi) = sum_{m=1}^{M}
    2 sqrt(m) Re(T_m e^{i m phi}) and S = 2 sum W f_A f_B / sum W (f_A^2 + f_B^2) over W = w_A w_B
    (Cornish, Spergel & Starkman 2004, real-space form)."""
    s = ctx.settings
    lv = TargetedMode().levels(ctx)[-1]
    mp, mask = ctx.level_map(lv), ctx.level_mask(lv)
    nside = hp.npix2nside(mp.size)
    R = np.asarray(res["rotation"])
    n = s.n_phi
    phi = 2.0 * np.pi * np.arange(n) / n
    m = np.arange(1, s.m_max + 1)
    dft = np.exp(-1j * np.outer(np.arange(s.m_max + 1), phi)) / n  # (M+1, N)

    def sample(pts):
        theta, lon = hp.vec2ang(pts)
        pix, wts = hp.get_interp_weights(nside, theta, lon)
        vals = np.sum(wts * mp[pix], axis=0)
        kept = np.all(mask[pix] | (wts <= 0), axis=0)
        vals = vals - vals[kept].mean()
        t = dft @ vals
        filt = 2.0 * np.real((np.sqrt(m) * t[1:])[:, None] * np.exp(1j * np.outer(m, phi))).sum(axis=0)
        return filt, kept

    out = []
    for p in tg.predicted_pairs(ctx, res["position"]):
        u = p.center_a
        a = circle_points(p.center_a, p.radius, phi)
        b = a - 2.0 * np.outer(a @ u, u)
        fa, wa = sample(a @ R.T)
        fb, wb = sample(b @ R.T)
        w = wa & wb
        s_dir = 2.0 * np.sum(w * fa * fb) / np.sum(w * (fa**2 + fb**2))
        out.append({"S": s_dir, "f": w.mean(), "kept_a": wa.mean(), "kept_b": wb.mean()})
    return out


def test_pair_below_min_overlap_is_left_out(masked_search):
    # one pair keeps > min_kept of each circle but < min_overlap jointly: it is not usable and
    # S_comb is the mean of the other pairs' S_eq = sign(S) sqrt(1 - (1 - S^2)^f), computed here
    # from the directly measured S and f (formula of statistic.rank_score's docstring)
    ctx, _, res = masked_search
    s = ctx.settings
    direct = _direct(ctx, res)
    assert len(direct) == len(res["pairs"]) == 3
    low = [i for i, d in enumerate(direct) if d["f"] < s.min_overlap]
    assert len(low) == 1
    cut = direct[low[0]]
    assert min(cut["kept_a"], cut["kept_b"]) >= s.min_kept and 0.05 < cut["f"] < s.min_overlap
    rec = res["pairs"][low[0]]
    assert not rec["usable"] and np.isnan(rec["S"]) and np.isnan(rec["S_eq"])
    assert rec["overlap"] == pytest.approx(cut["f"], abs=1e-12)
    used = [d for i, d in enumerate(direct) if i != low[0]]
    assert all(min(d["kept_a"], d["kept_b"]) >= s.min_kept and d["f"] >= s.min_overlap for d in used)
    s_eq = [np.sign(d["S"]) * np.sqrt(1.0 - (1.0 - d["S"] ** 2) ** d["f"]) for d in used]
    assert res["n_pairs_used"] == 2
    assert res["S_combined"] == pytest.approx(np.mean(s_eq), rel=1e-9)
    # the true pairs were found: the diluted mean of the old rule (S = 0 for the cut pair, over all
    # three) would be a third lower
    assert res["S_combined"] > 0.85 and np.sum(s_eq) / 3 < 0.7


def test_cut_pair_s_eq_is_rank_score_of_direct_s_and_f(masked_search):
    # the +x/-x pair keeps ~80% jointly: its record's S, overlap and S_eq against the direct S, f
    # and statistic.rank_score of those; S_eq < S because fewer modes make a high S likelier
    ctx, _, res = masked_search
    direct = _direct(ctx, res)
    part = [i for i, d in enumerate(direct) if ctx.settings.min_overlap <= d["f"] < 0.95]
    assert len(part) == 1
    d, rec = direct[part[0]], res["pairs"][part[0]]
    assert rec["usable"] and rec["S"] == pytest.approx(d["S"], rel=1e-9)
    assert rec["overlap"] == pytest.approx(d["f"], abs=1e-12)
    assert rec["S_eq"] == pytest.approx(float(st.rank_score(d["S"], d["f"])), rel=1e-9)
    assert 0.5 < d["f"] < 0.9 and 0.8 < rec["S_eq"] < rec["S"] - 0.005
    full = [r for i, r in enumerate(res["pairs"]) if direct[i]["f"] == 1.0]
    assert len(full) == 1 and full[0]["S_eq"] == full[0]["S"] and full[0]["overlap"] == 1.0


def test_candidates_ordered_by_s_eq_with_counts(masked_search):
    # the search output: candidates best first by S_eq (the unusable pair last), S_max the best
    # S_eq, and the count of pairs that entered S_comb
    ctx, mode, res = masked_search
    out = mode.summarise(ctx, {0: res})
    cands = out["candidates"]
    assert [c["usable"] for c in cands] == [True, True, False]
    assert cands[0]["S_eq"] > cands[1]["S_eq"]
    assert all({"S", "overlap", "S_eq", "twist_deg"} <= set(c) for c in cands)
    assert out["s_max"][0]["S_max"] == cands[0]["S_eq"]
    assert out["targeted"]["n_pairs_used"] == 2 and out["targeted"]["n_pairs"] == 3
    assert out["targeted"]["positions"][0]["n_pairs_used"] == 2


def test_combine_counts_only_usable_pairs():
    # S_comb from pair values by hand: rows (rotations) of three pairs, S_eq by the formula
    sv = np.array([[0.9, 0.5, 0.2], [0.9, -0.3, 0.2], [0.1, 0.2, 0.3]])
    f = np.array([[1.0, 0.4, 0.1], [0.5, 1.0, 1.0], [1.0, 1.0, 1.0]])
    ok = np.array([[True, True, False], [True, True, False], [False, False, False]])
    comb, used = tg.combine(sv, f, ok)

    def eq(x, ff):
        return np.sign(x) * np.sqrt(1.0 - (1.0 - x * x) ** ff)

    assert used.tolist() == [2, 2, 0]
    assert comb[0] == pytest.approx((0.9 + eq(0.5, 0.4)) / 2, rel=1e-12)
    assert comb[1] == pytest.approx((eq(0.9, 0.5) - 0.3) / 2, rel=1e-12)
    assert comb[2] == -np.inf


def test_orientations_are_ranked_by_stouffer_z():
    # check: Stouffer et al. 1949: Z = sum_p S_eq,p / sqrt(P_used), one null spread for every
    # P_used; the mean would put one chance pair of S_eq 0.9 above three true pairs of 0.6
    comb = np.array([0.9, 0.6, -np.inf])
    used = np.array([1, 3, 0])
    z = tg.orientation_score(comb, used)
    assert z[0] == pytest.approx(0.9) and z[1] == pytest.approx(0.6 * np.sqrt(3)) and z[2] == -np.inf
    assert np.argmax(z) == 1 and np.argmax(comb) == 0


def test_targeted_result_reports_z_of_its_pairs(masked_search):
    _, _, res = masked_search
    assert res["Z_combined"] == pytest.approx(res["S_combined"] * np.sqrt(res["n_pairs_used"]), rel=1e-12)
