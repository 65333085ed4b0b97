"""Hostile table and instance files: every one gives one line naming file, line, key or grid point.

Each test writes a real file to ``tmp_path``; the CLI checks run ``advbound inspect`` and expect
exit code 2, exactly one ``advbound: error:`` line on stderr and no traceback.
"""

import math
import os
import subprocess
import sys
import textwrap
import types

import numpy as np
import pytest

from advbound.functions.builders import MAX_INPUTS, check_domain_size, compose, dead_positions, from_predicate, \
    or_function, position_search_row
from advbound.cli import main
from advbound.functions.domain import domain
from advbound.errors import InvalidFunctionError, InvalidInstanceError
from advbound.functions.function import Automorphism, PartialFunction
from advbound.functions.instance import (
                                         build_instance, grid_size, iter_grid_points, load_instance, parse_instance, resolved, spec_key,
                                         )
from advbound.functions.symmetry import element_from_automorphism
from advbound.functions.tablefile import read_table, write_table
from advbound.functions.timemodel import Budget

OR3 = """
[instance]
outer = "or"
rows = 3
row_length = {row_length}
budget = {{ sum_squares = "T" }}

[grid]
T = {grid}
"""


def write(tmp_path, text, name="f.toml"):
    p = tmp_path / name
    p.write_text(textwrap.dedent(text), encoding="utf-8")
    return str(p)


def inspect_error(capsys, *argv):
    """Run ``advbound inspect``; return the single stderr line after checking exit 2 and no traceback."""
    code = main(["inspect", *argv])
    out, err = capsys.readouterr()
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("advbound: error: "), err
    assert "Traceback" not in err
    return lines[0]


