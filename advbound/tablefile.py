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

>>> f = parse_table("00 0\\n01 1  # a comment\\n10 1\\n11 0\\n")
>>> f.size, f.alphabet, f.output_counts()
(4, ('0', '1'), {'0': 2, '1': 2})
>>> parse_table(write_text(f)).inputs == f.inputs
True
"""

from __future__ import annotations

import math
import os
import warnings
from typing import Iterable

from .errors import AdvboundWarning, InvalidFunctionError
from .function import PartialFunction

__all__ = ["parse_table", "read_table", "write_table", "write_text", "sort_symbols"]


def sort_symbols(symbols: Iterable[str]) -> tuple[str, ...]:
    """The documented default symbol order: digits ascending, then others by code point, ``*`` last.

    >>> sort_symbols("*b10a")
    ('0', '1', 'a', 'b', '*')
    """
    syms = set(symbols)
    return tuple(sorted(syms, key=lambda s: (s == "*", not s.isdigit(), s)))


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
    alphabet: tuple[str, ...] | None = None
    costs: list[float] | None = None
    names: list[str] | None = None
    groups: list[tuple[int, ...]] | None = None
    description = ""
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
                alphabet = syms
                drop_known = None
            elif word == "costs":
                costs = []
                for tok in rest.split():
                    try:
                        c = float(tok)
                    except ValueError:
                        raise err(lineno, f"cost {tok!r} is not a number") from None
                    if not (math.isfinite(c) and c > 0):
                        raise err(lineno, f"cost {tok!r} must be finite and positive")
                    costs.append(c)
            elif word == "names":
                names = rest.split()
            elif word == "groups":
                groups = []
                for tok in rest.split():
                    try:
                        groups.append(tuple(int(p) - 1 for p in tok.split(",")))
                    except ValueError:
                        raise err(lineno, f"group {tok!r} is not a comma-separated list of positions") from None
            elif word == "description":
                description = rest.strip()
            else:
                raise err(lineno, f"unknown directive {word!r} (expected alphabet, costs, names, groups, "
                                  "description)")
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
            raise err(lineno, f"input {x!r} has length {len(x)}, expected {n} (line {first_line})")
        if alphabet is not None:
            if drop_known is None:
                drop_known = str.maketrans({s: None for s in alphabet})
            if x.translate(drop_known):
                j, ch = next((j, ch) for j, ch in enumerate(x) if ch not in alphabet)
                raise err(lineno, f"input {x!r} has symbol {ch!r} at position {j + 1}, "
                                  f"not in alphabet {''.join(alphabet)!r}")
        prev = seen.get(x)
        if prev is not None:
            if prev[0] != y:
                raise err(lineno, f"input {x!r} already has output {prev[0]!r} (line {prev[1]}), now {y!r}")
            duplicates.append(lineno)
            continue
        seen[x] = (y, lineno)

    if not seen:
        raise InvalidFunctionError(f"{source}: no input lines (the domain is empty)")
    if duplicates:
        warnings.warn(f"{source}: {len(duplicates)} duplicate input line(s) with the same output ignored "
                      f"(first at line {duplicates[0]})", AdvboundWarning, stacklevel=2)
    if alphabet is None:
        alphabet = sort_symbols(ch for x in seen for ch in set(x))
    if costs is not None and len(costs) != n:
        raise InvalidFunctionError(f"{source}: directive 'costs' gives {len(costs)} costs for {n} positions")
    if names is not None and len(names) != n:
        raise InvalidFunctionError(f"{source}: directive 'names' gives {len(names)} names for {n} positions")
    if groups is not None and sorted(j for g in groups for j in g) != list(range(n)):
        raise InvalidFunctionError(f"{source}: directive 'groups' must partition the positions 1..{n}")
    fields = {"description": description}
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


def read_table(path: str | os.PathLike) -> PartialFunction:
    """Read a table file (see the module docstring); errors name the file and line."""
    path = os.fspath(path)
    with open(path, encoding="utf-8") as fh:
        text = fh.read()
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
