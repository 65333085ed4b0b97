"""Table files: a partial function written as one ``INPUT OUTPUT`` pair per line.

Format
------
* Each non-blank line holds an input string and its output label, separated by
  whitespace.  ``#`` starts a comment, also in the middle of a line.
* Optional directive lines start with ``#!``:

  - ``#! alphabet 01*``  the symbols, in the order that defines the canonical input order;
  - ``#! costs 1 1 2``   the query cost of each position;
  - ``#! names a b c``   a display name per position;
  - ``#! groups 1,2,3 4,5,6``  the rows (1-based positions);
  - ``#! description free text``.

* Without ``#! alphabet`` the alphabet is the set of symbols seen, ordered by
  :func:`sort_symbols`: digits ascending, then the other symbols by code point,
  ``*`` last.
* Listing an input twice with different outputs is an error; with the same
  output it draws an :class:`~advbound.errors.AdvboundWarning`.

Errors name the source and line: ``f.tbl:7: input '01x' has length 3, expected 2``.

Files are UTF-8 text (a leading byte-order mark is accepted and ignored).  A file that
is not UTF-8, holds binary data (NUL or other control bytes), is not a regular file one
can read to its end (a pipe, a folder) or is larger than :data:`MAX_TABLE_BYTES` is
refused with one line naming the file and, where known, the line and byte offset.
:func:`read_text` is the reader, shared with instance files.

>>> f = parse_table("00 0\\n01 1  # a comment\\n10 1\\n11 0\\n")
>>> f.size, f.alphabet, f.output_counts()
(4, ('0', '1'), {'0': 2, '1': 2})
>>> parse_table(write_text(f)).inputs == f.inputs
True
"""

from __future__ import annotations

import dataclasses
import math
import os
import re
import stat
import warnings
from typing import Iterable

from advbound.errors import AdvboundWarning, InvalidFunctionError
from advbound.functions.function import PartialFunction

__all__ = ["parse_table", "read_table", "write_table", "write_text", "sort_symbols", "read_text",
           "decode_text", "MAX_TABLE_BYTES"]

#: Largest table file :func:`read_table` reads by default (128 MiB); pass ``max_bytes`` to change it.
MAX_TABLE_BYTES = 1 << 27

_BOM = b"\xef\xbb\xbf"
#: Control characters that never occur in text (tab, line feed, vertical tab, form feed and
#: carriage return are allowed).
_CONTROL = re.compile("[\x00-\x08\x0e-\x1f\x7f]")


def _fmt_bytes(n: int) -> str:
    for unit, k in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if n >= k:
            return f"{n / k:.3g} {unit}"
    return f"{n} bytes"


def _line_of(text: str, index: int) -> int:
    """1-based line number of character ``index``, counted like :meth:`str.splitlines`."""
    return len((text[:index] + "x").splitlines())


def decode_text(data: bytes, source: str, error: type = InvalidFunctionError, *, binary_ok: bool = False) -> str:
    """UTF-8 text of ``data`` (a leading byte-order mark is dropped).

    Raises ``error`` with one line naming ``source``, the line and the byte offset when ``data``
    is not UTF-8 or (unless ``binary_ok``) holds a control character other than whitespace.

    >>> decode_text(b"\\xef\\xbb\\xbf0 0\\n", "f.tbl")
    '0 0\\n'
    >>> decode_text(b"0 0\\n1\\xe9 1\\n", "f.tbl")
    Traceback (most recent call last):
    ...
    advbound.errors.InvalidFunctionError: f.tbl:2: not UTF-8 text (byte 0xe9 at offset 5); save the file as UTF-8
    """
    skip = len(_BOM) if data.startswith(_BOM) else 0
    try:
        text = data[skip:].decode("utf-8")
    except UnicodeDecodeError as e:
        offset = skip + e.start
        line = data.count(b"\n", 0, offset) + 1
        raise error(f"{source}:{line}: not UTF-8 text (byte 0x{data[offset]:02x} at offset {offset}); "
                    "save the file as UTF-8") from None
    if not binary_ok:
        bad = _CONTROL.search(text)
        if bad is not None:
            i = bad.start()
            offset = skip + len(text[:i].encode("utf-8"))
            what = "a NUL byte" if text[i] == "\x00" else f"control character U+{ord(text[i]):04X}"
            raise error(f"{source}:{_line_of(text, i)}: binary data ({what} at offset {offset}); "
                        "not a text file")
    return text


