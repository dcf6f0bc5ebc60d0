"""Task results that survive an interruption, behind one protocol: ``has(task_id, key)``,
``stale(task_id, key)``, ``put(task_id, result, key)``, ``get(task_id)``, ``finished()``.

* :class:`MemoryStore`: in memory (notebooks, tests, a search of arrays);
* :class:`TaskStore`: a run's folder, one file per finished task and a manifest (``topology run``);
* :class:`FileStore`: one JSON file rewritten after every task (``topology search``), removed by
  :meth:`FileStore.discard` once the search is complete.

:func:`topology.execution.run_tasks` runs the tasks a store has not finished. The rest of this
module (content digests, fingerprints, atomic writes) is what the stores are built on.

TaskStore keeps durable results for long runs: one file per finished task, written atomically,
and a manifest of finished task ids, inside the run's output folder.

Layout of a store folder::

    store/meta.json        {"config_hash": ..., "created": ..., "package_version": ..., "inputs": {...}}
    store/manifest.json    {"finished": [task ids...]}
    store/tasks/<id>.pkl   the result of one task and the key of the inputs it was computed from

A task is finished only for the key it was stored with: the key is a fingerprint of the content
of every input the task reads (:func:`file_digest`, :func:`fingerprint`), so a map or mask
replaced since the task ran makes the task due again rather than reused. ``meta.json`` records
the digests of the run's input files, so a resume can say which of them changed.

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


_DIGESTS: dict = {}


def file_digest(path: str | Path) -> str:
    """sha256 of a file's content (read in 1 MiB blocks; cached per process by path, inode, size
    and change time, which any write updates, so a file is read once per run). The name of a file
    is not part of it."""
    p = Path(path)
    try:
        st = p.stat()
        key = (str(p.resolve()), st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)
        if key not in _DIGESTS:
            h = hashlib.sha256()
            with open(p, "rb") as fh:
                for block in iter(lambda: fh.read(1 << 20), b""):
                    h.update(block)
            _DIGESTS[key] = h.hexdigest()
    except OSError as e:
        raise InputError(f"cannot read input file ({e.strerror or e})", str(p)) from None
    return _DIGESTS[key]


def fingerprint(*parts) -> str:
    """sha256 of the canonical JSON of ``parts`` (settings, digests, versions)."""
    text = json.dumps(parts, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def json_default(o):
    """``default=`` of json.dump for numpy scalars and arrays (TypeError for anything else)."""
    import numpy as np

    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


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
        self._keys: dict[str, str] = {}

    def has(self, task_id: str, key: str = "") -> bool:
        return task_id in self._results and self._keys.get(task_id, "") == key

    def stale(self, task_id: str, key: str = "") -> bool:
        """Finished, but from other inputs than ``key`` says."""
        return task_id in self._results and self._keys.get(task_id, "") != key

    def put(self, task_id: str, result, key: str = "") -> None:
        self._results[task_id] = result
        self._keys[task_id] = key

    def get(self, task_id: str):
        return self._results[task_id]

    def finished(self) -> set[str]:
        return set(self._results)


class TaskStore:
    """Durable results in ``folder`` (created if missing) for a config with ``config_hash``.
    ``inputs`` ({file: digest}) is recorded in ``meta.json``; on resume :attr:`changed_inputs`
    lists the files whose digest differs from the recorded one."""

    def __init__(self, folder: str | Path, config_hash: str, *, resume: bool, inputs: dict | None = None):
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
            old = meta.get("inputs") or {}
            self.changed_inputs = sorted(f for f, d in (inputs or {}).items() if old.get(f) != d)
        else:
            self.changed_inputs = []
            self.tasks.mkdir(parents=True, exist_ok=True)
            atomic_bytes(meta_path, json.dumps({"config_hash": config_hash, "created": time.time(),
                                                "package_version": __version__, "inputs": inputs or {}},
                                               indent=1).encode())
        self.tasks.mkdir(parents=True, exist_ok=True)
        self._finished = self._scan()

    def _path(self, task_id: str) -> Path:
        return self.tasks / (_SAFE.sub("_", task_id) + ".pkl")

    def _scan(self) -> dict[str, str]:
        found = {}
        for p in self.tasks.glob("*.pkl"):
            if p.name.startswith("."):  # a temporary file of atomic_path (pathlib's glob matches
                continue                # dot files): whole or not, its task did not finish
            try:
                with open(p, "rb") as fh:
                    rec = pickle.load(fh)
                found[rec["id"]] = rec.get("key", "")
            except Exception:  # noqa: BLE001 - a foreign or damaged file is simply not finished
                continue
        return found

    def has(self, task_id: str, key: str = "") -> bool:
        return self._finished.get(task_id) == key

    def stale(self, task_id: str, key: str = "") -> bool:
        """Finished, but from other inputs than ``key`` says."""
        return task_id in self._finished and self._finished[task_id] != key

    def put(self, task_id: str, result, key: str = "") -> None:
        atomic_bytes(self._path(task_id), pickle.dumps({"id": task_id, "key": key, "result": result}, protocol=4))
        self._finished[task_id] = key
        atomic_bytes(self.folder / "manifest.json",
                     json.dumps({"finished": sorted(self._finished)}, indent=0).encode())

    def get(self, task_id: str):
        with open(self._path(task_id), "rb") as fh:
            return pickle.load(fh)["result"]

    def finished(self) -> set[str]:
        return set(self._finished)


FILE_STORE_VERSION = 3  # of FileStore's JSON layout (2: a list of [radius, result] pairs)


class FileStore(MemoryStore):
    """Results in one JSON file ``path``, {"fingerprint", "version", "results": {task_id: {"key",
    "result"}}}, rewritten atomically after every :meth:`put` (results must be JSON-able; NaN
    and infinities are kept). With ``resume`` an existing file of the same ``fingerprint`` and
    version is loaded; any other file is ignored and overwritten by the first put."""

    def __init__(self, path: str | Path, fingerprint: str, resume: bool = False):
        super().__init__()
        self.path = Path(path)
        self.fingerprint = fingerprint
        if resume and self.path.is_file():
            try:
                data = json.loads(self.path.read_text())
            except (OSError, ValueError) as e:
                raise InputError(f"cannot read checkpoint ({e}); delete it to start afresh", str(self.path)) from None
            if (isinstance(data, dict) and data.get("fingerprint") == fingerprint
                    and data.get("version") == FILE_STORE_VERSION):
                for task_id, rec in data.get("results", {}).items():
                    self._results[task_id] = rec["result"]
                    self._keys[task_id] = rec.get("key", "")

    def put(self, task_id: str, result, key: str = "") -> None:
        super().put(task_id, result, key)
        data = {"fingerprint": self.fingerprint, "version": FILE_STORE_VERSION,
                "results": {t: {"key": self._keys[t], "result": r} for t, r in self._results.items()}}
        atomic_bytes(self.path, json.dumps(data, allow_nan=True).encode())

    def discard(self) -> None:
        """Remove the file (a complete search needs no checkpoint)."""
        try:
            self.path.unlink()
        except FileNotFoundError:
            pass
