"""The targeted scan on cut skies: orientations ranked by the mean S_comb or by Stouffer's Z_comb.

E3 and E2 skies with off-axis observers (eigenmode, l_max 96, N_side 64, 1 deg beam, 5 microK
noise), a fraction MIX of the sky's rms from an isotropic sky, |b| < 20 deg cut, searched at
N_side 32 (2 deg smoothing, m_max 32, orientation_nside 4). Prints per sky the chosen
orientation's S_comb, usable pairs, rotation angle from the truth, and S_comb and usable pairs at
the true orientation (the README's targeted section).

    python benchmarks/targeted_orientation.py PACKAGE_DIR mean|stouffer MIX N_SEEDS
"""
import sys, time, math, json
import numpy as np
sys.path.insert(0, sys.argv[1])
from topology import geometry as geo
from topology.config import config_from_dict
from topology.cosmology import Cosmology
from topology.maps import as_skymap, prepare_map
from topology.scenario import scenario_from_config
from topology.search import SearchSettings
from topology.search import targeted as tg
from topology.search.context import SearchContext
from topology.search.engine import validate
from topology.search.modes import TargetedMode
from topology.skies.flat import flat_sky
from topology.skies.isotropic import isotropic_sky
from topology.skies.instrument import observe, galactic_mask
from topology.spaces import build_space

which = sys.argv[2]          # mean | stouffer
mix = float(sys.argv[3])     # weight of the isotropic part (0 = pure topology)
nseeds = int(sys.argv[4])
if which == "mean":
    tg.orientation_score = lambda comb, cnt: np.where(np.asarray(cnt) > 0, comb, -np.inf)
cosmo = Cosmology()
cases = [({"family": "E3", "lengths": [1.7, 1.7, 1.6]}, [0.31, -0.22, 0.13]),
         ({"family": "E2", "lengths": [1.55, 1.7, 0.8]}, [0.12, -0.05, 0.21]),
        ]
S = dict(mode="targeted", radii_deg=(15.0, 80.0), nside_work=32, fwhm_deg=2.0, m_max=32, orientation_nside=4, n_keep=32)
mask = galactic_mask(64, 20.0)
out = []
for spec, pos in cases:
    sc = scenario_from_config(config_from_dict({"space": spec, "observer": {"position": pos}}, "m"))
    space = build_space(spec); obs = geo.Observer.make("flat", pos)
    for seed in range(nseeds):
        if mix < 1:
            top = flat_sky(space, obs, cosmo, lmax=96, nside=64, method="eigenmode", seed=seed)
        iso = isotropic_sky(cosmo, lmax=96, seed=1000 + seed)
        if mix >= 1:
            sky = iso
        else:
            import copy
            sky = copy.copy(top); sky.alm = math.sqrt(1 - mix**2) * top.alm + mix * iso.alm
        t = observe(sky, nside=64, fwhm_deg=1.0, noise_uk=5.0, seed=seed, lmax=96)
        s = validate(SearchSettings(**S))
        prep = prepare_map(as_skymap(t), as_skymap(mask), nside_work=32, fwhm_deg=2.0)
        ctx = SearchContext(prep, s, sc)
        t0 = time.time()
        res = TargetedMode().run_task(ctx, 0)
        if "rotation" not in res: print(res); break
        R = np.array(res["rotation"])
        ang = math.degrees(math.acos(np.clip((np.trace(R) - 1) / 2, -1, 1)))
        mode = TargetedMode(); levels = mode.levels(ctx); pairs = tg.predicted_pairs(ctx, res["position"])
        sv, f, ok = tg.evaluate(ctx, levels[-1], pairs, np.zeros((1, 3)), {"pairs": 0, "twists": 0, "modes": 0})
        c0, n0 = tg.combine(sv, f, ok)
        out.append(dict(fam=spec["family"], seed=seed, S=res["S_combined"], n=res["n_pairs_used"], npairs=len(res["pairs"]), ang=ang, t=time.time() - t0, S_true=float(c0[0]), n_true=int(n0[0])))
        print(json.dumps(out[-1]), flush=True)
