"""Table files (advbound.functions.tablefile): parsing, errors naming file and line, exact round trips."""

import pytest

from advbound.functions.builders import position_search_composition
from advbound.errors import AdvboundWarning, InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.functions.tablefile import parse_table, read_table, sort_symbols, write_table, write_text


def same(f, g):
    return (f.alphabet, f.inputs, f.outputs, f.costs, f.position_names, f.groups, f.description) == \
           (g.alphabet, g.inputs, g.outputs, g.costs, g.position_names, g.groups, g.description)


class TestParse:
    """Tests for ``parse_table``."""

    def test_plain_format_with_comments(self):
        """Whitespace-separated pairs, '#' comments (whole-line and mid-line), blank lines ignored."""
        f = parse_table("# XOR on two bits\n00 0\n\n01   1 # odd\n10\t1\n11 0   # even\n")
        assert dict(zip(f.inputs, f.outputs)) == {"00": "0", "01": "1", "10": "1", "11": "0"}

    def test_default_alphabet_order(self):
        """Without a directive the alphabet is the symbols seen: digits, then others, '*' last."""
        f = parse_table("*b 1\n1a 0\n0* 1\n")
        assert f.alphabet == ("0", "1", "a", "b", "*")
        assert f.inputs == ("0*", "1a", "*b")
        assert sort_symbols("z*9a") == ("9", "a", "z", "*")

    def test_directives(self):
        """alphabet, costs, names, groups and description directives are applied."""
        f = parse_table("#! alphabet *10\n#! costs 1 2.5\n#! names a b\n#! groups 1 2\n"
                        "#! description two bits\n00 0\n1* 1\n")
        assert f.alphabet == ("*", "1", "0") and f.costs == (1.0, 2.5)
        assert f.position_names == ("a", "b") and f.groups == ((0,), (1,))
        assert f.description == "two bits" and f.inputs == ("1*", "00")

    def test_constant_allowed(self):
        """A table with one output value is a constant function, which is allowed."""
        assert parse_table("0 1\n1 1\n").is_constant

    @pytest.mark.parametrize("text, msg", [
        ("00 0\n01 1\n01x 1\n", r"^f\.tbl:3: input '01x' has length 3, expected 2 \(line 1\)$"),
        ("#! alphabet 01\n00 0\n0x 1\n", r"^f\.tbl:3: input '0x' has symbol 'x' at position 2, not in alphabet '01'$"),
        ("00 0\n01 1\n00 1\n", r"^f\.tbl:3: input '00' already has output '0' \(line 1\), now '1'$"),
        ("00 0 7\n", r"^f\.tbl:1: expected 'INPUT OUTPUT', got 3 field\(s\)$"),
        ("00\n", r"^f\.tbl:1: expected 'INPUT OUTPUT', got 1 field\(s\)$"),
        ("#! colour red\n0 0\n", r"^f\.tbl:1: unknown directive 'colour'"),
        ("#! costs 1 x\n0 0\n", r"^f\.tbl:1: cost 'x' is not a number$"),
        ("#! costs 1 0\n00 0\n", r"^f\.tbl:1: cost '0' must be finite and positive$"),
        ("#! costs 1\n00 0\n", r"^f\.tbl: directive 'costs' gives 1 costs for 2 positions$"),
        ("#! names a\n00 0\n", r"^f\.tbl: directive 'names' gives 1 names for 2 positions$"),
        ("#! groups 1\n00 0\n", r"^f\.tbl: directive 'groups' must partition the positions 1\.\.2$"),
        ("#! alphabet 0#\n0 0\n", r"^f\.tbl:1: '#' cannot be an alphabet symbol$"),
        ("# only comments\n\n", r"^f\.tbl: no input lines \(the domain is empty\)$"),
    ])
    def test_errors_name_file_and_line(self, text, msg):
        """Each malformed table raises one line naming the file and (where known) the line."""
        with pytest.raises(InvalidFunctionError, match=msg):
            parse_table(text, source="f.tbl")

    def test_duplicate_same_output_warns(self):
        """A repeated line with the same output warns with the file and line, and is kept once."""
        with pytest.warns(AdvboundWarning, match=r"f\.tbl: 1 duplicate input line\(s\) .* \(first at line 3\)"):
            f = parse_table("00 0\n01 1\n00 0\n", source="f.tbl")
        assert f.size == 2


