"""User-facing errors.

Every problem that comes from what the user gave (a config key, a parameter, a file) raises
:class:`InputError` with one line that names the key or file and what is wrong. The command line
prints that line and exits with status 2; nothing else is printed.

:func:`note` is the other kind of message: one line ``note: ...`` on stderr about something done
to the user's input that is not an error (a partial-sky map masked, a mask regraded).
"""

import sys
from contextlib import contextmanager


class InputError(ValueError):
    """Bad input from the user: a config key, a parameter value or a file.

    ``where`` names the key or file (for example ``"[space] lengths"`` or ``"map.fits"``);
    the message says what is wrong with it.
    """

    def __init__(self, message: str, where: str | None = None):
        self.where = where
        self.reason = message
        super().__init__(f"{where}: {message}" if where else message)


# ---------------------------------------------------------------------------------------------
# notes: one line on stderr about something done to the user's input (not an error)
# ---------------------------------------------------------------------------------------------
_NOTES = {"quiet": 0, "seen": set(), "held": []}
_STOP = {"signum": None}


def request_stop(signum: int) -> None:
    """Record that a stop signal (SIGINT, SIGTERM) arrived; see :func:`raise_if_stopped`."""
    _STOP["signum"] = signum


def clear_stop() -> None:
    """Forget a recorded stop (a new command in the same process starts afresh)."""
    _STOP["signum"] = None


def raise_if_stopped() -> None:
    """Raise KeyboardInterrupt if a stop signal arrived. The signal handler raises too, but a
    KeyboardInterrupt raised while the interpreter runs a finaliser (``__del__``, a weakref
    callback) is printed and dropped; long loops call this at each step so the stop is certain."""
    if _STOP["signum"] is not None:
        raise KeyboardInterrupt


def note(message: str) -> None:
    """Print ``note: <message>`` as one line on stderr, once per distinct message and process
    (a mask regraded for every null sky is said once), unless inside :func:`quiet_notes`;
    inside :func:`held_notes` the line waits for the block to succeed."""
    text = " ".join(str(message).split())
    if _NOTES["quiet"] or text in _NOTES["seen"]:
        return
    if _NOTES["held"]:
        if text not in _NOTES["held"][-1]:
            _NOTES["held"][-1].append(text)
        return
    _NOTES["seen"].add(text)
    print(f"note: {text}", file=sys.stderr)


@contextmanager
def quiet_notes(active: bool = True):
    """``with quiet_notes():`` silences :func:`note` inside the block (``--quiet``)."""
    _NOTES["quiet"] += bool(active)
    try:
        yield
    finally:
        _NOTES["quiet"] -= bool(active)


@contextmanager
def held_notes():
    """``with held_notes():`` keeps the block's notes and prints them when it ends without an
    exception; when it raises (an InputError), they are dropped, so the error stays one line."""
    _NOTES["held"].append([])
    try:
        yield
    except BaseException:
        _NOTES["held"].pop()
        raise
    for text in _NOTES["held"].pop():
        note(text)
