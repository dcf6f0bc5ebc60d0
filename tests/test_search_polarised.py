"""``topology search --field E`` and ``--field T+E`` through the command line: the JSON contract is
the temperature one, a polarised file without a stated Q/U convention is refused in one line, and a
pair of matched circles planted in T (under noise) and in E is found by E alone and by T + E with
the combined value the two maps' S give.

Test sky: an E1 cubic torus (side 1.6 chi_rec, antipodal pairs of radius 36.87 deg: cos alpha =
L / 2 chi_rec, Cornish, Spergel & Starkman 1998). T is a group-invariant field plus an isotropic
field of the same rms (so T alone matches only partly); E is another invariant field, turned into
Q, U by healpy's spin-2 synthesis (B = 0; HEALPix convention, POLCCONV = COSMO).
"""

import json
import subprocess
import sys

import healpy as hp
import numpy as np
import pytest

from test_search_fields import invariant_field, isotropic_map
from topology import geometry as geo
from topology.circles import predict_circles
from topology.cli import main
from topology.completeness import match
from topology.skies.polarised import write_iqu_fits
from topology.spaces import build_space

NSIDE = 32
FAST = ["--nside-work", "32", "--m-max", "24", "--fwhm", "4", "--quiet", "--radii", "37", "--json"]


@pytest.fixture(scope="module")
def sky(tmp_path_factory):
    folder = tmp_path_factory.mktemp("pol")
    space = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    obs = geo.Observer.make("flat", [0.0, 0.0, 0.0], geo.euler_zyz(0.3, 0.6, -0.2))
    t_sig = invariant_field(space, obs, NSIDE, 1, n_waves=400, qmax=10.0)
    noise = isotropic_map(NSIDE, 7)
    t = t_sig + 1.0 * t_sig.std() / noise.std() * noise
    e = invariant_field(space, obs, NSIDE, 2, n_waves=400, qmax=10.0)
    lmax = 3 * NSIDE - 1
    a_e = hp.map2alm(e, lmax=lmax, iter=3)
    zero = np.zeros_like(a_e)
    _, q, u = hp.alm2map([zero, a_e, zero], NSIDE, lmax=lmax, pol=True)
    write_iqu_fits(folder / "pol.fits", np.array([t, q, u]), [("POLCCONV", "COSMO", "Q/U convention")])
    write_iqu_fits(folder / "noconv.fits", np.array([t, q, u]), [])
    truth = predict_circles(space, obs, 1.0)
    truth = [p for p in truth if abs(np.degrees(p.radius) - 36.87) < 0.1]
    return folder, truth[0], truth


