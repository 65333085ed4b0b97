"""The ``advbound`` command line: argument parsing, logging set-up, exit codes and the last-resort error handler.

Each subcommand lives in its own module under :mod:`advbound.cli` and
exposes ``register(subparsers)``, which adds its parser and sets ``run`` as the
handler.  A handler calls one public API function, prints a summary, and returns
an exit code.  This module is the only place that writes to the terminal on its
own; subcommands print through their handlers.

Exit codes
----------
====  ===========================================================================
0     success
1     a computation finished but failed or is unverified
2     bad input: one line ``advbound: error: ...`` on stderr naming the problem
      (an :class:`~advbound.errors.AdvboundError`, a command line argparse rejects,
      a file or folder that is missing, unreadable, read-only, a folder where a
      file is expected, an output that already exists, or too little memory)
3     internal error: an exception nobody anticipated, i.e. a bug in advbound;
      one line ``advbound: internal error: <Type>: <message>; run with -v for the
      traceback`` (with ``-v`` the traceback is printed first)
130   interrupted (Ctrl-C); results already stored are kept
141   standard output was closed (``advbound inspect F | head -c 10``): nothing
      more is printed, no traceback (141 = 128 + SIGPIPE, what a shell reports
      for a tool stopped by a closed pipe)
====  ===========================================================================

With ``--json`` (on any command that has it, and on a command line argparse
rejects when it contains ``--json``) a failure prints exactly one JSON object
``{"error": "<the one line>", "exit": N}`` on standard output and nothing else;
the same line still goes to stderr.  A computation that finished with exit 1
prints its normal JSON result.  Output a command printed before it failed is
discarded in that mode, so standard output is always one JSON document.

``-v`` may be given before or after the subcommand (``advbound -v solve F`` or
``advbound solve F -v``).
"""

from __future__ import annotations

import argparse
import contextlib
import errno
import importlib
import io
import json
import logging
import os
import re
import sys
import traceback
import warnings

from advbound.errors import AdvboundError, AdvboundWarning

__all__ = ["main", "build_parser", "os_error_message", "EXIT_OK", "EXIT_FAILED", "EXIT_USAGE", "EXIT_INTERNAL",
           "EXIT_INTERRUPTED", "EXIT_PIPE"]

EXIT_OK, EXIT_FAILED, EXIT_USAGE, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_PIPE = 0, 1, 2, 3, 130, 141

#: Subcommand modules, in the order ``advbound --help`` lists them.
COMMANDS = ("inspect", "solve", "study", "report", "fit", "verify", "gamma", "export", "exact", "orbits")

#: Longest message printed; longer ones (a huge repr inside an exception) are cut.
_MAX_MESSAGE = 2000


class _UsageExit(SystemExit):
    """argparse rejected the command line; ``message`` is already on stderr."""

    def __init__(self, message: str):
        super().__init__(EXIT_USAGE)
        self.message = message


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, no usage dump
        message = _one_line(message)
        _write_err(f"advbound: error: {message}\n")
        raise _UsageExit(message)


def build_parser() -> argparse.ArgumentParser:
    from advbound import __version__

    parser = _Parser(prog="advbound", description="Adversary-bound workbench for quantum query lower bounds.")
    parser.add_argument("--version", action="version", version=f"advbound {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress and solver output; "
                                                                     "print the traceback of an internal error")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        importlib.import_module(f"advbound.cli.{name}").register(sub)
    for p in sub.choices.values():
        # the same flag after the subcommand; SUPPRESS keeps the value given before it
        with contextlib.suppress(argparse.ArgumentError):
            p.add_argument("-v", "--verbose", action="store_true", default=argparse.SUPPRESS,
                           help="log progress; print the traceback of an internal error")
    return parser


def _setup_logging(verbose: bool) -> None:
    log = logging.getLogger("advbound")
    if not log.handlers:
        h = logging.StreamHandler(sys.stderr)
        h.setFormatter(logging.Formatter("advbound: %(message)s"))
        log.addHandler(h)
    log.setLevel(logging.INFO if verbose else logging.WARNING)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    _write_err(f"advbound: warning: {_one_line(message)}\n")


