"""A run never touches a user's files and never mixes results of changed inputs: the output
folder belongs to the tool (marker, protected places, symlinks), a running run holds a lock on
it, resume and the search checkpoint are keyed by the content of every input, and a config with
a UTF-8 byte-order mark is read."""

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import healpy as hp
import numpy as np
import pytest

from test_bad_input_run import SMALL, _one_line_error, _strip, _toml
from topology.cli import main
from topology.config import load_config
from topology.run.output import MARKER

NSIDE = 8


def _write_map(path: Path, seed: int, nside: int = NSIDE) -> None:
    rng = np.random.default_rng(seed)
    hp.write_map(str(path), rng.normal(0.0, 70.0, 12 * nside * nside), overwrite=True, dtype=np.float64)


def _files_config(folder: Path, mask: bool = False) -> Path:
    """SMALL with a FITS map (and optionally a FITS mask) instead of the inline sky."""
    data = json.loads(json.dumps(SMALL))
    data["maps"] = [{"name": "sky", "path": "sky.fits"}]
    _write_map(folder / "sky.fits", 11)
    if mask:
        m = np.ones(12 * NSIDE * NSIDE)
        m[: 12 * NSIDE] = 0.0  # a polar cap
        hp.write_map(str(folder / "mask.fits"), m, overwrite=True, dtype=np.float64)
        data["mask"] = {"path": "mask.fits"}
    cfg = folder / "run.toml"
    cfg.write_text(_toml(data))
    return cfg


def _snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture
def user_folder(tmp_path):
    """A folder of a user's own files that was never a run."""
    mine = tmp_path / "mydata"
    (mine / "sub").mkdir(parents=True)
    (mine / "notes.txt").write_text("three weeks of work\n")
    (mine / "sub" / "table.csv").write_text("a,b\n1,2\n")
    return mine


def test_force_refuses_a_folder_the_tool_did_not_make(tmp_path, user_folder, capsys):
    cfg = _files_config(tmp_path)
    before = _snapshot(user_folder)
    assert main(["run", str(cfg), "--out", str(user_folder), "--force", "--quiet"]) == 2
    line = _one_line_error(capsys)
    assert str(user_folder) in line and "not made by topology run" in line
    assert _snapshot(user_folder) == before


def test_force_refuses_the_current_folder_and_a_folder_holding_inputs(tmp_path, capsys, monkeypatch):
    cfg = _files_config(tmp_path)
    before = _snapshot(tmp_path)
    monkeypatch.chdir(tmp_path)
    assert main(["run", "run.toml", "--out", ".", "--force", "--quiet"]) == 2
    assert "current folder" in _one_line_error(capsys)
    # a folder that holds the current one
    (tmp_path / "deeper").mkdir()
    monkeypatch.chdir(tmp_path / "deeper")
    assert main(["run", str(cfg), "--out", str(tmp_path), "--force", "--quiet"]) == 2
    assert "current folder" in _one_line_error(capsys)
    monkeypatch.chdir(tmp_path.parent)
    # a folder the tool made that the user later put the map into: still refused
    (tmp_path / MARKER).write_text("{}")
    assert main(["run", str(cfg), "--out", str(tmp_path), "--force", "--quiet"]) == 2
    line = _one_line_error(capsys)
    assert "holds an input of this run" in line and "sky.fits" in line
    (tmp_path / MARKER).unlink()
    (tmp_path / "deeper").rmdir()
    assert _snapshot(tmp_path) == before


def test_force_replaces_a_run_folder_and_follows_symlinks(tmp_path, user_folder, capsys):
    cfg = _files_config(tmp_path)
    out = tmp_path / "report"
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 0
    assert (out / MARKER).is_file() and (out / "summary.json").is_file()
    capsys.readouterr()
    # a link to the user's own folder is followed, and the folder is still refused
    link = tmp_path / "link"
    link.symlink_to(user_folder)
    before = _snapshot(user_folder)
    assert main(["run", str(cfg), "--out", str(link), "--force", "--quiet"]) == 2
    assert "not made by topology run" in _one_line_error(capsys)
    assert _snapshot(user_folder) == before
    # a link to a run folder is followed: the folder it points to is replaced, the link stays
    (out / "stale.txt").write_text("from an earlier run")
    link2 = tmp_path / "link2"
    link2.symlink_to(out)
    assert main(["run", str(cfg), "--out", str(link2), "--force", "--quiet"]) == 0
    assert link2.is_symlink() and (out / "summary.json").is_file() and not (out / "stale.txt").exists()
    # a dangling link is refused
    dangling = tmp_path / "dangling"
    dangling.symlink_to(tmp_path / "gone")
    assert main(["run", str(cfg), "--out", str(dangling), "--quiet"]) == 2
    assert "missing folder" in _one_line_error(capsys)
    assert not (tmp_path / "gone").exists()


