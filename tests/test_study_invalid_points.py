"""A study whose grid has a point the instance cannot build stores it as invalid and computes the rest."""
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
