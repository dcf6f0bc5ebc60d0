"""Progress of long work on stderr. The one module that touches tqdm.

* On a terminal: a bar (tqdm when installed, else one rewritten line).
* In a log (stderr a file or a pipe, as in a batch job): plain lines, one per finished task or
  per 5% of the tasks when there are more than 20, each with the count done/total, the time
  spent and an estimate of the time left (from the tasks finished by this process).
* Nothing with ``enabled=False`` (``--quiet``), or when stderr is a stream with no file
  descriptor (an in-memory capture: it is neither a terminal nor a log).
"""

from __future__ import annotations

import math
import sys
import time

STEP_FRACTION = 0.05  # a log line per 5% of the tasks (per task when there are at most 20)


def duration(seconds: float) -> str:
    """'45 s', '12 min 5 s', '3 h 20 min': a time span for a log line."""
    s = max(0, int(round(seconds)))
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60} s"
    return f"{s // 3600} h {s % 3600 // 60} min"


class _Lines:
    """Plain progress lines for a log: ``desc: n/total tasks done (p%), T elapsed, about E left``."""

    def __init__(self, total: int, desc: str, initial: int, stream, clock):
        self.total, self.n, self.desc, self.stream, self.clock = total, initial, desc, stream, clock
        self.start_n, self.t0 = initial, clock()
        self.step = max(1, math.ceil(STEP_FRACTION * total))
        self.closed = False
        kept = f" ({initial} finished before, kept)" if initial else ""
        self._write(f"{desc}: {total - initial} of {total} tasks to run{kept}")

    def _write(self, line: str) -> None:
        self.stream.write(line + "\n")
        self.stream.flush()

    def update(self, k: int = 1) -> None:
        before, self.n = self.n, self.n + k
        if k <= 0 or (self.n // self.step == before // self.step and self.n < self.total):
            return
        elapsed = self.clock() - self.t0
        line = f"{self.desc}: {self.n}/{self.total} tasks done ({100 * self.n / max(self.total, 1):.0f}%), " \
               f"{duration(elapsed)} elapsed"
        done_here = self.n - self.start_n
        if self.n < self.total and done_here > 0:
            line += f", about {duration(elapsed / done_here * (self.total - self.n))} left"
        self._write(line)

    def set_postfix_str(self, text: str) -> None:
        pass

    def close(self) -> None:
        self.closed = True


class _Bar:
    """A terminal bar without tqdm: one line rewritten in place."""

    def __init__(self, total: int, desc: str, initial: int, stream):
        self.total, self.n, self.desc, self.stream = total, initial, desc, stream

    def update(self, k: int = 1) -> None:
        self.n += k
        self.stream.write(f"\r{self.desc}: {self.n}/{self.total}")
        self.stream.flush()

    def set_postfix_str(self, text: str) -> None:
        pass

    def close(self) -> None:
        self.stream.write("\n")
        self.stream.flush()


class _Silent:
    def update(self, k: int = 1) -> None:
        pass

    def set_postfix_str(self, text: str) -> None:
        pass

    def close(self) -> None:
        pass


def _is_log(stream) -> bool:
    """A file or a pipe: the stream has an operating-system file descriptor."""
    try:
        stream.fileno()
    except (AttributeError, OSError, ValueError):  # io.UnsupportedOperation is both
        return False
    return True


def progress(total: int, desc: str = "search", enabled: bool | None = None, *, initial: int = 0,
             stream=None, clock=time.monotonic):
    """A progress object with update(k), set_postfix_str(text), close(); ``initial`` tasks are
    done already (kept from a store). ``enabled`` True: a bar on a terminal, log lines
    elsewhere; False: nothing; None: a bar on a terminal, lines in a log, nothing for an
    in-memory stream. ``stream`` defaults to sys.stderr; ``clock`` gives seconds (tests)."""
    stream = sys.stderr if stream is None else stream
    if enabled is False or total <= 0:
        return _Silent()
    tty = bool(getattr(stream, "isatty", lambda: False)())
    if not tty:
        return _Lines(total, desc, initial, stream, clock) if (enabled or _is_log(stream)) else _Silent()
    try:
        from tqdm import tqdm
    except ImportError:
        return _Bar(total, desc, initial, stream)
    return tqdm(total=total, initial=initial, desc=desc, file=stream, leave=False)
