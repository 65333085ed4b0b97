"""The ``advbound`` command line: argument parsing, logging set-up and exit codes.

Each subcommand lives in its own module under :mod:`advbound.commands` and
exposes ``register(subparsers)``, which adds its parser and sets ``run`` as the
handler.  A handler calls one public API function, prints a summary, and returns
an exit code.  This module is the only place that writes to the terminal on its
own; subcommands print through their handlers.

Exit codes: 0 success; 1 a computation finished but failed or is unverified;
2 bad input (one line on stderr naming the problem); 130 interrupted.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import logging
import sys
import warnings

from .errors import AdvboundError, AdvboundWarning

__all__ = ["main", "build_parser", "EXIT_OK", "EXIT_FAILED", "EXIT_USAGE", "EXIT_INTERRUPTED"]

EXIT_OK, EXIT_FAILED, EXIT_USAGE, EXIT_INTERRUPTED = 0, 1, 2, 130

#: Subcommand modules, in the order ``advbound --help`` lists them.
COMMANDS = ("inspect", "solve", "study", "report", "fit", "verify", "gamma", "export", "exact")


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, no usage dump
        sys.stderr.write(f"advbound: error: {message}\n")
        raise SystemExit(EXIT_USAGE)


def build_parser() -> argparse.ArgumentParser:
    from . import __version__

    parser = _Parser(prog="advbound", description="Adversary-bound workbench for quantum query lower bounds.")
    parser.add_argument("--version", action="version", version=f"advbound {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress and solver output")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        modname = f"advbound.commands.{name}"
        if importlib.util.find_spec(modname) is None:
            continue
        importlib.import_module(modname).register(sub)
    return parser


def _setup_logging(verbose: bool) -> None:
    log = logging.getLogger("advbound")
    if not log.handlers:
        h = logging.StreamHandler(sys.stderr)
        h.setFormatter(logging.Formatter("advbound: %(message)s"))
        log.addHandler(h)
    log.setLevel(logging.INFO if verbose else logging.WARNING)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    sys.stderr.write(f"advbound: warning: {message}\n")


def main(argv=None) -> int:
    """Run the command line with ``argv`` (default ``sys.argv[1:]``); return the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    _setup_logging(args.verbose)
    if not getattr(args, "run", None):
        parser.print_help()
        return EXIT_USAGE
    warnings.showwarning = _show_warning
    warnings.simplefilter("default", AdvboundWarning)
    try:
        code = args.run(args)
    except AdvboundError as err:
        sys.stderr.write(f"advbound: error: {err}\n")
        return EXIT_USAGE
    except FileNotFoundError as err:
        sys.stderr.write(f"advbound: error: no such file: {err.filename}\n")
        return EXIT_USAGE
    except KeyboardInterrupt:
        sys.stderr.write("advbound: interrupted; completed results are kept\n")
        return EXIT_INTERRUPTED
    return EXIT_OK if code is None else int(code)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