def read_text(path: str | os.PathLike, *, max_bytes: int | None, error: type = InvalidFunctionError,
              what: str = "table file", override: str = "max_bytes", binary_ok: bool = False) -> str:
    """Read a UTF-8 text file of at most ``max_bytes`` bytes (``None``: no limit).

    At most ``max_bytes + 1`` bytes are ever read, whatever the file claims to be, so a
    device such as ``/dev/zero`` is refused at once.  Pipes and sockets (which could block)
    and folders are refused; so is anything :func:`decode_text` refuses.

    Parameters
    ----------
    path : path-like
        The file.
    max_bytes : int or None
        The size limit.
    error : type
        The :class:`~advbound.errors.AdvboundError` subclass raised (one line naming the file).
    what, override : str
        Words for the messages: what the file is, and the name of the setting that raises the limit.
    binary_ok : bool
        Accept control characters (only the UTF-8 check is made).
    """
    path = os.fspath(path)
    a_what = ("an " if what[:1] in "aeiou" else "a ") + what
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise error(f"{path}: no such file") from None
    except OSError as e:
        raise error(f"{path}: cannot read the {what}: {e.strerror or e}") from None
    if stat.S_ISDIR(st.st_mode):
        raise error(f"{path}: is a folder, not {a_what}")
    if stat.S_ISFIFO(st.st_mode) or stat.S_ISSOCK(st.st_mode):
        raise error(f"{path}: is a pipe or socket, not a regular file; {a_what} must be a file")

    limit = f"the limit of {_fmt_bytes(max_bytes)} for {what}s" if max_bytes is not None else ""
    if max_bytes is not None and stat.S_ISREG(st.st_mode) and st.st_size > max_bytes:
        raise error(f"{path}: the file has {_fmt_bytes(st.st_size)}, more than {limit} (raise it with {override})")
    try:
        with open(path, "rb") as fh:
            data = fh.read() if max_bytes is None else fh.read(max_bytes + 1)
    except OSError as e:
        raise error(f"{path}: cannot read the {what}: {e.strerror or e}") from None
    if max_bytes is not None and len(data) > max_bytes:
        raise error(f"{path}: larger than {limit} (reading stopped there; raise it with {override})")
    return decode_text(data, path, error, binary_ok=binary_ok)


