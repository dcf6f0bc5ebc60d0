"""Completeness of the search on masked skies (topology.completeness), on skies the tests make
with the project's generators and masks, drawn with another seed than the validation set of
benchmarks/search_completeness.py (skies the search was not tuned on): flat spaces with
observers off every axis and lens spaces with generic observers, 1 deg beam, 5 microK noise,
a |b| < 15 deg cut or 300 point-source holes, searched at working N_side 32. Every predicted
pair in reach (each circle >= 50% kept, >= 30% jointly for all-pairs, >= 25% for back-to-back
pairs) must be found, except the pinned misses, and the per-centre kernel is checked against a
direct computation of the masked S."""

import math

import healpy as hp
import numpy as np
import pytest

from topology import completeness as C
from topology.search import statistic as st
from topology.search.allpairs import coarse_samples, masked_partners
from topology.search.sampling import centre_grid, sample_circles

TEST_SEED = 7  # not the validation set's seed

# measured misses on these skies (sky name, mode, radius deg); a new miss fails the test. E7 41.4:
# 26% jointly kept on the mask, less on the search's own mask (shrunk where the 2 deg smoothing
# leaks masked sky), below min_overlap = 25% at every level
PINNED_MISSES = {("E7#0", "antipodal", 41.4)}


@pytest.mark.parametrize("family", ["E4", "E7", "L(8,3)", "L(7,2)"])
def test_pairs_in_reach_are_found(family):
    setup = C.SearchSetup()
    sky = C.validation_set(families=[family], seed=TEST_SEED)[0]
    obs = C.observe_sky(sky, setup)
    records = C.tally_observation(obs, setup)
    assert records, "no pair in reach: the sky does not test anything"
    missed = {(r["sky"], r["mode"], round(r["radius_deg"], 1)) for r in records if not r["found"]}
    assert missed <= PINNED_MISSES, (sky, missed)
    for r in records:
        if r["found"]:  # the true pair outranks chance at its radius or comes close
            assert r["S_eq"] > 0.6, r


def test_masked_partners_agree_with_direct_masked_s():
    # check: the masked S of Cornish, Spergel & Starkman (2004) restricted to jointly kept samples,
    # computed directly by circular correlation (statistic.masked_sums) on the same coarse samples:
    # every centre's best partner by masked_partners is its best by the direct computation
    rng = np.random.default_rng(3)
    nside = 16
    m = hp.alm2map(hp.synalm(1.0 / (np.arange(48) + 1.0) ** 2, lmax=47, new=True), nside, lmax=47)
    z = hp.pix2vec(nside, np.arange(m.size))[2]
    mask = np.abs(z) >= math.sin(math.radians(15))
    centres = centre_grid(4)
    circ = sample_circles(m, centres, math.radians(50), 96, 20, mask)
    valid = circ.kept_fraction >= 0.5
    ia, ib, orient = masked_partners(circ, valid, 20, 1, math.radians(10), 0.25, 1 << 22)
    f, w = coarse_samples(circ, 20)
    n_c = f.shape[1]
    spec = st.masked_spectra(f.astype(float), w.astype(bool))
    vidx = np.flatnonzero(valid)
    checked = 0
    for i in rng.choice(vidx, 12, replace=False):
        js = vidx[(centres[vidx] @ centres[i] < math.cos(math.radians(10)))]
        for o in (st.SAME, st.OPPOSITE):
            sa = tuple(x[np.full(js.size, i)] for x in spec)
            sb = tuple(x[js] for x in spec)
            num, den, over = st.masked_sums(sa, sb, n_c, np.full(js.size, o == st.OPPOSITE))
            ok = (over >= 0.25 * n_c - 1e-6) & (den > 0)
            s = np.where(ok, 2 * num / np.where(den > 0, den, 1.0), -np.inf)
            score = st.rank_score(s, over / n_c).max(axis=1)
            if not np.isfinite(score).any() or score.max() <= 0:
                continue
            best = js[np.argmax(score)]
            listed = {int(b if a == i else a) for a, b, oo in zip(ia, ib, orient) if oo == o and i in (a, b)}
            assert int(best) in listed, (i, o, best, listed)
            checked += 1
    assert checked >= 12
