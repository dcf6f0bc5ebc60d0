"""Durable task results for long runs: one file per finished task, written atomically, and a
manifest of finished task ids, inside the run's output folder.

Layout of a store folder::

    store/meta.json        {"config_hash": ..., "created": ..., "package_version": ...}
    store/manifest.json    {"finished": [task ids...]}
    store/tasks/<id>.pkl   the result of one task (pickle of plain numpy/dict data)

Each write goes to a temporary name in the same folder, is fsynced, then renamed (POSIX rename
is atomic), so an interrupted run leaves only whole files. A task file present but missing from
the manifest (killed between the two renames) is trusted: the task file is the truth, the
manifest a summary. A store made from another config is refused on resume.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import pickle
import re
import tempfile
import time
from pathlib import Path

from . import __version__
from .errors import InputError

_SAFE = re.compile(r"[^A-Za-z0-9_.=-]")


def config_hash(sections: dict, ignore=("output", "execution")) -> str:
    """sha256 of the config's canonical JSON, without sections that do not change results."""
    data = {k: v for k, v in sections.items() if k not in ignore}
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def _fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


@contextlib.contextmanager
def atomic_path(path: Path):
    """Yield a temporary path beside ``path``; on success fsync it, rename it over ``path`` and
    fsync the folder; on any error remove it. The temporary file gets the usual permissions."""
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix, dir=folder)
    except OSError as e:
        raise InputError(f"cannot write here ({e.strerror or e})", str(path)) from None
    os.close(fd)
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600
        yield tmp
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException as e:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(e, OSError):  # disk full, quota, read-only file system, permissions
            raise InputError(f"cannot write ({e.strerror or e}); nothing was written to this file", str(path)) from None
        raise
    _fsync_dir(folder)


def atomic_bytes(path: Path, data: bytes) -> None:
    """Write bytes to ``path`` atomically (see :func:`atomic_path`)."""
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)


class MemoryStore:
    """A store that keeps results in memory (notebooks, tests): same interface as TaskStore."""

    def __init__(self):
        self._results: dict[str, object] = {}
        self.recomputed = 0

    def has(self, task_id: str) -> bool:
        return task_id in self._results

    def put(self, task_id: str, result) -> None:
        self._results[task_id] = result

    def get(self, task_id: str):
        return self._results[task_id]

    def finished(self) -> set[str]:
        return set(self._results)


class TaskStore:
    """Durable results in ``folder`` (created if missing) for a config with ``config_hash``."""

    def __init__(self, folder: str | Path, config_hash: str, *, resume: bool):
        self.folder = Path(folder)
        self.tasks = self.folder / "tasks"
        meta_path = self.folder / "meta.json"
        if meta_path.exists():
            try:
                meta = json.loads(meta_path.read_text())
            except (OSError, ValueError):
                raise InputError("store metadata is unreadable; start a new run", str(meta_path)) from None
            if not resume:
                raise InputError("a run store already exists here; use --resume to continue it or --force to start over",
                                 str(self.folder))
            if meta.get("config_hash") != config_hash:
                raise InputError("this store was made by a different config (config hash differs); "
                                 "resume with the original config or start a new output folder", str(self.folder))
        else:
            self.tasks.mkdir(parents=True, exist_ok=True)
            atomic_bytes(meta_path, json.dumps({"config_hash": config_hash, "created": time.time(),
                                                "package_version": __version__}, indent=1).encode())
        self.tasks.mkdir(parents=True, exist_ok=True)
        self._finished = self._scan()

    def _path(self, task_id: str) -> Path:
        return self.tasks / (_SAFE.sub("_", task_id) + ".pkl")

    def _scan(self) -> set[str]:
        found = set()
        for p in self.tasks.glob("*.pkl"):
            if p.name.startswith("."):  # a temporary file of atomic_path (pathlib's glob matches
                continue                # dot files): whole or not, its task did not finish
            try:
                with open(p, "rb") as fh:
                    tid = pickle.load(fh)["id"]
            except Exception:  # noqa: BLE001 - a foreign or damaged file is simply not finished
                continue
            found.add(tid)
        return found

    def has(self, task_id: str) -> bool:
        return task_id in self._finished

    def put(self, task_id: str, result) -> None:
        atomic_bytes(self._path(task_id), pickle.dumps({"id": task_id, "result": result}, protocol=4))
        self._finished.add(task_id)
        atomic_bytes(self.folder / "manifest.json",
                     json.dumps({"finished": sorted(self._finished)}, indent=0).encode())

    def get(self, task_id: str):
        with open(self._path(task_id), "rb") as fh:
            return pickle.load(fh)["result"]

    def finished(self) -> set[str]:
        return set(self._finished)