def _topology(*args, cwd, monkeypatch, capsys):
    """(exit code, stdout, stderr) of ``topology ARGS`` run in this process (as tests/test_search_cli.py
    does: a new interpreter costs seconds of imports); one case below runs a real subprocess."""
    monkeypatch.chdir(cwd)
    capsys.readouterr()
    code = main([*map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def _at_pair(out, pair):
    """The candidate nearest the predicted pair: (centre error deg, twist error deg, record)."""
    return min(((*match(c, pair), c) for c in out["candidates"]), key=lambda e: e[0])


def test_e_and_te_keep_the_json_contract_and_find_the_pair(sky, monkeypatch, capsys):
    folder, pair, truth = sky
    runs = {}
    for field in ("0", "E", "T+E"):
        code, out, err = _topology("search", folder / "pol.fits", "--field", field, *FAST, cwd=folder,
                                   monkeypatch=monkeypatch, capsys=capsys)
        assert code == 0, err
        runs[field] = json.loads(out)
    t, e, te = runs["0"], runs["E"], runs["T+E"]
    assert set(e) == set(t) == set(te)
    assert {k for c in e["candidates"] for k in c} == {k for c in t["candidates"] for k in c} \
        == {k for c in te["candidates"] for k in c}
    assert set(e["s_max"][0]) == set(t["s_max"][0]) == set(te["s_max"][0])
    assert t["polarisation"] is None and e["polarisation"]["convention"] == "healpix"
    assert e["field"] == "E" and te["field"] == "T+E"
    # E alone: the planted pair is the best candidate, S near 1 (E of a full-sky pure-E Q, U is the
    # field itself; the rest is interpolation and smoothing, as for T in test_search_modes)
    d_e, tw_e, c_e = _at_pair(e, pair)
    assert d_e < 3.0 and tw_e < 4.0 and c_e is e["candidates"][0] and c_e["S"] > 0.9
    # T alone: the noise lowers the match of the pair
    d_t, _, c_t = _at_pair(t, pair)
    assert d_t < 3.0 and 0.3 < c_t["S"] < 0.8
    # T + E: the pair is the best candidate, with S_TE = (w_T S_T + w_E S_E) / (w_T + w_E) of the
    # weights it reports and the S of the T and E searches at the pair
    d, tw, c = _at_pair(te, pair)
    assert d < 3.0 and tw < 4.0 and c is te["candidates"][0]
    w = te["polarisation"]["weights"][0]
    assert w["w_t"] == pytest.approx(w["rho_t"] / w["sigma_t"] ** 2) and w["rho_e"] == 0.75
    assert 0.05 < w["sigma_t"] < 0.5 and 0.05 < w["sigma_e"] < 0.5
    want = (w["w_t"] * c_t["S"] + w["w_e"] * c_e["S"]) / (w["w_t"] + w["w_e"])
    assert c["S"] == pytest.approx(want, abs=0.04)
    assert c["S"] > c_t["S"] + 0.05  # measured 0.855 against 0.787


def test_targeted_te_recovers_the_orientation(sky, monkeypatch, capsys):
    # the orientation scan with each predicted pair's S_TE,eq: the three pairs of the torus land on
    # the sky's matched circles; T alone gives 0.60 here (measured), T + E 0.74
    folder, pair, truth = sky
    cfg = folder / "targeted.toml"
    cfg.write_text('[space]\nfamily = "E1"\nlengths = [1.6, 1.6, 1.6]\n[observer]\nposition = [0.0, 0.0, 0.0]\n'
                   '[search]\nmode = "targeted"\nradii = "35:39:1"\nfwhm_deg = 6.0\nnside_work = 16\nm_max = 12\n')
    code, out, err = _topology("search", folder / "pol.fits", "--config", cfg, "--field", "T+E", "--json", "--quiet",
                               cwd=folder, monkeypatch=monkeypatch, capsys=capsys)
    assert code == 0, err
    out = json.loads(out)
    t = out["targeted"]
    assert t["n_pairs_used"] == t["n_pairs"] == 3 and t["S_combined"] > 0.7
    assert t["S_combined"] == pytest.approx(np.mean([c["S"] for c in out["candidates"]]), rel=1e-12)
    w = out["polarisation"]["weights"]
    assert len(w) == 1 and abs(w[0]["radius_deg"] - 36.87) < 0.01
    assert len(truth) == 3
    for c in out["candidates"]:
        d, dt = min((match(c, p) for p in truth), key=lambda e: e[0])
        assert d < 3.0 and dt < 4.0 and c["orientation"] == "opposite"


@pytest.mark.parametrize("args,needle", [
    (["pol.fits", "--field", "T+E", "--pol-convention", "iau"], "POLCCONV"),  # header and option disagree
    (["pol.fits", "--field", "0", "--pol-convention", "iau"], "--pol-convention"),  # not a polarised search
    (["pol.fits", "--field", "E", "--pol-mask", "missing.fits"], "missing.fits"),
])
def test_bad_polarised_input_is_one_line(sky, monkeypatch, capsys, args, needle):
    folder, *_ = sky
    code, out, err = _topology("search", *args, *FAST, cwd=folder, monkeypatch=monkeypatch, capsys=capsys)
    assert code == 2 and out == ""
    err = err.strip()
    assert needle in err and "\n" not in err and "Traceback" not in err


def test_missing_convention_refused_by_the_command(sky):
    # a real process: exit 2, one line naming the file and the option, no traceback, nothing on stdout
    folder, *_ = sky
    r = subprocess.run([sys.executable, "-m", "topology", "search", "noconv.fits", "--field", "E", *FAST],
                       capture_output=True, text=True, cwd=folder, timeout=120)
    err = r.stderr.strip()
    assert r.returncode == 2 and r.stdout == "" and "\n" not in err and "Traceback" not in err
    assert "noconv.fits" in err and "no POLCCONV" in err and "--pol-convention" in err


RUN = ('[instrument]\nfwhm_deg = 8.0\nnoise_uk = 1.0\nnside = 16\nlmax = 32\nterms = {terms}\n'
       '[search]\nradii = "30:50:10"\nnside_work = 8\nfwhm_deg = 8.0\nm_max = 8\ncentre_nside = 2\n'
       '[significance]\nn_null = 9\nfalse_alarm = 0.2\ninjection_radii = "40:40:10"\nseed = 2\n'
       '[execution]\nengine = "serial"\n')
FULL = '["sw", "doppler", "isw"]'


def _run_config(tmp_path, maps, terms=FULL):
    cfg = tmp_path / "run.toml"
    cfg.write_text("".join(f'[[maps]]\nname = "{n}"\npath = "{p}"\nfield = "{f}"\n' for n, p, f in maps)
                   + RUN.format(terms=terms))
    return cfg


def test_run_of_field_e_plans_polarised_nulls_and_injections(sky, tmp_path, monkeypatch, capsys):
    # [[maps]] field = "E": the plan keeps the field and the injected families (flat: their skies are
    # polarised, topology.run.polarised; tests/test_run_polarised.py runs one); a null task searches a
    # polarised isotropic sky (shipped EE/TE table)
    from topology.config import load_config
    from topology.run import scan
    from topology.run import tasks as T
    from topology.run.plan import plan_from_config
    from topology.skies import spectra

    folder, *_ = sky
    plan = plan_from_config(load_config(_run_config(tmp_path, [("pol", folder / "pol.fits", "E")])), tmp_path / "o")
    assert plan.pol_field == "E" and [f["family"] for f in plan.significance["injection_families"]] == ["E1", "E2"]
    assert len([t for t in scan.build_tasks(plan) if t.id.startswith("inj/")]) == 2 * plan.n_injections
    monkeypatch.setattr(spectra, "have_camb", lambda: False)
    r = T.task_null(plan, T.null_id(0))
    assert len(r["s_max"]) == 3 and all(0.2 < s < 1.0 for s in r["s_max"])


@pytest.mark.parametrize("maps,terms,needle", [
    ([("a", "pol.fits", "T+E"), ("b", "pol.fits", "0")], FULL, "one field kind per run"),
    ([("a", "pol.fits", "E")], '["sw"]', "[instrument] terms"),
    ([("a", "noconv.fits", "E")], FULL, "pol_convention in [[maps]] #1"),
])
def test_bad_polarised_run_is_one_line(sky, tmp_path, monkeypatch, capsys, maps, terms, needle):
    folder, *_ = sky
    cfg = _run_config(tmp_path, [(n, folder / p, f) for n, p, f in maps], terms)
    code, out, err = _topology("run", cfg, "--out", tmp_path / "out", cwd=tmp_path, monkeypatch=monkeypatch,
                               capsys=capsys)
    err = err.strip().splitlines()
    assert code == 2 and len([e for e in err if e.startswith("topology run: error")]) == 1
    assert needle in err[-1] and not (tmp_path / "out").exists()
