"""The output folder of a run: ownership, the lock, what ``--force`` may delete, and the report
transaction (written in a staging folder, moved into place with ``summary.json`` last).

The folder belongs to the tool.

Rules (checked before anything is written or deleted; every refusal is one
:class:`~topology.errors.InputError` naming the folder):

* A folder made by ``topology run`` holds the marker file ``.topology-run`` (JSON: the tool, the
  package version, when it was made and which process holds it now). ``--force`` empties only a
  folder with that marker, and keeps the marker; a folder without it is never emptied.
* The folder may not be the current folder or hold it, the home folder or the file-system root,
  and may not hold the config or any input file of the run, whatever the flags.
* A symbolic link is followed: the rules apply to the folder it points to (a dangling link is
  refused).
* The marker is also the lock: a running run holds an exclusive ``flock`` on it for its whole
  life, so a second run on the same folder (``--force``, ``--resume`` or neither) is refused with
  the holder's process id and host. The operating system releases the lock when a process dies,
  so the folder of a killed run is taken over by the next run, with a note naming the process
  that left it. Where the file system offers no ``flock`` (some network file systems) the holder
  recorded in the marker is checked instead: a live process on this host keeps the folder.
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import time
from dataclasses import dataclass
from pathlib import Path

from .. import __version__
from ..errors import InputError, note
from ..store import json_default

MARKER = ".topology-run"

try:  # POSIX; elsewhere the recorded holder is the only lock
    import fcntl
except ImportError:  # pragma: no cover
    fcntl = None


def _holder_text(holder: dict | None) -> str:
    if not holder:
        return "another run"
    started = holder.get("started")
    when = time.strftime("%Y-%m-%d %H:%M:%S", time.localtime(started)) if isinstance(started, (int, float)) else "?"
    return f"process {holder.get('pid', '?')} on host {holder.get('host', '?')} (started {when})"


def _read_marker(fh) -> dict:
    fh.seek(0)
    try:
        data = json.loads(fh.read() or "{}")
    except ValueError:  # a marker being rewritten, or damaged: its holder is unknown
        return {}
    return data if isinstance(data, dict) else {}


def _write_marker(fh, data: dict) -> None:
    """Rewrite the marker in place: it stays the same file (inode), which is what others lock."""
    fh.seek(0)
    fh.truncate()
    fh.write(json.dumps(data, indent=1))
    fh.flush()
    os.fsync(fh.fileno())


def _alive_here(holder: dict) -> bool:
    """Whether the recorded holder is a live process on this host (other than this one)."""
    try:
        pid = int(holder.get("pid"))
    except (TypeError, ValueError):
        return False
    if holder.get("host") != socket.gethostname() or pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def _check_place(real: Path, shown: str, inputs) -> None:
    """Refuse a folder that is or holds the current folder, home, root, or an input file."""
    cwd = Path.cwd().resolve()
    if _inside(cwd, real):
        raise InputError("is the current folder or holds it; the report needs a folder of its own: give --out a new "
                         "folder name", shown)
    if real == Path(real.anchor) or real == Path.home().resolve():
        raise InputError("is the file-system root or the home folder; give --out a new folder name", shown)
    for p in inputs:
        try:
            rp = Path(p).resolve()
        except OSError:
            continue
        if _inside(rp, real):
            raise InputError(f"holds an input of this run ({rp}); give --out a folder of its own", shown)


def _clear(real: Path) -> None:
    """Remove everything in a run folder but its marker (symlinks are removed, not followed)."""
    for child in real.iterdir():
        if child.name == MARKER:
            continue
        if child.is_dir() and not child.is_symlink():
            shutil.rmtree(child)
        else:
            child.unlink()


@dataclass
class RunFolder:
    """A claimed run folder: ``path`` (the real folder), ``created`` (it was missing or empty
    before this claim). Release it with :meth:`release` (or use it as a context manager)."""

    path: Path
    created: bool
    existed: bool = False
    _fh: object = None

    def release(self) -> None:
        """Record that no run holds the folder and drop the lock (idempotent)."""
        fh, self._fh = self._fh, None
        if fh is None:
            return
        try:
            data = _read_marker(fh)
            data["holder"] = None
            _write_marker(fh, data)
        except OSError:
            pass  # a folder removed by its own run, or a full disk: the lock goes with the file
        finally:
            fh.close()  # closing drops the flock

    def discard(self) -> None:
        """Undo the claim of a folder that was missing or empty (a run that finished nothing
        leaves nothing): remove the folder it made, or empty the one it found empty."""
        self.release()
        if not self.created:
            return
        if not self.existed:
            shutil.rmtree(self.path, ignore_errors=True)
            return
        try:
            _clear(self.path)
            (self.path / MARKER).unlink()
        except OSError:
            pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.release()


def _lock(marker: Path, shown: str) -> object:
    """Open the marker and hold its lock; InputError when a live run holds it. A holder recorded
    in the marker whose process is gone is taken over with a note."""
    try:
        fh = open(marker, "r+", encoding="utf-8")
    except OSError as e:
        raise InputError(f"cannot open the run marker ({e.strerror or e})", shown) from None
    try:
        locked = False
        if fcntl is not None:
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                locked = True
            except BlockingIOError:
                holder = _read_marker(fh).get("holder")
                raise InputError(f"another run is using this folder ({_holder_text(holder)}); wait for it to finish "
                                 "or give --out another folder", shown) from None
            except OSError:  # no flock on this file system: the recorded holder decides
                pass
        data = _read_marker(fh)
        holder = data.get("holder")
        if holder:
            if not locked and _alive_here(holder):
                raise InputError(f"another run is using this folder ({_holder_text(holder)}); wait for it to finish "
                                 "or give --out another folder", shown)
            note(f"{shown}: taking over the folder of a run that stopped without releasing it ({_holder_text(holder)})")
        data.update({"tool": "topology run", "version": data.get("version", __version__)})
        data["holder"] = {"pid": os.getpid(), "host": socket.gethostname(), "started": time.time()}
        _write_marker(fh, data)
    except BaseException:
        fh.close()
        raise
    return fh


def claim(out: str | Path, *, force: bool = False, resume: bool = False, inputs=()) -> RunFolder:
    """Check, lock and prepare the output folder of a run (see the module docstring).

    ``inputs`` are the files the run reads (config, maps, masks, ...): the folder may not hold
    them. With ``force`` a folder made by the tool is emptied (but for its marker); with
    ``resume`` it is kept as it is; with neither it must be new or empty.
    """
    shown = str(out)
    out = Path(out)
    if force and resume:
        raise InputError("give --force or --resume, not both", shown)
    if out.is_symlink() and not out.exists():
        raise InputError("is a symbolic link to a missing folder", shown)
    real = out.resolve()
    if real.exists() and not real.is_dir():
        raise InputError("output path exists and is not a folder", shown)
    _check_place(real, shown, inputs)
    marker = real / MARKER
    existed = real.exists()
    if existed and any(real.iterdir()):
        if not marker.is_file():
            raise InputError("this folder exists and was not made by topology run (it has no .topology-run marker); "
                             "nothing was changed: give --out a new folder", shown)
        if not (force or resume):
            raise InputError("output folder exists; use --resume to continue that run or --force to replace it", shown)
        fh = _lock(marker, shown)
        try:
            if force:
                _clear(real)
            elif not (real / "store" / "meta.json").exists():
                raise InputError("nothing to resume: the output folder has no run store", shown)
        except OSError as e:
            fh.close()
            raise InputError(f"cannot empty the folder ({e.strerror or e})", shown) from None
        except BaseException:
            fh.close()
            raise
        return RunFolder(real, False, True, fh)
    if resume:
        raise InputError("nothing to resume: the output folder has no run store", shown)
    parent = real.parent
    if not parent.exists():
        raise InputError("the output folder's parent does not exist", str(parent))
    if not os.access(parent, os.W_OK):
        raise InputError("the output folder's parent is not writable", str(parent))
    made = False  # whether this claim made the folder or its marker (and so may undo that)
    try:
        real.mkdir(exist_ok=True)
        made = True
        with open(marker, "x", encoding="utf-8") as fh:
            fh.write(json.dumps({"tool": "topology run", "version": __version__, "created": time.time(),
                                 "holder": None}, indent=1))
    except FileExistsError:  # another run made it a moment ago: the lock decides, and it is not ours to remove
        made = False
    except OSError as e:
        if made and not existed:
            shutil.rmtree(real, ignore_errors=True)
        raise InputError(f"cannot create the output folder ({e.strerror or e})", shown) from None
    # a failed lock means another run holds the folder now: it is theirs, nothing is undone
    return RunFolder(real, made, existed, _lock(marker, shown))


# ---------------------------------------------------------------------------------------------
# the report transaction and provenance
# ---------------------------------------------------------------------------------------------
def versions() -> dict:
    """Versions of Python and of the packages that shape the results."""
    import importlib.metadata as md
    import platform

    out = {"topology": __version__, "python": platform.python_version()}
    for pkg in ("numpy", "scipy", "healpy", "astropy", "matplotlib", "camb", "dask", "distributed"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            out[pkg] = None
    return out


def publish(folder: Path, write, summary_of) -> dict:
    """Write the report with ``write(staging)`` into a staging folder inside ``folder``, then move
    every file into place, ``summary.json`` last, so a folder with summary.json holds a whole
    report. ``summary_of()`` gives the summary written as summary.json (after ``write``).
    A write failure (disk full, quota, permissions) is an InputError; the run store stays valid."""
    staging = folder / f".report-{os.getpid()}"
    if staging.exists():
        shutil.rmtree(staging)
    try:
        staging.mkdir()
    except OSError as e:
        raise InputError(f"cannot write the report ({e.strerror or e})", str(folder)) from None
    try:
        write(staging)
        summary = summary_of()
        (staging / "summary.json").write_text(json.dumps(summary, indent=1, default=json_default, allow_nan=False))
        (folder / "summary.json").unlink(missing_ok=True)
        for name in sorted(os.listdir(staging), key=lambda n: n == "summary.json"):
            os.replace(staging / name, folder / name)
    except OSError as e:
        raise InputError(f"cannot write the report ({e.strerror or e}); the finished tasks are kept in the store: "
                         "free space, then rerun with --resume", str(folder)) from None
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return summary
