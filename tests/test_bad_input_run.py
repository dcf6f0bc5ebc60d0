"""`topology run` and the command line under hostile conditions: an unwritable output folder, a
disk that fills up part-way (the store stays valid and --resume finishes the run), a bad map
found before any work, and usage errors that are one line."""

import errno
import json
import os

import pytest

import topology.store as store_mod
from topology.cli import main
from topology.config import config_from_dict
from topology.run import plan_from_config, run

SMALL = {
    "maps": [{"name": "iso", "space": {"family": "isotropic"}, "sky": {"seed": 4}}],
    "instrument": {"fwhm_deg": 6.0, "noise_uk": 1.0, "nside": 8, "lmax": 16},
    "search": {"radii": "30:50:10", "nside_work": 8, "fwhm_deg": 8.0, "m_max": 8, "centre_nside": 2},
    "significance": {"n_null": 9, "false_alarm": 0.2, "n_injections": 2, "injection_radii": "40:40:10", "seed": 2},
    "bounds": {"p_max": 3, "m_max": 2},
    "execution": {"engine": "serial"},
}


def _toml(data) -> str:
    lines = []
    for sec, body in data.items():
        if isinstance(body, list):
            for entry in body:
                lines.append(f"[[{sec}]]")
                lines += [f"{k} = {json.dumps(v)}" for k, v in entry.items() if not isinstance(v, dict)]
                for k, v in entry.items():
                    if isinstance(v, dict):
                        lines.append(f"{k} = {{ " + ", ".join(f"{a} = {json.dumps(b)}" for a, b in v.items()) + " }")
        else:
            lines.append(f"[{sec}]")
            lines += [f"{k} = {json.dumps(v)}" for k, v in body.items()]
    return "\n".join(lines) + "\n"


def _strip(summary):
    s = json.loads(json.dumps(summary, default=str))
    for k in ("timings_s", "engine", "tasks"):
        s["provenance"].pop(k)
    return s


def _one_line_error(capsys):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "Traceback" not in err[0], err
    return err[0]


def test_read_only_output_is_a_clear_error_even_as_root(tmp_path, capsys, monkeypatch):
    # root ignores permissions, so the refusal of the file system itself is simulated: every
    # temporary file of the store fails as on a read-only mount (EROFS)
    def refuse(*args, **kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS))

    monkeypatch.setattr(store_mod.tempfile, "mkstemp", refuse)
    cfg = tmp_path / "run.toml"
    cfg.write_text(_toml(SMALL))
    out = tmp_path / "out"
    code = main(["run", str(cfg), "--out", str(out)])
    msg = _one_line_error(capsys)
    assert code == 2 and "Read-only file system" in msg
    assert not out.exists()  # nothing finished, so nothing is left behind


