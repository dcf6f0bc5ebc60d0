"""Task results that survive an interrupted search: one interface, two stores.

``MemoryCheckpoint`` keeps results in a dict (notebooks, tests); ``FileCheckpoint`` writes a
JSON file after every finished task (a radius, or an observer position), atomically, so a
search started again with ``resume=True`` skips what is done. The file records a fingerprint
of every setting and of the content of the map and mask (:func:`topology.store.fingerprint`
over :func:`topology.store.file_digest`, the mechanism of the run store); a checkpoint with
another fingerprint is never used.
"""

from __future__ import annotations

import json
from pathlib import Path

from ..errors import InputError
from ..store import atomic_bytes, fingerprint

VERSION = 2


def search_fingerprint(settings: dict, inputs: dict) -> str:
    """Short fingerprint of the settings and the inputs ({role: content digest, ...})."""
    return fingerprint({"settings": settings, "inputs": inputs, "version": VERSION})[:16]


class MemoryCheckpoint:
    def __init__(self):
        self.results: dict = {}

    def load(self) -> dict:
        return dict(self.results)

    def save(self, key, result: dict) -> None:
        self.results[key] = result

    def finish(self) -> None:
        pass


class FileCheckpoint:
    """JSON file ``path`` holding {"fingerprint", "results": [[key, result], ...]}."""

    def __init__(self, path: str | Path, fp: str, resume: bool = False):
        self.path = Path(path)
        self.fp = fp
        self.results: dict = {}
        if resume and self.path.is_file():
            try:
                data = json.loads(self.path.read_text())
            except (OSError, ValueError) as e:
                raise InputError(f"cannot read checkpoint ({e}); delete it to start afresh", str(self.path)) from None
            if data.get("fingerprint") == fp:
                self.results = {_key(k): v for k, v in data.get("results", [])}

    def load(self) -> dict:
        return dict(self.results)

    def save(self, key, result: dict) -> None:
        self.results[key] = result
        data = {"fingerprint": self.fp, "version": VERSION, "results": [[k, v] for k, v in self.results.items()]}
        atomic_bytes(self.path, json.dumps(data, allow_nan=True).encode())

    def finish(self) -> None:
        """A complete search needs no checkpoint: remove it."""
        try:
            self.path.unlink()
        except FileNotFoundError:
            pass


def _key(k):
    return float(k) if isinstance(k, float) else k
