"""Small helpers shared by the command modules (output files, JSON printing)."""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

from ..errors import InputError
from ..store import json_default  # noqa: F401 - the one numpy-to-JSON default, used by commands


def print_json(obj) -> None:
    json.dump(obj, sys.stdout, indent=2, allow_nan=False, default=json_default)
    sys.stdout.write("\n")


def check_writable(path: str | Path, what: str = "output") -> Path:
    """Fail early (before any work) when ``path`` cannot be written."""
    p = Path(path)
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.is_dir():
        raise InputError(f"{what} folder does not exist", str(parent))
    if not os.access(parent, os.W_OK):
        raise InputError(f"{what} folder is not writable", str(parent))
    if p.is_dir():
        raise InputError(f"{what} path is a folder", str(p))
    return p


def atomic_write(path: str | Path, write) -> None:
    """Call ``write(tmp_path)`` then rename into place, so no half-written file is ever left."""
    from ..store import atomic_path

    with atomic_path(path) as tmp:
        write(tmp)
