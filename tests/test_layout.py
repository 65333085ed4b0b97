"""The package layout: stages import only earlier stages, and the evidence never needs a solver.

The stage order is the one the package docstring and DEVELOPERS.md state:
vocabulary → functions → evidence → programs → studies → cli.  These tests read the
source with :mod:`ast`, so an import inside a function counts as much as one at the top.
"""

import ast
import pathlib
import subprocess
import sys

import pytest

PACKAGE = pathlib.Path(__file__).resolve().parent.parent / "advbound"
TOOL = PACKAGE.parent / "tools" / "recheck_certificate.py"

#: Modules every stage may import, and which import no stage themselves.
VOCABULARY = ("errors", "status", "quantities", "result")
STAGES = ("functions", "evidence", "programs", "studies", "cli")
#: The longest a module (in lines) or a function (in lines, docstring included) may grow.
MODULE_LINES, FUNCTION_LINES = 700, 150


def _rank(dotted: str) -> int | None:
    """Stage rank of a module name under ``advbound`` (0 = vocabulary), None for the package root."""
    parts = dotted.split(".")
    if parts[0] != "advbound" or len(parts) == 1:
        return None
    if parts[1] in VOCABULARY:
        return 0
    if parts[1] in STAGES:
        return 1 + STAGES.index(parts[1])
    raise AssertionError(f"advbound.{parts[1]} belongs to no stage; add it to the layout")


def _lazy_names() -> dict[str, str]:
    """The root package's lazily imported public names and the modules that define them."""
    tree = ast.parse((PACKAGE / "__init__.py").read_text())
    for node in tree.body:
        if isinstance(node, ast.AnnAssign | ast.Assign):
            target = node.target if isinstance(node, ast.AnnAssign) else node.targets[0]
            if getattr(target, "id", None) == "_LAZY":
                return {k.value: "advbound." + v.value for k, v in zip(node.value.keys, node.value.values)}
    raise AssertionError("advbound/__init__.py has no _LAZY table")


def _modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE.parent).with_suffix("")
        name = ".".join(rel.parts)
        yield path, name.removesuffix(".__init__")


def _imports(path: pathlib.Path):
    """Every module name ``path`` imports, with the line, resolving ``from advbound import NAME``."""
    lazy = _lazy_names()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield alias.name, node.lineno
        elif isinstance(node, ast.ImportFrom):
            assert node.level == 0, f"{path}:{node.lineno}: relative import; the package uses absolute imports"
            for alias in node.names:
                if node.module == "advbound":
                    is_module = (PACKAGE / f"{alias.name}.py").exists() or (PACKAGE / alias.name).is_dir()
                    yield lazy.get(alias.name, f"advbound.{alias.name}" if is_module else "advbound"), node.lineno
                else:
                    yield node.module, node.lineno


def test_every_module_belongs_to_a_stage():
    """No module sits loose in the package root besides the vocabulary and the entry points."""
    loose = {p.stem for p in PACKAGE.glob("*.py")} - set(VOCABULARY) - {"__init__", "__main__"}
    assert not loose, f"modules outside the stages: {sorted(loose)}"
    folders = {p.name for p in PACKAGE.iterdir() if p.is_dir() and p.name != "__pycache__"}
    assert folders == set(STAGES)


@pytest.mark.parametrize("path,name", list(_modules()), ids=lambda v: str(v).rsplit("advbound/", 1)[-1])
def test_imports_point_backwards(path, name):
    """A module imports only its own stage, earlier stages and the vocabulary."""
    if name in ("advbound", "advbound.__main__"):
        return  # the curated root and ``python -m advbound`` are the two entry points
    own = _rank(name)
    for target, line in _imports(path):
        rank = _rank(target) if target.startswith("advbound") else None
        if rank is None:
            continue
        assert rank <= own, f"{name} (line {line}) imports the later stage {target}"
        if own == 0:
            assert rank == 0, f"vocabulary module {name} imports {target}"


def test_evidence_never_imports_cvxpy():
    """No evidence module names cvxpy, and importing all of them leaves cvxpy unloaded."""
    evidence = [name for path, name in _modules() if name.startswith("advbound.evidence")]
    for path, name in _modules():
        if name in evidence:
            assert all(not t.startswith("cvxpy") for t, _ in _imports(path)), f"{name} imports cvxpy"
    code = ("import sys\n" + "".join(f"import {m}\n" for m in evidence)
            + "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('cvxpy', 'clarabel', 'scs'))\n"
            + "print(','.join(bad))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"importing advbound.evidence loaded {out.stdout.strip()}"


def test_recheck_tool_imports_neither_advbound_nor_cvxpy():
    """The standalone re-checker stands apart from the package and from every solver."""
    names = {t.split(".")[0] for t, _ in _imports(TOOL)}
    assert "advbound" not in names and "cvxpy" not in names
@pytest.mark.parametrize("path,name", list(_modules()), ids=lambda v: str(v).rsplit("advbound/", 1)[-1])
def test_modules_and_functions_fit_on_a_screen_or_two(path, name):
    """Each module stays under MODULE_LINES lines and each function under FUNCTION_LINES."""
    text = path.read_text()
    assert text.count("\n") <= MODULE_LINES, f"{name} has {text.count(chr(10))} lines; split it by job"
    for node in ast.walk(ast.parse(text)):
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            length = node.end_lineno - node.lineno + 1
            assert length <= FUNCTION_LINES, f"{name}.{node.name} has {length} lines; split it into named steps"
