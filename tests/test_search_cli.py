"""``topology search``: JSON contract, bad input (exit 2, nothing written), checkpoints and resume,
and the targeted mode."""

import json

import healpy as hp
import numpy as np
import pytest

from test_search_fields import invariant_field, isotropic_map
from test_search_modes import OBS, match
from topology import geometry as geo
from topology.circles import predict_circles
from topology.cli import main
from topology.search import modes as md
from topology.spaces import build_space

FAST = ["--nside-work", "16", "--m-max", "12", "--fwhm", "6", "--quiet"]


@pytest.fixture()
def sky_file(tmp_path):
    p = tmp_path / "sky.fits"
    hp.write_map(p, isotropic_map(16, 3), dtype=np.float64)
    return p


def _files(folder):
    return sorted(x.name for x in folder.iterdir())


def test_json_fields(sky_file, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["search", str(sky_file), "--mode", "all-pairs", "--radii", "20:40:10", "--json", *FAST,
                 "--plot", str(tmp_path / "s.png")]) == 0
    out = json.loads(capsys.readouterr().out)
    assert set(out) >= {"map", "settings", "candidates", "s_max", "work", "elapsed_s"}
    assert out["settings"]["radii_deg"] == [20.0, 30.0, 40.0] and out["settings"]["mode"] == "all-pairs"
    c = out["candidates"][0]
    assert set(c) >= {"center_a", "center_b", "radius_deg", "twist_deg", "orientation", "S"}
    assert c["orientation"] in ("same", "opposite") and len(c["center_a"]) == 2
    assert {(r["radius_deg"], r["orientation"]) for r in out["s_max"]} == {(r, o) for r in (20.0, 30.0, 40.0)
                                                                         for o in ("same", "opposite")}
    assert set(out["work"]) >= {"pairs", "twists", "modes"} and out["work"]["pairs"] > 0
    assert (tmp_path / "s.png").stat().st_size > 0
    assert not any(n.startswith(".topology-search") for n in _files(tmp_path))  # finished: no checkpoint


@pytest.mark.parametrize("extra,needle", [
    (["--radii", "0:30:10"], "(0, 90]"),
    (["--radii", "80:100:10"], "(0, 90]"),
    (["--m-max", "60"], "supports"),
])
def test_bad_settings_exit_2(sky_file, tmp_path, monkeypatch, capsys, extra, needle):
    monkeypatch.chdir(tmp_path)
    before = _files(tmp_path)
    args = ["search", str(sky_file), *FAST, *extra, "--plot", str(tmp_path / "x.png")]
    assert main(args) == 2
    err = capsys.readouterr().err.strip()
    assert needle in err and "\n" not in err
    assert _files(tmp_path) == before


def test_bad_files_exit_2(sky_file, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "junk.fits").write_bytes(b"junk")
    cfg = tmp_path / "c.toml"
    cfg.write_text("[search]\ncentre_nside = 32\n")
    zero = tmp_path / "zero.fits"
    hp.write_map(zero, np.zeros(hp.nside2npix(16)))
    other = tmp_path / "other.fits"
    m = np.full(hp.nside2npix(16), hp.UNSEEN)
    m[:100] = 1.0
    hp.write_map(other, m)
    cases = [
        (["search", str(tmp_path / "junk.fits"), *FAST], "junk.fits"),
        (["search", str(sky_file), "--mask", str(zero), *FAST], "all-masked"),
        (["search", str(sky_file), "--mask", str(other), *FAST], "coverage"),
        (["search", str(sky_file), "--config", str(cfg), *FAST], "finer than"),
    ]
    before = _files(tmp_path)
    for args, needle in cases:
        assert main(args) == 2
        err = capsys.readouterr().err.strip()
        assert needle in err and "\n" not in err, err
    assert _files(tmp_path) == before