# ---------------------------------------------------------------------------------------------
# Messages
# ---------------------------------------------------------------------------------------------
def _one_line(text) -> str:
    """``text`` with line breaks folded into spaces, cut at :data:`_MAX_MESSAGE` characters."""
    s = re.sub(r"\s*[\r\n]+\s*", " ", str(text)).strip()
    return s if len(s) <= _MAX_MESSAGE else s[:_MAX_MESSAGE - 1] + "…"


def _first_missing(path: str) -> str | None:
    """The shallowest ancestor folder of ``path`` that does not exist (None when its parent exists)."""
    parent = os.path.dirname(os.path.abspath(path))
    missing = None
    while parent and not os.path.exists(parent):
        missing = parent
        up = os.path.dirname(parent)
        if up == parent:
            break
        parent = up
    return missing


def _first_non_folder(path: str) -> str | None:
    """The nearest ancestor of ``path`` that exists but is not a folder, if any."""
    from advbound.cli.paths import _file_on_the_way

    return _file_on_the_way(os.path.dirname(os.path.abspath(path)))


def os_error_message(err: OSError) -> str:
    """One line naming the path and the problem of an :class:`OSError`.

    >>> os_error_message(FileNotFoundError(2, "No such file or directory", "/nonexistent-dir/x.tbl"))
    'no such folder: /nonexistent-dir (for /nonexistent-dir/x.tbl)'
    >>> os_error_message(IsADirectoryError(21, "Is a directory", "/tmp"))
    '/tmp is a folder, not a file'
    """
    if err.filename is None:
        text = err.strerror or str(err) or type(err).__name__
        return _one_line(f"{text} (OS error {err.errno})" if err.errno else text)
    p = os.fsdecode(err.filename) if isinstance(err.filename, (str, bytes, os.PathLike)) else str(err.filename)
    no = err.errno
    if no == errno.ENOENT:
        missing = _first_missing(p)
        if missing is not None:
            return f"no such folder: {missing} (for {p})"
        if err.filename2 is not None:
            return f"no such file: {p} (or {os.fsdecode(err.filename2)})"
        return f"no such file: {p}"
    if no in (errno.EACCES, errno.EPERM):
        return f"permission denied: {p}"
    if no == errno.EROFS:
        return f"read-only file system: cannot write {p}"
    if no == errno.EISDIR:
        return f"{p} is a folder, not a file"
    if no == errno.ENOTDIR:
        bad = _first_non_folder(p)
        return f"{bad} is not a folder (in {p})" if bad else f"{p}: not a folder"
    if no == errno.EEXIST:
        return f"{p} already exists"
    if no == errno.ENOSPC:
        return f"no space left on the device holding {p}"
    if no == errno.EDQUOT:
        return f"disk quota exceeded writing {p}"
    return _one_line(f"{p}: {err.strerror or err}")


# ---------------------------------------------------------------------------------------------
# Output helpers that survive closed streams
# ---------------------------------------------------------------------------------------------
def _write_err(text: str) -> None:
    stream = sys.stderr
    if stream is None:
        return
    with contextlib.suppress(OSError, ValueError):
        stream.write(text)
        stream.flush()


def _stdout_closed(stream) -> bool:
    """Whether the reading end of ``stream`` (a pipe) is gone; True when that cannot be checked."""
    try:
        fd = stream.fileno()
    except (AttributeError, OSError, ValueError, io.UnsupportedOperation):
        return True
    try:
        import select
        poller = select.poll()
        poller.register(fd, select.POLLOUT)
        events = poller.poll(0)
    except (ImportError, AttributeError, OSError, ValueError):
        return True
    return any(ev & (select.POLLERR | select.POLLHUP | select.POLLNVAL) for _, ev in events)


def _silence_stdout() -> None:
    """Point file descriptor 1 at /dev/null so the interpreter's final flush cannot fail again."""
    stream = sys.__stdout__
    if stream is None:
        return
    with contextlib.suppress(OSError, ValueError, AttributeError, io.UnsupportedOperation):
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, stream.fileno())
        os.close(devnull)


