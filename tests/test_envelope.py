"""The envelope series E(T) = max over a grid parameter, from a real study of OR of position-search rows."""

import textwrap

import pytest

from advbound.errors import InvalidInstanceError
from advbound.studies.report import write_report
from advbound.studies.report_series import collect_series
from advbound.studies.store import Store
from advbound.studies.study import load_study, run_study

STUDY = textwrap.dedent("""
    [instance]
    name = "env"
    outer = "or"
    rows = "rows"
    inner = "position_search"
    row_length = "T - rows + 1"
    time = "sqrt"
    budget = { sum_squares = "T" }
    max_ones = 1

    [grid]
    rows = [2, 3, 4]
    T = [5, 6, 7]

    [study]
    growth = "T"
    series = "rows"
    envelope = "rows"
    bootstrap = 10
    """)


@pytest.fixture(scope="module")
def envelope_store(tmp_path_factory):
    d = tmp_path_factory.mktemp("env")
    p = d / "env.toml"
    p.write_text(STUDY + f'store = "{d / "env.sqlite"}"\ncertificates = "{d / "certs"}"\n')
    study = load_study(p)
    run = run_study(study)
    assert (run.failed, run.invalid, run.solved) == (0, 0, 9)
    return study


def test_envelope_is_the_maximum_over_rows(envelope_store):
    """At each T the envelope is the largest verified lower bound over rows = 2, 3, 4, with its arg-max."""
    with Store(envelope_store.store, readonly=True) as st:
        series = collect_series(st)
    per_n = {s.key: s for s in series if not s.envelope}
    env = next(s for s in series if s.envelope)
    assert env.label == "general, envelope over rows" and set(per_n) == {2, 3, 4}
    for k, T in enumerate(env.T):
        values = {n: dict(zip(s.T, s.lower))[T] for n, s in per_n.items()}
        best = max(values, key=values.get)
        assert env.lower[k] == values[best] and env.argmax[k] == best
        assert env.upper[k] == max(dict(zip(s.T, s.upper))[T] for s in per_n.values())
        assert env.at_edge[k] == (best in (2, 4))


def test_report_names_the_best_rows(envelope_store, tmp_path):
    """The summary has an envelope table with a 'best rows' column and says where the best is at an edge."""
    files = write_report(envelope_store.store, tmp_path / "rep")
    text = (tmp_path / "rep" / "summary.md").read_text()
    assert "### general, envelope over rows" in text and "| T | best rows |" in text
    assert files is not None


def test_envelope_must_be_a_grid_parameter(tmp_path):
    """envelope names a [grid] parameter, or the study file is refused with one line."""
    p = tmp_path / "bad.toml"
    p.write_text(STUDY.replace('envelope = "rows"', 'envelope = "n"'))
    with pytest.raises(InvalidInstanceError, match="envelope = 'n' is not a \\[grid\\] parameter"):
        load_study(p)