def test_checkpoint_and_resume(sky_file, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    args = ["search", str(sky_file), "--mode", "antipodal", "--radii", "20:50:10", "--json", *FAST]
    assert main(args) == 0
    fresh = json.loads(capsys.readouterr().out)
    calls = []
    real = md.AntipodalMode.run_task

    def interrupted(self, ctx, key):
        calls.append(key)
        if len(calls) == 3:
            raise KeyboardInterrupt
        return real(self, ctx, key)

    monkeypatch.setattr(md.AntipodalMode, "run_task", interrupted)
    assert main(args) == 130
    capsys.readouterr()
    ck = [n for n in _files(tmp_path) if n.startswith(".topology-search")]
    assert len(ck) == 1
    saved = json.loads((tmp_path / ck[0]).read_text())
    assert saved["version"] == 3 and list(saved["results"]) == ["20.0", "30.0"]
    assert [r["result"]["radius_deg"] for r in saved["results"].values()] == [20.0, 30.0]
    calls.clear()
    monkeypatch.setattr(md.AntipodalMode, "run_task", lambda self, ctx, key: (calls.append(key), real(self, ctx, key))[1])
    assert main(args + ["--resume"]) == 0
    resumed = json.loads(capsys.readouterr().out)
    assert calls == [40.0, 50.0]  # finished radii are not redone
    assert resumed["s_max"] == fresh["s_max"] and resumed["candidates"] == fresh["candidates"]
    assert not [n for n in _files(tmp_path) if n.startswith(".topology-search")]


def test_targeted_recovers_orientation(tmp_path, monkeypatch, capsys):
    # E1 cubic torus seen in an unknown orientation: the orientation scan puts the predicted pairs
    # (Cornish, Spergel & Starkman 1998: cos alpha = L / 2 chi_rec) on the sky's matched circles
    space = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    obs = geo.Observer.make("flat", [0.0, 0.0, 0.0], geo.euler_zyz(*OBS["euler"]))
    T = invariant_field(space, obs, 64, 1)
    hp.write_map(tmp_path / "t.fits", T, dtype=np.float64)
    cfg = tmp_path / "t.toml"
    cfg.write_text('[space]\nfamily = "E1"\nlengths = [1.6, 1.6, 1.6]\n[observer]\nposition = [0.0, 0.0, 0.0]\n'
                   '[search]\nmode = "targeted"\nradii = "15:90:1"\nfwhm_deg = 2.0\nnside_work = 64\nm_max = 48\n')
    monkeypatch.chdir(tmp_path)
    assert main(["search", str(tmp_path / "t.fits"), "--config", str(cfg), "--json", "--quiet"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["targeted"]["S_combined"] >= 0.9
    # full sky: every pair enters with f = 1 and S_eq = S, so S_comb is the plain mean S over all
    # predicted pairs, the statistic before S_eq was introduced
    assert out["targeted"]["n_pairs_used"] == out["targeted"]["n_pairs"] == len(out["candidates"]) == 3
    assert all(c["usable"] and c["overlap"] == 1.0 and c["S_eq"] == c["S"] for c in out["candidates"])
    assert out["targeted"]["S_combined"] == pytest.approx(np.mean([c["S"] for c in out["candidates"]]), rel=1e-12)
    truth = predict_circles(space, obs, 1.0)
    for c in out["candidates"]:
        d, dt = min((match(c, p) for p in truth), key=lambda e: e[0])
        assert d < 1.0 and dt < 2.0 and c["orientation"] == "opposite"


def test_search_files_reads_the_column_asked_for(tmp_path, monkeypatch):
    # the Python API of files: the column given by name or index is the one searched (same result
    # as the in-memory search of that column), the first column otherwise; the checkpoint of a
    # finished search is removed, and its fingerprint depends on the column
    from topology.maps import as_skymap
    from topology.search import SearchSettings, search_files, search_sky
    from topology.search.engine import file_checkpoint

    monkeypatch.chdir(tmp_path)
    first, second = isotropic_map(16, 5), isotropic_map(16, 3)
    path = tmp_path / "two.fits"
    hp.write_map(path, [first, second], column_names=["SKY_A", "SKY_B"], dtype=np.float64)
    s = SearchSettings(mode="antipodal", radii_deg=(30.0,), nside_work=16, m_max=12, fwhm_deg=6.0, centre_nside=4)
    want = search_sky(as_skymap(second), None, s)["s_max"]
    got_name = search_files(path, None, s, field="SKY_B", show_progress=False)["s_max"]
    got_index = search_files(path, None, s, field=1, show_progress=False)["s_max"]
    got_default = search_files(path, None, s, show_progress=False)["s_max"]
    key = [(e["orientation"], round(e["S_max"], 9)) for e in want]
    assert [(e["orientation"], round(e["S_max"], 9)) for e in got_name] == key
    assert [(e["orientation"], round(e["S_max"], 9)) for e in got_index] == key
    assert [(e["orientation"], round(e["S_max"], 9)) for e in got_default] != key
    assert not any(n.startswith(".topology-search") for n in _files(tmp_path))
    fps = {file_checkpoint(path, None, s, column=c).path.name for c in (None, "SKY_A", "SKY_B")}
    assert len(fps) == 3