def test_disk_full_part_way_keeps_a_valid_store_and_resume_finishes(tmp_path, capsys, monkeypatch):
    reference = run(plan_from_config(config_from_dict(json.loads(json.dumps(SMALL))), tmp_path / "ref"))

    cfg = tmp_path / "run.toml"
    cfg.write_text(_toml(SMALL))
    out = tmp_path / "out"
    real = store_mod.atomic_bytes
    calls = {"n": 0}

    def filling(path, data):
        # meta.json, then (task file, manifest) per task: the disk fills while writing the
        # fifth task's file, half-way through it
        calls["n"] += 1
        if calls["n"] == 1 + 2 * 4 + 1:
            with store_mod.atomic_path(path) as tmp:
                with open(tmp, "wb") as fh:
                    fh.write(data[: len(data) // 2])
                raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(path, data)

    monkeypatch.setattr(store_mod, "atomic_bytes", filling)
    code = main(["run", str(cfg), "--out", str(out), "--quiet"])
    msg = _one_line_error(capsys)
    assert code == 2 and "No space left on device" in msg
    assert not (out / "summary.json").exists()
    tasks_dir = out / "store" / "tasks"
    assert sorted(p.name for p in tasks_dir.iterdir()) == sorted(p.name for p in tasks_dir.glob("*.pkl"))
    assert len(list(tasks_dir.glob("*.pkl"))) == 4  # no temporary or half-written file remains

    monkeypatch.setattr(store_mod, "atomic_bytes", real)
    assert main(["run", str(cfg), "--out", str(out), "--resume", "--quiet"]) == 0
    resumed = json.loads((out / "summary.json").read_text())
    assert resumed["provenance"]["tasks"]["reused_from_store"] == 4
    assert _strip(resumed) == _strip(reference)


def test_report_write_failure_keeps_store_and_no_summary(tmp_path, capsys, monkeypatch):
    import topology.run.scan as scan

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(scan, "write_report", no_space)
    cfg = tmp_path / "run.toml"
    cfg.write_text(_toml(SMALL))
    out = tmp_path / "out"
    code = main(["run", str(cfg), "--out", str(out), "--quiet"])
    msg = _one_line_error(capsys)
    assert code == 2 and "--resume" in msg and "No space left" in msg
    assert not (out / "summary.json").exists()
    assert not [p for p in os.listdir(out) if p.startswith(".report")]
    monkeypatch.undo()
    assert main(["run", str(cfg), "--out", str(out), "--resume", "--quiet"]) == 0
    done = json.loads((out / "summary.json").read_text())
    assert done["provenance"]["tasks"]["computed"] == 0


def test_bad_map_file_stops_before_an_output_folder_exists(tmp_path, capsys):
    bad = tmp_path / "broken.fits"
    bad.write_bytes(b"SIMPLE  =                    T" + b"\0" * 50)
    data = json.loads(json.dumps(SMALL))
    data["maps"] = [{"name": "obs", "path": str(bad)}]
    cfg = tmp_path / "run.toml"
    cfg.write_text(_toml(data))
    out = tmp_path / "out"
    code = main(["run", str(cfg), "--out", str(out)])
    msg = _one_line_error(capsys)
    assert code == 2 and "broken.fits" in msg
    assert not out.exists()


@pytest.mark.parametrize("argv, word", [
    (["run"], "config"),
    (["search", "x.fits", "--m-max", "many"], "--m-max"),
    (["frobnicate"], "frobnicate"),
    (["run", "c.toml", "--engine", "gpu"], "--engine"),
])
def test_usage_errors_are_one_line_exit_2(argv, word, capsys):
    with pytest.raises(SystemExit) as ex:
        main(argv)
    assert ex.value.code == 2
    assert word in _one_line_error(capsys)


def test_version_and_every_help_has_an_example(capsys):
    from topology import __version__

    with pytest.raises(SystemExit) as ex:
        main(["--version"])
    assert ex.value.code == 0 and capsys.readouterr().out.strip() == f"topology {__version__}"
    for cmd in ("predict", "bound", "synth", "search", "run", "keys"):
        with pytest.raises(SystemExit):
            main([cmd, "--help"])
        text = capsys.readouterr().out
        assert f"example: topology {cmd}" in text, cmd



def test_null_and_injected_terms_must_agree():
    # spherical skies are Sachs-Wolfe only: with full-physics nulls (SW, Doppler, ISW) their
    # injections would differ from the nulls in more than the topology; refused at plan time
    # (before any output), naming the injected family; with SW nulls the same family plans
    from topology.errors import InputError

    data = json.loads(json.dumps(SMALL))
    data["instrument"]["terms"] = ["sw", "doppler", "isw"]
    data["significance"]["injection_families"] = ["E1", {"family": "lens", "p": 8, "q": 1}]
    with pytest.raises(InputError) as err:
        plan_from_config(config_from_dict(data))
    assert "spherical skies" in err.value.reason and "\n" not in str(err.value)
    assert err.value.where == "[significance] injection_families #2"
    data["instrument"]["terms"] = ["sw"]
    assert plan_from_config(config_from_dict(data)).instrument["terms"] == ("sw",)
    # flat injections make the full terms with or without camb (the shipped shell table for the
    # default cosmology)
    import topology.skies.spectra as spectra

    data["instrument"]["terms"] = ["sw", "doppler", "isw"]
    data["significance"]["injection_families"] = ["E1"]
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(spectra, "have_camb", lambda: False)
        assert plan_from_config(config_from_dict(data)).instrument["terms"] == ("sw", "doppler", "isw")