class TestTableFiles:
    """Table files that are not UTF-8 text, or unbounded."""

    def test_binary_file_cli(self, tmp_path, capsys):
        """A PNG header (0x89 is no UTF-8 start byte) is refused with offset 0 on line 1."""
        p = tmp_path / "image.tbl"
        p.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR")
        line = inspect_error(capsys, str(p))
        assert line.endswith("image.tbl:1: not UTF-8 text (byte 0x89 at offset 0); save the file as UTF-8")

    def test_latin1_file_cli(self, tmp_path, capsys):
        """A Latin-1 label names the line (3) and byte offset (16 = 5 + 5 + len("10 caf"))."""
        p = tmp_path / "latin.tbl"
        p.write_bytes("00 0\n01 1\n10 caf\u00e9\n".encode("latin-1"))
        line = inspect_error(capsys, str(p))
        assert line.endswith("latin.tbl:3: not UTF-8 text (byte 0xe9 at offset 16); save the file as UTF-8")

    def test_bom_file_accepted_cli(self, tmp_path, capsys):
        """A table saved with a UTF-8 byte-order mark inspects normally (4 inputs, exit 0)."""
        p = tmp_path / "bom.tbl"
        p.write_bytes(b"\xef\xbb\xbf00 0\n01 1\n10 1\n11 0\n")
        assert main(["inspect", str(p), "--json"]) == 0
        out, err = capsys.readouterr()
        assert '"domain_size": 4' in out and err == ""

    @pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
    def test_dev_zero_refused(self, capsys):
        """/dev/zero never ends; it is refused after the size limit is read, naming the limit."""
        with pytest.raises(InvalidFunctionError, match=r"^/dev/zero: larger than the limit of 128 MiB for table files"):
            read_table("/dev/zero")
        line = inspect_error(capsys, "/dev/zero")
        assert "larger than the limit of 128 MiB" in line

    @pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs named pipes")
    def test_named_pipe_refused(self, tmp_path):
        """A named pipe (which would block on open) is refused without being opened."""
        p = tmp_path / "pipe.tbl"
        os.mkfifo(p)
        with pytest.raises(InvalidFunctionError, match=r"pipe\.tbl: is a pipe or socket, not a regular file"):
            read_table(p)

    @pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
    def test_dev_zero_subprocess(self):
        """Through the entry point, /dev/zero gives exit 2 and one stderr line, no traceback."""
        r = subprocess.run([sys.executable, "-m", "advbound", "inspect", "/dev/zero"],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 2 and r.stdout == ""
        assert r.stderr.count("\n") == 1 and "Traceback" not in r.stderr
        assert r.stderr.startswith("advbound: error: /dev/zero: larger than the limit of 128 MiB for table files")

    def test_table_inside_instance_named(self, tmp_path, capsys):
        """A Latin-1 table used as the outer function is reported with the instance key and the table line."""
        (tmp_path / "g.tbl").write_bytes("00 0\n01 \u00e9\n".encode("latin-1"))
        path = write(tmp_path, '[instance]\nouter = { table = "g.tbl" }\nrows = 2\nrow_length = 2\n')
        line = inspect_error(capsys, path)
        assert "f.toml: [instance] outer: " in line and "g.tbl:2: not UTF-8 text (byte 0xe9 at offset 8)" in line


class TestInstanceFiles:
    """Instance (TOML) files: the same decoding rules, nesting and size limits."""

    def test_bom_accepted(self, tmp_path):
        """An instance file with a byte-order mark loads like the same file without it."""
        text = OR3.format(row_length='"T - 2"', grid="[4, 5]")
        p = tmp_path / "bom.toml"
        p.write_bytes(b"\xef\xbb\xbf" + text.encode())
        plain = write(tmp_path, text, "plain.toml")
        assert spec_key(load_instance(p), {"T": 5}) == spec_key(load_instance(plain), {"T": 5})

    def test_latin1_named(self, tmp_path, capsys):
        """A Latin-1 description names the line (2) and byte offset (29 = 11 + len('description = "caf'))."""
        p = tmp_path / "latin.toml"
        p.write_bytes('[instance]\ndescription = "caf\u00e9"\nouter = "or"\n'.encode("latin-1"))
        line = inspect_error(capsys, str(p))
        assert line.endswith("latin.toml:2: not UTF-8 text (byte 0xe9 at offset 29); save the file as UTF-8")

    def test_deep_nesting(self, tmp_path, capsys):
        """100,000 nested arrays overflow the TOML parser's recursion: one line, no traceback."""
        p = tmp_path / "deep.toml"
        p.write_text("[instance]\nouter = " + "[" * 100000 + "]" * 100000 + "\n")
        line = inspect_error(capsys, str(p))
        assert "deep.toml: invalid TOML" in line

    def test_oversized(self, tmp_path):
        """An instance file beyond 16 MiB is refused from its size, before reading."""
        p = tmp_path / "huge.toml"
        with open(p, "wb") as fh:
            fh.truncate((1 << 24) + 1)  # sparse: nothing is written
        with pytest.raises(InvalidInstanceError, match=r"huge\.toml: the file has 16 MiB, more than the limit of "
                                                       r"16 MiB for instance files"):
            load_instance(p)


class TestExpressions:
    """Expression attacks in instance keys: refused quickly, with the key named."""

    @pytest.mark.parametrize("value, msg", [
        ('"(10**6)**64"', r"rows: power 1000000 \*\* 64 in '\(10\*\*6\)\*\*64' is too large \(beyond 2\*\*1024\)"),
        ('"10**10**10"', r"rows: power 10 \*\* 10000000000 in '10\*\*10\*\*10' is too large"),
        ('"' + "-" * 5000 + '3"', r"rows: the expression has 5001 characters \(at most 1000\)"),
        ('"' + "- " * 400 + '3"', r"rows: expression '- - - .* is nested too deeply \(at most 60 levels\)"),
        ('"' + "(" * 300 + "3" + ")" * 300 + '"', r"rows: cannot parse expression"),
        ('"2**1023 * 4"', r"rows: '2\*\*1023 \* 4' is too large \(an integer of more than 1024 bits"),
        ('"1e308 * 10"', r"rows: '1e308 \* 10' does not evaluate to a finite number"),
        ('"ceil(1e308) * ceil(1e308)"', r"rows: 'ceil\(1e308\) \* ceil\(1e308\)' is too large"),
        ('"(-8) ** 0.5"', r"rows: power -8 \*\* 0\.5 in '\(-8\) \*\* 0\.5' is not a real number"),
        ("1" * 400, r"rows: 1111.* is too large \(an integer of more than 1024 bits"),
        ("inf", r"rows: inf does not evaluate to a finite number"),
        ('"\'ab\' * 10**9"', r"rows: 'ab' is not a number"),
        ('"__import__(\'os\').system(\'true\')"', r"rows: .__import__\(.*is not allowed in an expression"),
    ])
    def test_attack(self, tmp_path, capsys, value, msg):
        """Each attack on [instance] rows gives one line naming the file and the key."""
        path = write(tmp_path, f'[instance]\nouter = "or"\nrows = {value}\nrow_length = 2\n')
        with pytest.raises(InvalidInstanceError, match=r"f\.toml: \[instance\] " + msg):
            load_instance(path)
        inspect_error(capsys, path)

    def test_attack_at_grid_point(self, tmp_path):
        """An expression that only overflows at one grid point names that point: 10**(T*100) at T = 4."""
        path = write(tmp_path, OR3.format(row_length='"10**(T*100) - 1"', grid="[1, 4]"))
        with pytest.raises(InvalidInstanceError, match=r"f\.toml \[grid point T=4\]: \[instance\] row_length: "
                                                       r"power 10 \*\* 400 .* is too large"):
            load_instance(path)


class TestBudgetBoundsTheBuild:
    """Rows longer than the budget can use are never built; oversized domains are refused up front."""

    def test_huge_row_length_same_domain(self, tmp_path):
        """row_length = 10**8 at T = 4 builds exactly the function of the tight length T - 2 (same key)."""
        loose = load_instance(write(tmp_path, OR3.format(row_length='"10**8"', grid="[4, 6]"), "loose.toml"))
        tight = load_instance(write(tmp_path, OR3.format(row_length='"T - 2"', grid="[4, 6]"), "tight.toml"))
        for T in (4, 6):
            f, g = build_instance(loose, {"T": T}), build_instance(tight, {"T": T})
            assert (f.inputs, f.outputs, f.costs, f.position_names) == (g.inputs, g.outputs, g.costs, g.position_names)
            assert f.n == 3 * (T - 2) and f.size == math.comb(T - 1, 2) * 8  # compositions of T into 3 parts
            assert spec_key(loose, {"T": T}) == spec_key(tight, {"T": T})
            assert resolved(loose, {"T": T})["inner"] == [{"position_search": T - 2}] * 3

    def test_huge_row_length_cli(self, tmp_path, capsys):
        """advbound inspect of the row_length = 10**8 file at T = 4 reports the 24-input domain on 6 positions."""
        path = write(tmp_path, OR3.format(row_length='"10**8"', grid="[4]"))
        assert main(["inspect", path, "--json"]) == 0
        out, _ = capsys.readouterr()
        assert '"domain_size": 24' in out and '"positions": 6' in out

    def test_inner_dead_position_kept(self, tmp_path):
        """A dead position inside the usable range stays (only trailing unusable positions are cut)."""
        text = ('[instance]\nouter = "or"\nrows = 2\nrow_length = 4\ntime = { table = [1, 3, 1, 1] }\n'
                'budget = { at_most = 4 }\n')
        f = build_instance(load_instance(write(tmp_path, text)))
        # t^2 = (1, 9, 1, 1): position 2 needs 9 > 4 - 1, positions 3 and 4 fit
        assert [f.position_names[j] for j in dead_positions(f)] == ["r1p2", "r2p2"]

    def test_unbudgeted_huge_row_refused(self, tmp_path, capsys):
        """Without a budget, row_length = 10**8 is refused before any string is made, naming the override."""
        path = write(tmp_path, '[instance]\nouter = "or"\nrows = 2\nrow_length = "10**8"\n')
        line = inspect_error(capsys, path)
        assert "a position-search row of length 100,000,000 would have 200,000,000 inputs" in line
        assert f"more than max_inputs = {MAX_INPUTS:,}" in line and "ADVBOUND_MAX_INPUTS=N" in line

    def test_domain_too_large_names_override(self, tmp_path, capsys, monkeypatch):
        """OR3 at T = 12 has C(11,2) 2^3 = 440 inputs: refused above max_inputs = 439, built at 440."""
        spec = load_instance(write(tmp_path, OR3.format(row_length='"T - 2"', grid="[12]")))
        with pytest.raises(InvalidInstanceError, match=r"f\.toml \[grid point T=12\]: the composition would have "
                                                       r"440 inputs on 30 positions \(about .*\), more than "
                                                       r"max_inputs = 439; raise the limit with max_inputs=N"):
            build_instance(spec, {"T": 12}, max_inputs=439)
        assert build_instance(spec, {"T": 12}, max_inputs=440).size == 440
        monkeypatch.setenv("ADVBOUND_MAX_INPUTS", "100")
        line = inspect_error(capsys, str(tmp_path / "f.toml"))
        assert "440 inputs" in line and "ADVBOUND_MAX_INPUTS=N" in line
        monkeypatch.setenv("ADVBOUND_MAX_INPUTS", "none")
        assert main(["inspect", str(tmp_path / "f.toml")]) == 0
        capsys.readouterr()

    def test_memory_estimate_refused(self, monkeypatch):
        """A domain that fits max_inputs but not the available memory is refused with both figures."""
        monkeypatch.setattr("advbound.functions.sizelimit._available_memory", lambda: 1 << 20)
        with pytest.raises(InvalidFunctionError, match=r"would have 20,000 inputs on 100 positions \(about 3\.13 MB\), "
                                                       r"more than the 1 MB of memory available"):
            check_domain_size(20000, 100)
        check_domain_size(20000, 100, max_inputs=None)

    def test_bad_environment_value(self, monkeypatch):
        """A malformed ADVBOUND_MAX_INPUTS is itself a one-line error."""
        monkeypatch.setenv("ADVBOUND_MAX_INPUTS", "lots")
        with pytest.raises(InvalidFunctionError, match=r"ADVBOUND_MAX_INPUTS='lots': expected a whole number"):
            position_search_row(3)


class TestGrids:
    """Grids are walked lazily and bounded; grid-point problems name the point."""

    def test_row_length_too_small_names_point(self, tmp_path, capsys):
        """T = 2 leaves row length T - 2 = 0: the message names the point, the key, the expression and value."""
        path = write(tmp_path, OR3.format(row_length='"T - 2"', grid="[2, 4]"))
        line = inspect_error(capsys, path)
        assert line.endswith('f.toml [grid point T=2]: [instance] row_length = "T - 2" evaluates to 0, must be >= 1')

    def test_build_error_names_point(self, tmp_path):
        """A budget that allows nothing at T = 2 (three rows need T >= 3) names the grid point."""
        path = write(tmp_path, OR3.format(row_length=1, grid="[2, 3]"))
        spec = load_instance(path)
        assert build_instance(spec, {"T": 3}).size == 8
        with pytest.raises(InvalidInstanceError, match=r"f\.toml \[grid point T=2\]: the budget \(sum t_i\^2 = 2\) "
                                                       r"allows no time profile: the smallest sum of t_i\^2 any "
                                                       r"input has is 3, above 2$"):
            build_instance(spec, {"T": 2})

    def test_absurd_grid_refused(self, tmp_path, capsys):
        """1000 x 1000 x 1000 grid points are refused at load, before any point is resolved."""
        text = OR3.format(row_length='"T - 2"', grid="{ from = 4, to = 1003 }")
        text += "a = { from = 1, to = 1000 }\nb = { from = 1, to = 1000 }\n"
        line = inspect_error(capsys, write(tmp_path, text))
        assert "f.toml: [grid] has 1,000,000,000 points (T: 1000 x a: 1000 x b: 1000 values), more than 100,000" in line

    def test_range_overflow_refused(self, tmp_path):
        """A range from 0 to 1e300 has too many values (and no float overflow escapes)."""
        path = write(tmp_path, OR3.format(row_length='"T - 2"', grid="{ from = 0, to = 1e300 }"))
        with pytest.raises(InvalidInstanceError, match=r"f\.toml: \[grid\] T: the range has .* values \(at most 100000\)"):
            load_instance(path)

    def test_lazy_iteration(self, tmp_path):
        """iter_grid_points is a generator in product order; grid_size counts without listing."""
        text = OR3.format(row_length='"T - 2"', grid="[4, 5]") + "w = [0, 1, 2]\n"
        text = text.replace('budget = { sum_squares = "T" }', 'budget = { sum_squares = "T" }\nmax_ones = "w"')
        spec = load_instance(write(tmp_path, text))
        it = iter_grid_points(spec)
        assert isinstance(it, types.GeneratorType) and next(it) == {"T": 4, "w": 0}
        assert grid_size(spec) == 6 and len(list(it)) == 5


class TestLargeAlphabets:
    """Alphabets of more than 127 symbols, end to end."""

    ALPHA = tuple(chr(0x100 + i) for i in range(200))

    def test_table_with_200_symbols(self, tmp_path):
        """A 200-symbol table file builds; its domain symbols are the alphabet indices (int16, up to 199)."""
        a = self.ALPHA
        p = tmp_path / "wide.tbl"
        lines = ["#! alphabet " + "".join(a)] + [f"{a[i]}{a[199 - i]} {i % 3}" for i in range(0, 200, 7)]
        p.write_text("\n".join(lines) + "\n", encoding="utf-8")
        f = read_table(p)
        d = domain(f)
        ref = np.array([[a.index(c) for c in x] for x in f.inputs])
        assert d.symbols.dtype == np.int16 and np.array_equal(d.symbols, ref) and d.symbols.max() == 199
        write_table(f, tmp_path / "copy.tbl")
        g = read_table(tmp_path / "copy.tbl")
        assert g.inputs == f.inputs and g.alphabet == a

    def test_from_predicate_200_symbols(self):
        """from_predicate over 200 symbols (one position): symbol i has output i mod 2, indices kept."""
        f = from_predicate(self.ALPHA, 1, lambda x: self.ALPHA.index(x) % 2)
        d = domain(f)
        assert f.size == 200 and d.symbols[:, 0].tolist() == list(range(200))
        assert d.output_index.tolist() == [i % 2 for i in range(200)]

    def test_solve_wide_alphabet(self):
        """One position, symbols 140..159: ADV± = 1 (derivation: Delta_1 is every pair of distinct inputs,
        so ||Gamma o Delta_1|| = ||Gamma|| for every Gamma)."""
        from advbound.programs.solve import solve
        pairs = [(self.ALPHA[i], i % 2) for i in range(140, 160)]
        f = PartialFunction.from_pairs(self.ALPHA, pairs)
        r = solve(f, "general", solver="CLARABEL")
        assert r.success and abs(r.lower - 1.0) < 1e-6

    def test_automorphism_check_does_not_wrap(self):
        """On the domain {1, 256, 257} a relabelling 1 -> 0 maps input 1 outside (0 is no input); an
        8-bit code would read 256 as 0 and wrongly find the image inside."""
        alpha = tuple(chr(0x100 + i) for i in range(300))
        f = PartialFunction.from_pairs(alpha, [(alpha[1], 0), (alpha[256], 0), (alpha[257], 1)])
        perm = list(range(300))
        perm[0], perm[1], perm[256], perm[257] = 1, 0, 257, 256  # swaps 0<->1 and 256<->257
        with pytest.raises(InvalidFunctionError, match="outside the domain"):
            element_from_automorphism(f, Automorphism((0,), relabel=(tuple(perm),)))