_HOLDER = """
import sys, time
from topology.run.output import claim
folder = claim(sys.argv[1])
print("claimed", flush=True)
time.sleep(120)
"""


def test_a_running_run_holds_its_folder_and_a_killed_one_is_taken_over(tmp_path, capsys):
    cfg = _files_config(tmp_path)
    out = tmp_path / "report"
    p = subprocess.Popen([sys.executable, "-c", _HOLDER, str(out)], stdout=subprocess.PIPE, text=True)
    try:
        assert p.stdout.readline().strip() == "claimed"
        (out / "store").mkdir()
        (out / "store" / "meta.json").write_text("{}")
        for flag in ("--force", "--resume"):
            assert main(["run", str(cfg), "--out", str(out), flag, "--quiet"]) == 2
            line = _one_line_error(capsys)
            assert "another run is using this folder" in line and f"process {p.pid}" in line, line
        assert (out / "store" / "meta.json").is_file()  # nothing was deleted
        os.kill(p.pid, signal.SIGKILL)
        p.wait(timeout=30)
    finally:
        if p.poll() is None:
            p.kill()
            p.wait()
    # the killed holder's lock is gone with its process: the next run takes the folder, saying so
    assert main(["run", str(cfg), "--out", str(out), "--force"]) == 0  # not --quiet: that silences notes
    err = capsys.readouterr().err
    assert "taking over the folder" in err and f"process {p.pid}" in err
    marker = json.loads((out / MARKER).read_text())
    assert marker["holder"] is None and marker["tool"] == "topology run"


