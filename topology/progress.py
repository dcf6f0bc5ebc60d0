"""Progress bar on stderr: tqdm when installed, else a plain line; silent when stderr is not a
terminal or when asked. The one module that touches tqdm."""

from __future__ import annotations

import sys


class _Plain:
    def __init__(self, total: int, desc: str):
        self.total, self.n, self.desc = total, 0, desc

    def update(self, k: int = 1) -> None:
        self.n += k
        sys.stderr.write(f"\r{self.desc}: {self.n}/{self.total}")
        sys.stderr.flush()

    def set_postfix_str(self, text: str) -> None:
        pass

    def close(self) -> None:
        sys.stderr.write("\n")
        sys.stderr.flush()


class _Silent:
    def update(self, k: int = 1) -> None:
        pass

    def set_postfix_str(self, text: str) -> None:
        pass

    def close(self) -> None:
        pass


def progress(total: int, desc: str = "search", enabled: bool | None = None):
    """A bar with update(k), set_postfix_str(text), close(). ``enabled`` None: only on a terminal."""
    if enabled is None:
        enabled = sys.stderr.isatty()
    if not enabled:
        return _Silent()
    try:
        from tqdm import tqdm
    except ImportError:
        return _Plain(total, desc)
    return tqdm(total=total, desc=desc, file=sys.stderr, leave=False)