# ---------------------------------------------------------------------------------------------
# main
# ---------------------------------------------------------------------------------------------
def _report(code: int, line: str, json_mode: bool, out) -> int:
    """Print ``line`` on stderr (with the ``advbound: `` prefix) and, in JSON mode, the error object."""
    _write_err(f"advbound: {line}\n")
    if json_mode and out is not None:
        _write_json_error(out, line[len("error: "):] if line.startswith("error: ") else line, code)
    return code


def _write_json_error(out, text: str, code: int) -> None:
    """Write the one error object ``{"error": text, "exit": code}`` to ``out`` (quietly if it is closed)."""
    try:
        out.write(json.dumps({"error": text, "exit": code}) + "\n")
        out.flush()
    except BrokenPipeError:
        _silence_stdout()
    except (OSError, ValueError):
        pass


def _internal(err: BaseException, verbose: bool, json_mode: bool, out) -> int:
    if verbose:
        _write_err("".join(traceback.format_exception(type(err), err, err.__traceback__)))
    msg = _one_line(err)
    what = f"{type(err).__name__}: {msg}" if msg else type(err).__name__
    hint = "" if verbose else "; run with -v for the traceback"
    return _report(EXIT_INTERNAL, f"internal error: {what}{hint}", json_mode, out)


def _execute(args, json_mode: bool) -> int:
    """Run the subcommand handler and turn every exception into one line and an exit code."""
    out = sys.stdout
    verbose = bool(getattr(args, "verbose", False))
    buf = io.StringIO() if json_mode else None
    try:
        if buf is not None:
            with contextlib.redirect_stdout(buf):
                code = args.run(args)
        else:
            code = args.run(args)
        code = EXIT_OK if code is None else int(code)
        if out is not None:
            if buf is not None:
                out.write(buf.getvalue())
            out.flush()
        return code
    except BrokenPipeError as err:
        if _stdout_closed(out):
            _silence_stdout()
            return EXIT_PIPE
        return _internal(err, verbose, json_mode, out)
    except KeyboardInterrupt:
        return _report(EXIT_INTERRUPTED, "interrupted; completed results are kept", json_mode, out)
    except AdvboundError as err:
        return _report(EXIT_USAGE, f"error: {_one_line(err)}", json_mode, out)
    except OSError as err:
        return _report(EXIT_USAGE, f"error: {os_error_message(err)}", json_mode, out)
    except MemoryError:
        return _report(EXIT_USAGE, "error: out of memory (see 'advbound inspect FILE' for the size estimate of "
                                   "an instance)", json_mode, out)
    except _UsageExit as err:  # a handler that used a parser's error(): the line is already on stderr
        if json_mode and out is not None:
            with contextlib.suppress(OSError, ValueError):
                out.write(json.dumps({"error": err.message, "exit": EXIT_USAGE}) + "\n")
                out.flush()
        return EXIT_USAGE
    except (Exception, SystemExit) as err:  # noqa: BLE001 - the last resort; SystemExit: user code called exit
        return _internal(err, verbose, json_mode, out)


def main(argv=None) -> int:
    """Run the command line with ``argv`` (default ``sys.argv[1:]``); return the exit code (never raises)."""
    argv = sys.argv[1:] if argv is None else [os.fspath(a) for a in argv]
    json_mode = "--json" in argv
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
    except _UsageExit as err:
        if json_mode:
            _report_json_only(err.message)
        return EXIT_USAGE
    except SystemExit as err:  # --help and --version
        try:
            if sys.stdout is not None:
                sys.stdout.flush()
        except BrokenPipeError:
            _silence_stdout()
            return EXIT_PIPE
        return err.code if isinstance(err.code, int) else EXIT_OK
    except BrokenPipeError:
        _silence_stdout()
        return EXIT_PIPE
    except KeyboardInterrupt:
        _write_err("advbound: interrupted\n")
        return EXIT_INTERRUPTED
    json_mode = bool(getattr(args, "json", False)) or json_mode
    _setup_logging(args.verbose)
    if not getattr(args, "run", None):
        parser.print_help()
        return EXIT_USAGE
    warnings.showwarning = _show_warning
    warnings.simplefilter("default", AdvboundWarning)
    return _execute(args, json_mode)


def _report_json_only(message: str) -> None:
    """The error object of a rejected command line (its line is already on stderr)."""
    if sys.stdout is not None:
        _write_json_error(sys.stdout, message, EXIT_USAGE)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
