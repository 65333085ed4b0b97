"""``advbound study FILE --set NAME=VALUE``: run only part of a study's grid; the store keeps everything."""

import json
import textwrap

import pytest

from advbound.cli import build_parser, main
from advbound.errors import InvalidInstanceError
from advbound.functions.grid import chosen, parse_choices
from advbound.studies.store import Store
from advbound.studies.study import load_study, plan

# rows = n rows of length 1 with k_1 + ... + k_n = n: the only profile is (1, ..., 1), so the function
# is OR_n of n bits and ADV± = sqrt(n) (common knowledge: the adversary bound of OR_n).
STUDY = textwrap.dedent("""
    [instance]
    name = "orn"
    outer = "or"
    rows = "rows"
    inner = "position_search"
    row_length = 1
    budget = { sum_squares = "rows" }

    [grid]
    rows = [2, 3, 4]

    [study]
    bounds = ["general"]
    method = "dense"
    solver = "CLARABEL"
    growth = "rows"
    """)


@pytest.fixture
def study_file(tmp_path):
    path = tmp_path / "orn.toml"
    path.write_text(STUDY)
    return path


def _run(capsys, path, tmp_path, *extra):
    code = main(["study", str(path), "--store", str(tmp_path / "orn.sqlite"), "--quiet",
                 "--out", str(tmp_path / "rep"), *extra])
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def _stored(tmp_path):
    with Store(str(tmp_path / "orn.sqlite"), readonly=True) as s:
        return {r.params["rows"]: r for r in s.rows()}


def test_parse_choices():
    """NAME=V1,V2 gives several values; a name given twice collects both; values are read as --set reads them."""
    assert parse_choices(["T=4,5", "rows=2", "T=6"]) == {"T": [4, 5, 6], "rows": [2]}
    assert parse_choices(["alpha=0.5"]) == {"alpha": [0.5]} and parse_choices([]) == {}
    for bad, msg in (("T=4,", "expected NAME=NUMBER"), ("T", "expected NAME=NUMBER"), ("T=four", "is not a number")):
        with pytest.raises(InvalidInstanceError, match=msg):
            parse_choices([bad])
    assert chosen({"T": 4, "rows": 2}, {"T": [4, 5]}) and not chosen({"T": 6, "rows": 2}, {"T": [4, 5]})


def test_plan_keeps_the_chosen_points(study_file):
    """plan(study, choices=...) keeps the grid points with a chosen value, in grid order."""
    study = load_study(study_file)
    assert [p.params for p in plan(study, choices={"rows": [4, 2]})] == [{"rows": 2}, {"rows": 4}]
    assert len(plan(study)) == 3


@pytest.mark.parametrize("argv,msg", [
    (["--set", "rows=5"], r"orn\.toml: --set rows=5: not a value of the grid \(rows takes 2, 3, 4\)$"),
    (["--set", "T=5"], r"orn\.toml: --set T: not a grid parameter \(the grid has rows\)$"),
    (["--set", "rows=two"], r"--set 'rows=two': 'two' is not a number$"),
])
def test_bad_choices_are_one_line(study_file, tmp_path, capsys, argv, msg):
    """A value not on the grid names the parameter and the grid's values; an unknown name names the grid's
    parameters; both exit 2 with one line and compute nothing."""
    import re
    code, out, err = _run(capsys, study_file, tmp_path, *argv)
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and re.search(msg, lines[0]), err
    assert not (tmp_path / "orn.sqlite").exists() or _stored(tmp_path) == {}


def test_subset_runs_and_the_report_covers_the_store(study_file, tmp_path, capsys):
    """--set rows=2,4 computes two points; --set rows=3 then adds the third and skips nothing it had;
    the report after the second run covers all three stored points."""
    code, out, _ = _run(capsys, study_file, tmp_path, "--set", "rows=2,4")
    assert code == 0 and "2 point(s) chosen by --set rows=2,4; 0 already stored, 2 solved now" in out
    assert sorted(_stored(tmp_path)) == [2, 4]
    code, out, _ = _run(capsys, study_file, tmp_path, "--set", "rows=3")
    assert code == 0 and "1 point(s) chosen by --set rows=3; 0 already stored, 1 solved now" in out
    rows = _stored(tmp_path)
    for n in (2, 3, 4):
        assert abs(rows[n].lower - n ** 0.5) < 1e-5
    reported = json.loads((tmp_path / "rep" / "data.json").read_text())["rows"]
    assert sorted(r["params"]["rows"] for r in reported) == [2, 3, 4]
    code, out, _ = _run(capsys, study_file, tmp_path, "--no-report")
    assert code == 0 and "3 point(s); 3 already stored, 0 solved now" in out


def test_no_point_with_these_values_together(tmp_path):
    """With a points list, two values each on the grid may still belong to no common point."""
    text = STUDY.replace("rows = [2, 3, 4]", "points = [{rows = 2, w = 0}, {rows = 3, w = 1}]").replace(
        'budget = { sum_squares = "rows" }', 'budget = { sum_squares = "rows" }\nmax_ones = "w + 1"')
    path = tmp_path / "p.toml"
    path.write_text(text)
    study = load_study(path)
    assert [p.params for p in plan(study, choices={"w": [1]})] == [{"rows": 3, "w": 1}]
    with pytest.raises(InvalidInstanceError, match=r"--set rows=2, w=1: no grid point has these values together"):
        plan(study, choices={"rows": [2], "w": [1]})


def test_study_help_shows_every_default():
    """Every option of `advbound study` that takes a value or changes a default says what the default is."""
    parser = build_parser()
    sub = next(a for a in parser._actions if getattr(a, "choices", None) and "study" in a.choices).choices["study"]
    for action in sub._actions:
        if action.dest in ("help", "verbose"):
            continue
        assert "default" in (action.help or ""), f"--help of {action.option_strings or action.dest} shows no default"
