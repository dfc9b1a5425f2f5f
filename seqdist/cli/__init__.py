"""The ``seqdist`` command line: a thin layer over the Python API.

Each sub-command lives in ``seqdist/commands/<name>.py`` and provides
``register(subparsers, common)``, which adds its parser and sets ``func``
(called with the parsed arguments; returns an exit code). Errors are handled
here, in one place:

* :class:`~seqdist.core.errors.InputError` and usage errors: one line
  ``seqdist: error: ...`` and exit 2;
* :class:`~seqdist.core.errors.InfeasibleError`: exit 3;
* :class:`~seqdist.core.errors.StrictFailure`: exit 4;
* anything else is a bug: exit 1, with the traceback only under ``--debug``.
"""

from __future__ import annotations

import argparse
import importlib
import re
import sys

from seqdist import __version__
from seqdist.core.errors import SeqdistError

# In the order of the contract's table; a module that is not there yet is skipped.
#: Python parameters whose flag is not ``--`` + the name with ``-`` for ``_``.
_FLAGS = {"replicates": "--bootstrap"}

COMMANDS = ["distances", "scores", "audit", "repair", "tree", "impact", "run", "convert", "simulate", "pairscores"]


class _Parser(argparse.ArgumentParser):
    """argparse with the project's one-line error format."""

    def error(self, message):  # noqa: D401 - argparse API
        # "argument --tol: must be ..." -> "--tol must be ...": the library's form for the same parameter
        message = re.sub(r"^argument (--[\w-]+): must be ", r"\1 must be ", message)
        sys.stderr.write(f"seqdist: error: {message} (see '{self.prog} --help')\n")
        sys.exit(2)


def _common_flags() -> argparse.ArgumentParser:
    # SUPPRESS keeps a flag given before the sub-command from being reset after it.
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--quiet", action="store_true", default=argparse.SUPPRESS,
                        help="no progress bars or warnings on standard error")
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show the traceback of internal faults")
    common.add_argument("--progress", action="store_true", default=argparse.SUPPRESS,
                        help="progress lines on standard error even when it is not a terminal "
                             "(by default only on a terminal)")
    return common


def build_parser() -> argparse.ArgumentParser:
    common = _common_flags()
    parser = _Parser(prog="seqdist", parents=[common],
                     description="Distance matrices from alignments and score matrices: "
                                 "models, audit, metric repair, trees.")
    parser.add_argument("--version", action="version", version=f"seqdist {__version__}")
    subs = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        try:
            mod = importlib.import_module(f".commands.{name}", __package__)
        except ModuleNotFoundError as exc:
            if exc.name == f"{__package__}.commands.{name}":
                continue
            raise
        mod.register(subs, common)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns the exit code."""
    argv = sys.argv[1:] if argv is None else list(argv)
    debug = "--debug" in argv
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        debug = bool(getattr(args, "debug", False))
        from seqdist.core.console import install_warning_printer, set_progress, set_quiet

        set_quiet(bool(getattr(args, "quiet", False)))
        set_progress(True if getattr(args, "progress", False) else None)
        install_warning_printer()
        if not getattr(args, "func", None):
            parser.print_help(sys.stderr)
            return 2
        code = args.func(args)
        return int(code or 0)
    except SeqdistError as exc:
        if debug:
            import traceback

            traceback.print_exc()
        from seqdist.core.console import one_line
        from seqdist.core.errors import ParameterError, flag

        # the library names its parameters; the command line names the flags
        text = (exc.render(lambda p: _FLAGS.get(p) or flag(p)) if isinstance(exc, ParameterError) else str(exc))
        sys.stderr.write(f"seqdist: error: {one_line(text)}\n")
        return exc.exit_code
    except KeyboardInterrupt:
        sys.stderr.write("seqdist: error: interrupted\n")
        return 130
    except BrokenPipeError:
        return 0
    except MemoryError:
        sys.stderr.write("seqdist: error: out of memory\n")
        return 1
    except Exception as exc:  # a bug: say so plainly
        if debug:
            import traceback

            traceback.print_exc()
        from seqdist.core.console import one_line

        sys.stderr.write(f"seqdist: internal error: {type(exc).__name__}: {one_line(exc)} "
                         "(run with --debug for the traceback; please report it)\n")
        return 1


def run() -> None:  # pragma: no cover - console script shim
    sys.exit(main())