def test_two_runs_started_together_never_share_a_folder(tmp_path):
    cfg = _files_config(tmp_path)
    out = tmp_path / "report"
    driver = "import sys; from topology.cli import main; sys.exit(main(sys.argv[1:]))"
    procs = [subprocess.Popen([sys.executable, "-c", driver, "run", str(cfg), "--out", str(out), "--force",
                               "--quiet"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for _ in range(2)]
    results = [(p.wait(timeout=300), p.stderr.read()) for p in procs]
    codes = sorted(c for c, _ in results)
    # either one run is refused while the other holds the folder, or they ran one after another
    assert codes in ([0, 2], [0, 0]), results
    for code, err in results:
        if code == 2:
            assert "another run is using this folder" in err or "output folder exists" in err, err
    assert (out / "summary.json").is_file()


def test_resume_recomputes_the_task_of_a_replaced_map(tmp_path, capsys):
    cfg = _files_config(tmp_path)
    out = tmp_path / "report"
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 0
    first = json.loads((out / "summary.json").read_text())
    n_tasks = first["provenance"]["tasks"]["total"]
    # the user writes another sky to the same path (same size, and even the old modification time)
    st = (tmp_path / "sky.fits").stat()
    _write_map(tmp_path / "sky.fits", 12)
    os.utime(tmp_path / "sky.fits", ns=(st.st_atime_ns, st.st_mtime_ns))
    assert (tmp_path / "sky.fits").stat().st_size == st.st_size
    capsys.readouterr()
    assert main(["run", str(cfg), "--out", str(out), "--resume"]) == 0
    err = capsys.readouterr().err
    assert "1 finished task(s) are recomputed" in err and "sky.fits" in err, err
    resumed = json.loads((out / "summary.json").read_text())
    assert resumed["provenance"]["tasks"] == {"total": n_tasks, "computed": 1, "reused_from_store": n_tasks - 1}
    fresh_out = tmp_path / "fresh"
    assert main(["run", str(cfg), "--out", str(fresh_out), "--quiet"]) == 0
    fresh = json.loads((fresh_out / "summary.json").read_text())
    assert _strip(resumed) == _strip(fresh)
    assert _strip(resumed) != _strip(first)  # the new map's results, not the old ones


def test_resume_recomputes_every_task_after_the_mask_changed(tmp_path, capsys):
    cfg = _files_config(tmp_path, mask=True)
    out = tmp_path / "report"
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 0
    n_tasks = json.loads((out / "summary.json").read_text())["provenance"]["tasks"]["total"]
    m = hp.read_map(str(tmp_path / "mask.fits"))
    m[-12 * NSIDE:] = 0.0  # the other polar cap too
    hp.write_map(str(tmp_path / "mask.fits"), m, overwrite=True, dtype=np.float64)
    capsys.readouterr()
    assert main(["run", str(cfg), "--out", str(out), "--resume"]) == 0
    err = capsys.readouterr().err
    assert f"{n_tasks} finished task(s) are recomputed" in err and "mask.fits" in err, err
    tasks = json.loads((out / "summary.json").read_text())["provenance"]["tasks"]
    assert tasks["computed"] == n_tasks and tasks["reused_from_store"] == 0


def test_search_checkpoint_is_keyed_by_content(tmp_path):
    from topology.maps import read_healpix
    from topology.search.engine import SearchSettings, file_checkpoint

    path = tmp_path / "sky.fits"
    _write_map(path, 1)
    s = SearchSettings(radii_deg=(30.0,), nside_work=8, m_max=8, centre_nside=2)
    fp1 = file_checkpoint(path, None, s).fingerprint
    st = path.stat()
    _write_map(path, 2)
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert path.stat().st_size == st.st_size
    assert file_checkpoint(path, None, s).fingerprint != fp1
    _write_map(path, 1)
    assert file_checkpoint(path, None, s).fingerprint == fp1  # same content, same key
    copy = tmp_path / "renamed.fits"
    copy.write_bytes(path.read_bytes())
    assert file_checkpoint(copy, None, s).fingerprint == fp1  # the name is not part of the key
    assert read_healpix(copy).nside == NSIDE


def test_config_with_a_byte_order_mark_is_read(tmp_path):
    cfg = _files_config(tmp_path)
    text = cfg.read_text(encoding="utf-8")
    bom = tmp_path / "bom.toml"
    bom.write_bytes("\ufeff".encode("utf-8") + text.encode("utf-8"))
    assert load_config(bom).sections == load_config(cfg).sections


def test_a_run_that_finished_nothing_leaves_an_empty_folder_empty(tmp_path, capsys, monkeypatch):
    import topology.run as run_module
    import topology.run.tasks as tasks

    cfg = _files_config(tmp_path)
    out = tmp_path / "empty"
    out.mkdir()

    def stop(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(tasks, "task_data", stop)
    with pytest.raises(KeyboardInterrupt):
        run_module.run(run_module.plan_from_config(load_config(cfg), out))
    assert out.is_dir() and list(out.iterdir()) == []
    missing = tmp_path / "missing"
    with pytest.raises(KeyboardInterrupt):
        run_module.run(run_module.plan_from_config(load_config(cfg), missing))
    assert not missing.exists()


def test_run_refuses_a_coarse_map_and_a_map_with_too_little_sky_before_any_output(tmp_path, capsys):
    cfg = _files_config(tmp_path)
    out = tmp_path / "report"
    hp.write_map(str(tmp_path / "sky.fits"), np.random.default_rng(3).normal(0, 70, 12 * 4 * 4), overwrite=True,
                 dtype=np.float64)  # N_side 4 < nside_work 8
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 2
    line = _one_line_error(capsys)
    assert "sky.fits" in line and "coarser than the working N_side 8" in line, line
    assert not out.exists()
    sky = np.random.default_rng(4).normal(0, 70, 12 * NSIDE * NSIDE)
    sky[: int(0.9 * sky.size)] = hp.UNSEEN  # 10% of the sky observed, below min_sky_fraction 0.2
    hp.write_map(str(tmp_path / "sky.fits"), sky, overwrite=True, dtype=np.float64)
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 2
    line = _one_line_error(capsys)
    assert "10.0% of the sky" in line and "[mask] min_sky_fraction" in line, line
    assert not out.exists()