class TestRoundTrip:
    """Tests for ``write_table`` / ``read_table``."""

    def test_composed_function(self, tmp_path):
        """A composed function (names, groups, description) survives write then read exactly."""
        f = position_search_composition("or", 3, None, 6)
        path = tmp_path / "f.tbl"
        write_table(f, path)
        assert same(read_table(path), f)

    def test_costs_and_alphabet_order(self, tmp_path):
        """Non-unit costs and a non-default alphabet order survive the round trip."""
        f = PartialFunction.from_pairs("ba", [("ab", "x"), ("ba", "y"), ("bb", "x")], costs=[0.1, 3.0],
                                       description="costly pair")
        path = tmp_path / "g.tbl"
        write_table(f, path)
        g = read_table(path)
        assert same(g, f) and g.alphabet == ("b", "a")

    def test_text_is_readable_plain(self):
        """The written text is the plain format plus directives (a default function needs only the alphabet)."""
        text = write_text(PartialFunction.from_pairs("01", [("0", 0), ("1", 1)]))
        assert text == "#! alphabet 01\n0 0\n1 1\n"

    def test_unwritable_label(self):
        """An output label with a space cannot be written."""
        f = PartialFunction.from_pairs("01", [("0", "a b"), ("1", "c")])
        with pytest.raises(InvalidFunctionError, match="output label 'a b' cannot be written"):
            write_text(f)

    def test_missing_file(self, tmp_path):
        """Reading a missing file raises one line naming it (the CLI turns it into exit code 2)."""
        with pytest.raises(InvalidFunctionError, match=r"nope\.tbl: no such file$"):
            read_table(tmp_path / "nope.tbl")


class TestReadHostile:
    """Tests for reading files that are not UTF-8 table text: one line naming file, line and offset."""

    def test_byte_order_mark_accepted(self, tmp_path):
        """A UTF-8 byte-order mark before the first line is ignored: same function as without it."""
        plain, marked = tmp_path / "plain.tbl", tmp_path / "bom.tbl"
        plain.write_bytes(b"#! alphabet 01\n00 0\n01 1\n")
        marked.write_bytes(b"\xef\xbb\xbf" + plain.read_bytes())
        assert same(read_table(marked), read_table(plain))

    def test_latin1_names_line_and_offset(self, tmp_path):
        """Latin-1 bytes (0xe9 for e-acute) are not UTF-8: the line (2) and byte offset (8) are named."""
        p = tmp_path / "latin.tbl"
        p.write_bytes("00 0\n01 \u00e9\n".encode("latin-1"))
        with pytest.raises(InvalidFunctionError, match=r"latin\.tbl:2: not UTF-8 text \(byte 0xe9 at offset 8\); "
                                                       r"save the file as UTF-8$"):
            read_table(p)

    def test_binary_nul_names_offset(self, tmp_path):
        """A NUL byte marks binary data, with line and offset (valid UTF-8 is not enough)."""
        p = tmp_path / "bin.tbl"
        p.write_bytes(b"00 0\n\x00\x01\x02\x03 1\n")
        with pytest.raises(InvalidFunctionError, match=r"bin\.tbl:2: binary data \(a NUL byte at offset 5\)"):
            read_table(p)

    def test_control_character_refused(self, tmp_path):
        """A control character other than whitespace (U+0007) is refused as binary data."""
        p = tmp_path / "ctl.tbl"
        p.write_bytes(b"00 0\n0\x07 1\n")
        with pytest.raises(InvalidFunctionError, match=r"ctl\.tbl:2: binary data \(control character U\+0007"):
            read_table(p)

    def test_size_limit_regular_file(self, tmp_path):
        """A file larger than max_bytes is refused before reading, naming the limit."""
        p = tmp_path / "big.tbl"
        p.write_text("00 0\n01 1\n10 1\n11 0\n")
        with pytest.raises(InvalidFunctionError, match=r"big\.tbl: the file has 20 bytes, more than the limit "
                                                       r"of 10 bytes for table files \(raise it with"):
            read_table(p, max_bytes=10)
        assert read_table(p, max_bytes=None).size == 4

    def test_folder_refused(self, tmp_path):
        """A folder is not a table file."""
        with pytest.raises(InvalidFunctionError, match=r"is a folder, not a table file$"):
            read_table(tmp_path)

    def test_long_input_message_is_short(self):
        """An error about a 100,000-character input quotes it cut, so the message stays short."""
        with pytest.raises(InvalidFunctionError, match=r"^f\.tbl:2: input '0000.*\(100000 characters\).* has length") as e:
            parse_table("00 0\n" + "0" * 100000 + " 1\n", source="f.tbl")
        assert len(str(e.value)) < 200


from hypothesis import given, settings  # noqa: E402
from strategies import partial_functions  # noqa: E402


@settings(max_examples=40, deadline=None)
@given(f=partial_functions(max_n=4, alphabets=("01", "01*", "*ab"), max_outputs=3, max_size=12))
def test_round_trip_property(f):
    """Any small partial function survives write_text then parse_table exactly."""
    assert same(parse_table(write_text(f)), f)
