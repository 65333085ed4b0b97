"""A study whose grid has a point the instance cannot build stores it as invalid and computes the rest."""
import json

from advbound.cli import main
from advbound.studies.store import Store

STUDY = """
[instance]
name = "tiny"
outer = { function = "or" }
rows = 2
inner = [{ position_search = "T - 2" }, { position_search = "T - 2" }]
time = { alpha = 0.5 }
budget = { sum_squares = "T" }
[grid]
T = [2, 4]
[study]
name = "tiny"
growth = "T"
bounds = ["general"]
method = "symmetric"
solver = "CLARABEL"
"""


def test_invalid_grid_point_is_stored_and_the_rest_computed(tmp_path, capsys):
    """T = 2 gives rows of length 0: stored 'invalid' with its one-line message; T = 4 is solved."""
    path = tmp_path / "st.toml"
    path.write_text(STUDY)
    store = tmp_path / "tiny.sqlite"
    code = main(["study", str(path), "--store", str(store), "--quiet", "--out", str(tmp_path / "rep")])
    cap = capsys.readouterr()
    out = cap.out + cap.err
    assert code == 2          # invalid input is bad input; the valid points are still computed
    assert "fix the instance" in out and "--retry-failed" not in out
    with Store(str(store), readonly=True) as s:
        rows = {r.params["T"]: r for r in s.rows()}
    assert rows[2].status == "invalid" and "must be >= 1" in rows[2].message
    # T = 4 with rows of length 2: the only profile is (2, 2), so this is OR_2 of the two position-2
    # bits, ADV± = √2 (common knowledge)
    assert rows[4].success and abs(rows[4].lower - 2 ** 0.5) < 1e-5


FIX_STUDY = """
[instance]
name = "fix"
outer = "or"
rows = "rows"
inner = "position_search"
row_length = {row_length}
budget = {{ sum_squares = "T" }}
[grid]
points = [{{ T = 2, rows = 2 }}, {{ T = 2, rows = 3 }}]
[study]
name = "fix"
growth = "T"
bounds = ["general"]
method = "dense"
solver = "CLARABEL"
"""


def _study_rows(tmp_path, capsys, text):
    path = tmp_path / "fix.toml"
    path.write_text(text)
    store = tmp_path / "fix.sqlite"
    code = main(["study", str(path), "--store", str(store), "--quiet", "--no-report"])
    out = capsys.readouterr().out
    with Store(str(store), readonly=True) as s:
        return code, out, {(r.params["T"], r.params["rows"]): r for r in s.rows()}


def test_row_length_below_one_is_stored_with_its_fix(tmp_path, capsys):
    """rows = 3 at T = 2 makes row_length T - rows + 1 = 0: stored invalid with the point, the key and the fix
    (raise T or lower rows, or a where condition that leaves such points out); no --retry-failed hint.
    rows = 2 at T = 2 is OR_2 of two bits: ADV± = sqrt(2) (common knowledge)."""
    code, out, rows = _study_rows(tmp_path, capsys, FIX_STUDY.format(row_length='"T - rows + 1"'))
    assert code == 2 and "--retry-failed" not in out
    msg = rows[2, 3].message
    assert rows[2, 3].status == "invalid" and "\n" not in msg
    assert msg.startswith(f"{tmp_path / 'fix.toml'} [grid point T=2, rows=3]: [instance] row_length = "
                          '"T - rows + 1" evaluates to 0, must be >= 1; fix: raise T or lower rows, or leave such '
                          'points out of the grid with [grid] where = "T - rows + 1 >= 1"')
    assert msg in out
    assert rows[2, 2].success and abs(rows[2, 2].lower - 2 ** 0.5) < 1e-5


def test_budget_below_the_least_sum_is_stored_with_its_fix(tmp_path, capsys):
    """Three rows each need time 1 (k_i >= 1), so T = 2 allows no profile: found when the point is built
    (in the worker), stored invalid with 'fix: raise T or lower rows'."""
    code, out, rows = _study_rows(tmp_path, capsys, FIX_STUDY.format(row_length="1"))
    assert code == 2 and "--retry-failed" not in out
    msg = rows[2, 3].message
    assert rows[2, 3].status == "invalid" and "allows no time profile" in msg
    assert msg.endswith("; fix: raise T or lower rows")
    assert rows[2, 2].success


def test_solve_names_the_point_and_other_points_do_not_matter(tmp_path, capsys):
    """`solve FILE --set T=2` names the grid point, the key and the value in one line (exit 2);
    `solve FILE --set T=4` of the same file works although its grid point T=2 is invalid:
    with row length 2 the only profile at T = 4 is (2, 2), OR_2 of two bits, ADV± = sqrt(2) (common knowledge)."""
    path = tmp_path / "st.toml"
    path.write_text(STUDY)
    code = main(["solve", str(path), "--set", "T=2", "--json"])
    out = capsys.readouterr().out
    assert code == 2 and 'st.toml [grid point T=2]: [instance] inner[1].position_search = "T - 2" evaluates to 0' \
        in json.loads(out)["error"]
    code = main(["solve", str(path), "--set", "T=4", "--solver", "CLARABEL", "--method", "dense", "--json"])
    out = capsys.readouterr().out
    assert code == 0 and abs(json.loads(out)["lower"] - 2 ** 0.5) < 1e-5
