"""One module per ``advbound`` subcommand; each exposes ``register(subparsers)``.

A handler parses nothing itself beyond its arguments, calls one public API
function, prints a summary and returns an exit code (see :mod:`advbound.cli`).

Shared helpers for handlers: :func:`check_output_path` checks a file the command
will write *before* any work is done, so a typo in ``--save-certificate`` costs
nothing.  Policy: an output file that already exists is refused unless the command
was given ``--force``; a folder, a missing parent folder, a parent that is not a
folder and a folder where no file can be created are always refused.
"""

from __future__ import annotations

import os
import tempfile

from advbound.errors import AdvboundError

__all__ = ["OutputPathError", "check_output_path"]


class OutputPathError(AdvboundError, ValueError):
    """A file a command was asked to write cannot or may not be written."""


def _missing_ancestor(folder: str) -> str:
    """The shallowest folder on the way to ``folder`` that does not exist."""
    missing = folder
    up = os.path.dirname(folder)
    while up != missing and not os.path.exists(up):
        missing, up = up, os.path.dirname(up)
    return missing


def _file_on_the_way(folder: str) -> str | None:
    """The nearest ancestor of ``folder`` (itself included) that exists and is not a folder."""
    cur = folder
    while True:
        if os.path.exists(cur):
            return None if os.path.isdir(cur) else cur
        up = os.path.dirname(cur)
        if up == cur:
            return None
        cur = up


def check_output_path(path, *, force: bool = False, option: str = "--save-certificate") -> str:
    """Check that ``path`` can be written as a new file (or replaced, with ``force``); return it.

    Nothing is left behind: writability is probed by creating and removing a temporary
    file next to ``path`` (permission bits alone do not say whether root can write, or
    whether the file system is read-only).

    Parameters
    ----------
    path : str or path-like
    force : bool
        Allow replacing an existing regular file.
    option : str
        The option that named the path, for the message.

    Raises
    ------
    OutputPathError
        One line naming the path and the problem.
    """
    p = os.fspath(path)
    label = f"{option} {p}"
    if not p:
        raise OutputPathError(f"{option}: empty path")
    if p.endswith(os.sep) or os.path.isdir(p):
        raise OutputPathError(f"{label}: is a folder; give a file name inside it")
    parent = os.path.dirname(os.path.abspath(p))
    bad = _file_on_the_way(parent)
    if bad is not None:
        raise OutputPathError(f"{label}: {bad} is a file, not a folder")
    if not os.path.isdir(parent):
        raise OutputPathError(f"{label}: folder {_missing_ancestor(parent)} does not exist")
    if os.path.lexists(p):
        if not force:
            raise OutputPathError(f"{label}: already exists (pass --force to overwrite it)")
        if not os.path.isfile(p):
            raise OutputPathError(f"{label}: exists and is not a regular file")
        if not os.access(p, os.W_OK):
            raise OutputPathError(f"{label}: exists and is not writable")
        return p
    try:
        fd, probe = tempfile.mkstemp(dir=parent, prefix=".advbound-write-test-")
    except OSError as err:
        why = err.strerror or type(err).__name__
        raise OutputPathError(f"{label}: cannot create files in {parent} ({why})") from None
    os.close(fd)
    os.unlink(probe)
    return p
