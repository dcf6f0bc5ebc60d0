"""The ``topology`` command line: parsing and printing only, over the Python API.

Exit status: 0 success, 2 bad input (one line on stderr naming the key or file), 3 an internal
error (one line; ``--debug`` shows the traceback), 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys

from .. import __version__
from ..errors import InputError, clear_stop, raise_if_stopped
from . import bound, keys, predict

COMMANDS = [predict, bound, keys]

EPILOG = """exit status: 0 success, 2 bad input, 3 internal error, 130 interrupted.
example: topology predict configs/demo.toml --json"""


class _Parser(argparse.ArgumentParser):
    """argparse with a one-line usage error (exit 2), like every other bad input."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="topology",
        description="Matched-circle tests of the topology of space on HEALPix maps.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"topology {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in _commands():
        p = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP + "\n\nexample: " + module.EXAMPLE,
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        module.add_arguments(p)
        p.set_defaults(_run=module.run)
    return parser


def _commands():
    mods = list(COMMANDS)
    for name in ("synth", "search", "run", "harmonic"):  # stages that ship their own command module
        try:
            mods.append(__import__(f"topology.cli.{name}", fromlist=["run"]))
        except ModuleNotFoundError as e:
            if e.name != f"topology.cli.{name}":
                raise
    order = {"predict": 0, "bound": 1, "synth": 2, "search": 3, "run": 4, "harmonic": 5, "keys": 9}
    return sorted(mods, key=lambda m: order.get(m.NAME, 5))


def _terminate_as_interrupt() -> None:
    """SIGTERM (a batch system's stop) unwinds like Ctrl-C: partial outputs are removed and the
    run store stays valid for --resume. Both signals are also recorded, so that a stop whose
    KeyboardInterrupt the interpreter dropped (raised inside a finaliser) still ends the run at
    the next task (errors.raise_if_stopped)."""
    import signal

    from ..errors import request_stop

    def handler(signum, frame):
        request_stop(signum)
        raise KeyboardInterrupt

    try:
        for sig in (signal.SIGINT, signal.SIGTERM):
            signal.signal(sig, handler)
    except ValueError:  # not the main thread (e.g. called from a notebook worker thread)
        pass


_WARNINGS: list[str] = []


def _one_line_warnings(command: str) -> None:
    """Library warnings (astropy on odd FITS headers, healpy) become one line each, kept until
    the command ends: printed after a success, dropped after an error (whose one line says what
    matters)."""
    import warnings

    _WARNINGS.clear()

    def show(message, category, filename, lineno, file=None, line=None):
        text = " ".join(str(message).split())
        line = f"topology {command}: warning: {text[:300]}"
        if line not in _WARNINGS:
            _WARNINGS.append(line)

    warnings.showwarning = show
    try:  # astropy routes warnings through its own logger (several lines): take them back
        from astropy import log

        log.disable_warnings_logging()
    except Exception:  # noqa: BLE001 - astropy missing or already changed: keep its logger
        pass


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    clear_stop()
    _terminate_as_interrupt()
    _one_line_warnings(getattr(args, "command", None) or "")
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    try:
        code = int(args._run(args) or 0)
        raise_if_stopped()
        for line in _WARNINGS:
            print(line, file=sys.stderr)
        return code
    except InputError as e:
        print(f"topology {args.command}: error: {e}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"topology {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as e:  # noqa: BLE001 - the last guard: one line, not a traceback
        if args.debug:
            raise
        print(f"topology {args.command}: internal error: {type(e).__name__}: {e} (rerun with --debug for the traceback)",
              file=sys.stderr)
        return 3


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