def _short(x: str, limit: int = 40) -> str:
    """``repr(x)``, cut in the middle when long (error messages stay one readable line)."""
    if len(x) <= limit:
        return repr(x)
    return repr(x[:limit // 2]) + f"...({len(x)} characters)..." + repr(x[-(limit // 4):])


def sort_symbols(symbols: Iterable[str]) -> tuple[str, ...]:
    """The documented default symbol order: digits ascending, then others by code point, ``*`` last.

    >>> sort_symbols("*b10a")
    ('0', '1', 'a', 'b', '*')
    """
    syms = set(symbols)
    return tuple(sorted(syms, key=lambda s: (s == "*", not s.isdigit(), s)))


@dataclasses.dataclass
class _Directives:
    """What the ``#!`` lines of a table file set (``None``: not given)."""

    alphabet: tuple[str, ...] | None = None
    costs: list[float] | None = None
    names: list[str] | None = None
    groups: list[tuple[int, ...]] | None = None
    description: str = ""


def _read_directive(d: _Directives, stripped: str, lineno: int, err) -> str:
    """Apply the directive line ``stripped`` (``#! word rest``) to ``d``; returns ``word``.

    ``err(lineno, msg)`` makes the one-line error naming the source and line.
    """
    parts = stripped[2:].split(None, 1)
    if not parts:
        raise err(lineno, "empty directive '#!'")
    word, rest = parts[0], (parts[1] if len(parts) > 1 else "")
    if word == "alphabet":
        syms = tuple(rest.replace(" ", ""))
        if not syms:
            raise err(lineno, "directive 'alphabet' lists no symbol")
        for s in syms:
            if s == "#":
                raise err(lineno, "'#' cannot be an alphabet symbol")
        if len(set(syms)) != len(syms):
            raise err(lineno, f"alphabet {''.join(syms)!r} lists a symbol twice")
        d.alphabet = syms
    elif word == "costs":
        d.costs = []
        for tok in rest.split():
            try:
                c = float(tok)
            except ValueError:
                raise err(lineno, f"cost {tok!r} is not a number") from None
            if not (math.isfinite(c) and c > 0):
                raise err(lineno, f"cost {tok!r} must be finite and positive")
            d.costs.append(c)
    elif word == "names":
        d.names = rest.split()
    elif word == "groups":
        d.groups = []
        for tok in rest.split():
            try:
                d.groups.append(tuple(int(p) - 1 for p in tok.split(",")))
            except ValueError:
                raise err(lineno, f"group {tok!r} is not a comma-separated list of positions") from None
    elif word == "description":
        d.description = rest.strip()
    else:
        raise err(lineno, f"unknown directive {word!r} (expected alphabet, costs, names, groups, "
                          "description)")
    return word


def _table_function(d: _Directives, seen: dict[str, tuple[str, int]], n: int, source: str) -> PartialFunction:
    """The function of the read lines ``seen`` (input -> (output, line)) and the directives ``d``.

    Checks the directives against the input length ``n`` and sorts the inputs into canonical order.
    """
    alphabet = d.alphabet
    if alphabet is None:
        alphabet = sort_symbols(ch for x in seen for ch in set(x))
    costs, names, groups = d.costs, d.names, d.groups
    if costs is not None and len(costs) != n:
        raise InvalidFunctionError(f"{source}: directive 'costs' gives {len(costs)} costs for {n} positions")
    if names is not None and len(names) != n:
        raise InvalidFunctionError(f"{source}: directive 'names' gives {len(names)} names for {n} positions")
    if groups is not None and sorted(j for g in groups for j in g) != list(range(n)):
        raise InvalidFunctionError(f"{source}: directive 'groups' must partition the positions 1..{n}")
    fields = {"description": d.description}
    if names is not None:
        fields["position_names"] = tuple(names)
    if groups is not None:
        fields["groups"] = tuple(groups)
    # lengths and symbols are checked above (with line numbers); sort into canonical order here:
    # translated strings compare like lists of alphabet indices
    to_index = str.maketrans({s: chr(i) for i, s in enumerate(alphabet)})
    keys = sorted(seen, key=lambda s: s.translate(to_index))
    try:
        return PartialFunction(tuple(alphabet), tuple(keys), tuple(seen[k][0] for k in keys),
                               tuple(costs) if costs is not None else (1.0,) * n, **fields)
    except InvalidFunctionError as e:
        raise InvalidFunctionError(f"{source}: {e}") from None


def parse_table(text: str, source: str = "<string>") -> PartialFunction:
    """Parse table-file text (see the module docstring) into a :class:`PartialFunction`.

    Parameters
    ----------
    text : str
        The file contents.
    source : str
        Name used in error messages (``"<source>:<line>: ..."``).

    Raises
    ------
    InvalidFunctionError
        One line naming ``source``, the line number and the problem.
    """
    d = _Directives()
    seen: dict[str, tuple[str, int]] = {}
    n: int | None = None
    first_line = 0
    duplicates: list[int] = []
    drop_known = None

    def err(lineno: int, msg: str) -> InvalidFunctionError:
        return InvalidFunctionError(f"{source}:{lineno}: {msg}")

    for lineno, raw in enumerate(text.splitlines(), 1):
        stripped = raw.strip()
        if stripped.startswith("#!"):
            if _read_directive(d, stripped, lineno, err) == "alphabet":
                drop_known = None
            continue
        body = raw.split("#", 1)[0].split()
        if not body:
            continue
        if len(body) != 2:
            raise err(lineno, f"expected 'INPUT OUTPUT', got {len(body)} field(s)")
        x, y = body
        if n is None:
            n, first_line = len(x), lineno
        elif len(x) != n:
            raise err(lineno, f"input {_short(x)} has length {len(x)}, expected {n} (line {first_line})")
        alphabet = d.alphabet
        if alphabet is not None:
            if drop_known is None:
                drop_known = str.maketrans({s: None for s in alphabet})
            if x.translate(drop_known):
                j, ch = next((j, ch) for j, ch in enumerate(x) if ch not in alphabet)
                raise err(lineno, f"input {_short(x)} has symbol {ch!r} at position {j + 1}, "
                                  f"not in alphabet {''.join(alphabet)!r}")
        prev = seen.get(x)
        if prev is not None:
            if prev[0] != y:
                raise err(lineno, f"input {_short(x)} already has output {_short(prev[0])} (line {prev[1]}), "
                                  f"now {_short(y)}")
            duplicates.append(lineno)
            continue
        seen[x] = (y, lineno)

    if not seen:
        raise InvalidFunctionError(f"{source}: no input lines (the domain is empty)")
    if duplicates:
        warnings.warn(f"{source}: {len(duplicates)} duplicate input line(s) with the same output ignored "
                      f"(first at line {duplicates[0]})", AdvboundWarning, stacklevel=2)
    return _table_function(d, seen, n, source)


def read_table(path: str | os.PathLike, *, max_bytes: int | None = MAX_TABLE_BYTES) -> PartialFunction:
    """Read a table file (see the module docstring); errors name the file and line.

    Parameters
    ----------
    path : path-like
        The table file (UTF-8; a byte-order mark is accepted).
    max_bytes : int or None
        Refuse files larger than this (default :data:`MAX_TABLE_BYTES`; ``None``: no limit).

    Raises
    ------
    InvalidFunctionError
        One line naming the file (and line): missing, unreadable, too large, not UTF-8
        text, or malformed.
    """
    path = os.fspath(path)
    text = read_text(path, max_bytes=max_bytes, what="table file", override="read_table(..., max_bytes=N)")
    return parse_table(text, source=path)


def write_text(f: PartialFunction) -> str:
    """The table-file text of ``f`` with directives, such that :func:`parse_table` gives ``f`` back.

    Alphabet, costs, position names, groups and description are written as
    directives; known symmetries are not stored.
    """
    lines = [f"#! alphabet {''.join(f.alphabet)}"]
    if f.description:
        lines.append(f"#! description {' '.join(f.description.split())}")
    if any(c != 1.0 for c in f.costs):
        lines.append("#! costs " + " ".join(repr(c) for c in f.costs))
    if f.position_names != tuple(f"x{j + 1}" for j in range(f.n)):
        for nm in f.position_names:
            if not nm or any(ch.isspace() for ch in nm) or "#" in nm:
                raise InvalidFunctionError(f"position name {nm!r} cannot be written to a table file")
        lines.append("#! names " + " ".join(f.position_names))
    if f.groups:
        lines.append("#! groups " + " ".join(",".join(str(j + 1) for j in g) for g in f.groups))
    for y in set(f.outputs):
        if not y or any(ch.isspace() for ch in y) or "#" in y:
            raise InvalidFunctionError(f"output label {y!r} cannot be written to a table file")
    lines.extend(f"{x} {y}" for x, y in zip(f.inputs, f.outputs))
    return "\n".join(lines) + "\n"


def write_table(f: PartialFunction, path: str | os.PathLike) -> None:
    """Write ``f`` to ``path`` as a table file; :func:`read_table` reads it back exactly."""
    text = write_text(f)
    with open(os.fspath(path), "w", encoding="utf-8") as fh:
        fh.write(text)
