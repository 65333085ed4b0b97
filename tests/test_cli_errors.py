"""The top-level error handling of ``advbound`` (advbound/cli/main.py) and the up-front checks of solve, gamma and exact.

Every class of failure is driven through :func:`advbound.cli.main.main` (or a real process where a
closed pipe is needed) and checked for its exit code, exactly one stderr line, no traceback,
and with ``--json`` exactly one JSON object on stdout.
"""

import errno
import json
import os
import subprocess
import sys
import tempfile

import pytest

import advbound.cli.inspect
import advbound.programs.solve
from advbound.functions.builders import majority_function, or_function, parity_function
from advbound.cli import main, os_error_message
from advbound.errors import InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.functions.sizing import (MEMORY_LIMIT_ENV, TooLargeError, check_memory, exact_estimate, memory_budget,
                                       solve_estimate)

ROOT = os.path.join(os.path.dirname(__file__), "..")


@pytest.fixture
def or3(tmp_path):
    """OR_3 as a table file (ADV±(OR_3) = sqrt(3), common knowledge)."""
    p = tmp_path / "or3.tbl"
    p.write_text("".join(f"{i:03b} {int(i > 0)}\n" for i in range(8)))
    return p


def run(capsys, *argv):
    """(exit code, stdout, stderr lines) of ``advbound ARGV``."""
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err.strip().splitlines()


def one_error(lines, prefix="advbound: error: "):
    """The single stderr line, checked to start with ``prefix`` and to carry no traceback."""
    assert len(lines) == 1, lines
    assert lines[0].startswith(prefix) and "Traceback" not in lines[0]
    return lines[0]


def json_error(out):
    """The single JSON error object on stdout (nothing else may be there)."""
    rows = out.strip().splitlines()
    assert len(rows) == 1, out
    d = json.loads(rows[0])
    assert set(d) == {"error", "exit"} and "\n" not in d["error"]
    return d


def fake_run(exc, printed=""):
    """A command handler that prints ``printed`` and raises ``exc``."""
    def _run(args):
        if printed:
            print(printed)
        raise exc
    return _run


# ---------------------------------------------------------------------------------------------
# OS errors
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("exc,expected", [
    (FileNotFoundError(errno.ENOENT, "No such file or directory", "{tmp}/f.tbl"), "no such file: {tmp}/f.tbl"),
    (FileNotFoundError(errno.ENOENT, "No such file or directory", "{tmp}/nodir/f.tbl"),
     "no such folder: {tmp}/nodir (for {tmp}/nodir/f.tbl)"),
    (PermissionError(errno.EACCES, "Permission denied", "{tmp}/f.tbl"), "permission denied: {tmp}/f.tbl"),
    (OSError(errno.EROFS, "Read-only file system", "{tmp}/out.npz"), "read-only file system: cannot write "
                                                                     "{tmp}/out.npz"),
    (IsADirectoryError(errno.EISDIR, "Is a directory", "{tmp}"), "{tmp} is a folder, not a file"),
    (FileExistsError(errno.EEXIST, "File exists", "{tmp}/f.tbl"), "{tmp}/f.tbl already exists"),
    (OSError(errno.ENOSPC, "No space left on device", "{tmp}/out.npz"),
     "no space left on the device holding {tmp}/out.npz"),
    (OSError(errno.ENOSPC, "No space left on device"), "No space left on device (OS error 28)"),
])
def test_os_errors_one_line(tmp_path, capsys, monkeypatch, exc, expected):
    """Each OSError class raised by a command becomes one 'advbound: error:' line naming path and problem, exit 2."""
    tmp = str(tmp_path)
    if exc.filename is not None:
        exc = type(exc)(exc.errno, exc.strerror, exc.filename.format(tmp=tmp))
    monkeypatch.setattr(advbound.cli.inspect, "run", fake_run(exc))
    code, out, lines = run(capsys, "inspect", "x.tbl")
    assert code == 2 and out == ""
    assert one_error(lines) == "advbound: error: " + expected.format(tmp=tmp)


def test_not_a_directory_names_the_file(tmp_path):
    """ENOTDIR names the path component that is a file, not a folder."""
    f = tmp_path / "somefile"
    f.write_text("x")
    msg = os_error_message(NotADirectoryError(errno.ENOTDIR, "Not a directory", str(f / "cert.npz")))
    assert msg == f"{f} is not a folder (in {f / 'cert.npz'})"


def test_real_os_error_through_a_command(tmp_path, capsys):
    """A real OSError from a command (inspect on a folder, missing folder) is one line with exit 2."""
    for target, needle in [(tmp_path, str(tmp_path)), (tmp_path / "none" / "f.tbl", "none")]:
        code, out, lines = run(capsys, "inspect", target)
        assert code == 2 and out == "" and needle in one_error(lines)


# ---------------------------------------------------------------------------------------------
# Internal errors, SystemExit, KeyboardInterrupt
# ---------------------------------------------------------------------------------------------
def test_internal_error_exit_3(capsys, monkeypatch):
    """An unexpected exception is an internal error: exit 3, one line naming type and message and the -v hint."""
    monkeypatch.setattr(advbound.cli.inspect, "run", fake_run(RuntimeError("boom\nsecond line")))
    code, out, lines = run(capsys, "inspect", "x.tbl")
    assert code == 3 and out == ""
    line = one_error(lines, "advbound: internal error: ")
    assert line == "advbound: internal error: RuntimeError: boom second line; run with -v for the traceback"


@pytest.mark.parametrize("argv", [["-v", "inspect", "x.tbl"], ["inspect", "x.tbl", "-v"]])
def test_internal_error_verbose_traceback(capsys, monkeypatch, argv):
    """With -v (before or after the subcommand) the traceback is printed, then the one line, exit 3."""
    monkeypatch.setattr(advbound.cli.inspect, "run", fake_run(RuntimeError("boom")))
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 3 and "Traceback (most recent call last)" in err and "RuntimeError: boom" in err
    assert err.strip().splitlines()[-1] == "advbound: internal error: RuntimeError: boom"


def test_internal_error_json(capsys, monkeypatch):
    """--json: an internal error is one JSON object {"error", "exit": 3}; what was printed before is dropped."""
    monkeypatch.setattr(advbound.cli.inspect, "run", fake_run(ValueError("bad"), printed='{"partial": 1}'))
    code, out, lines = run(capsys, "inspect", "x.tbl", "--json")
    d = json_error(out)
    assert code == 3 and d["exit"] == 3 and d["error"].startswith("internal error: ValueError: bad")
    assert one_error(lines, "advbound: internal error: ")


@pytest.mark.parametrize("code_given", [0, 2, "message"])
def test_system_exit_in_a_command_is_internal(capsys, monkeypatch, code_given):
    """A sys.exit escaping a command (even sys.exit(0)) is not taken for success or bad input: exit 3."""
    monkeypatch.setattr(advbound.cli.inspect, "run", fake_run(SystemExit(code_given)))
    code, out, lines = run(capsys, "inspect", "x.tbl")
    assert code == 3 and "SystemExit" in one_error(lines, "advbound: internal error: ")


def test_keyboard_interrupt(capsys, monkeypatch):
    """Ctrl-C gives exit 130 and one line; with --json also the error object."""
    monkeypatch.setattr(advbound.cli.inspect, "run", fake_run(KeyboardInterrupt()))
    code, out, lines = run(capsys, "inspect", "x.tbl")
    assert code == 130 and out == "" and lines == ["advbound: interrupted; completed results are kept"]
    code, out, lines = run(capsys, "inspect", "x.tbl", "--json")
    assert code == 130 and json_error(out)["exit"] == 130


def test_memory_error_is_bad_input(capsys, monkeypatch):
    """MemoryError is reported in one line with exit 2 and points at the size estimate."""
    monkeypatch.setattr(advbound.cli.inspect, "run", fake_run(MemoryError()))
    code, out, lines = run(capsys, "inspect", "x.tbl")
    assert code == 2 and "out of memory" in one_error(lines)


# ---------------------------------------------------------------------------------------------
# --json errors and argparse errors
# ---------------------------------------------------------------------------------------------
def test_json_error_object_for_bad_input(tmp_path, capsys, monkeypatch):
    """--json: bad input prints exactly {"error": <the line>, "exit": 2}; the line also goes to stderr."""
    monkeypatch.setattr(advbound.cli.inspect, "run",
                        fake_run(InvalidFunctionError("f.tbl:3: bad line"), printed="half a result"))
    code, out, lines = run(capsys, "inspect", "x.tbl", "--json")
    assert code == 2 and json_error(out) == {"error": "f.tbl:3: bad line", "exit": 2}
    assert one_error(lines) == "advbound: error: f.tbl:3: bad line"


def test_json_error_object_real_command(tmp_path, capsys):
    """solve --json on a folder: one JSON error object naming the folder, exit 2."""
    code, out, lines = run(capsys, "solve", tmp_path, "--json")
    d = json_error(out)
    assert code == 2 and d["exit"] == 2 and str(tmp_path) in d["error"]


@pytest.mark.parametrize("argv", [["solve", "f.tbl", "--json", "--bogus"], ["exact", "f.tbl", "--json"],
                                  ["nosuchcommand", "--json"]])
def test_argparse_error_json(capsys, argv):
    """A command line argparse rejects, containing --json, gives one JSON object and exit 2."""
    code, out, lines = run(capsys, *argv)
    assert code == 2 and json_error(out)["exit"] == 2 and one_error(lines)


def test_argparse_error_plain(capsys):
    """Without --json an argparse error is one stderr line, nothing on stdout, exit 2 (returned, not raised)."""
    code, out, lines = run(capsys, "solve", "f.tbl", "--bogus")
    assert code == 2 and out == "" and "unrecognized arguments: --bogus" in one_error(lines)


def test_version_returns_0(capsys):
    """--version prints the version and main returns 0."""
    code, out, _ = run(capsys, "--version")
    assert code == 0 and out.startswith("advbound ")


def test_json_success_untouched(or3, capsys):
    """A successful --json command still prints its own single JSON object (inspect of OR_3: 8 inputs)."""
    code, out, lines = run(capsys, "inspect", or3, "--json")
    assert code == 0 and lines == [] and json.loads(out)["domain_size"] == 8


# ---------------------------------------------------------------------------------------------
# Closed standard output
# ---------------------------------------------------------------------------------------------
def _advbound(*argv):
    return [sys.executable, "-m", "advbound", *[str(a) for a in argv]]


def test_closed_pipe_quiet(or3):
    """Output into a pipe whose reader is gone: no traceback, nothing on stderr, exit 141 (128 + SIGPIPE)."""
    p = subprocess.Popen(_advbound("inspect", or3, "--json"), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    p.stdout.close()  # the reader goes away before the command prints
    err = p.stderr.read().decode()
    p.stderr.close()
    assert p.wait(timeout=120) == 141 and err == ""


def test_pipe_into_head(or3):
    """`advbound inspect F | head -c 10`: ten bytes arrive and stderr has no traceback."""
    cmd = " ".join(_advbound("inspect", or3)) + " | head -c 10"
    r = subprocess.run(cmd, shell=True, capture_output=True, text=True, timeout=120)
    assert len(r.stdout) == 10 and r.stdout.startswith("file: ") and r.stderr == ""


def test_stdout_closed_help():
    """`advbound --help` with the reader of its pipe gone prints nothing on stderr (argparse itself drops the
    failed write, so the exit code is 0 or 141)."""
    p = subprocess.Popen(_advbound("--help"), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    p.stdout.close()
    err = p.stderr.read().decode()
    p.stderr.close()
    assert p.wait(timeout=120) in (0, 141) and err == ""


# ---------------------------------------------------------------------------------------------
# --save-certificate checked before solving
# ---------------------------------------------------------------------------------------------
@pytest.fixture
def no_solve(monkeypatch):
    """Make any solve fail the test: the path check must come first."""
    def _fail(*a, **k):
        raise AssertionError("solve was called before the output path was checked")
    monkeypatch.setattr(advbound.programs.solve, "solve", _fail)


@pytest.fixture
def read_only_folder(tmp_path):
    """A folder in which no file can be created, also for root (chmod does not stop root)."""
    if os.geteuid() != 0:
        d = tmp_path / "ro"
        d.mkdir()
        d.chmod(0o500)
        yield d
        d.chmod(0o700)
        return
    for cand in ("/sys", "/proc/sys", "/proc"):
        try:
            fd, name = tempfile.mkstemp(dir=cand)
        except OSError:
            yield cand
            return
        os.close(fd)
        os.unlink(name)
    pytest.skip("no folder that root cannot write to")


def test_save_certificate_read_only(or3, capsys, no_solve, read_only_folder):
    """--save-certificate into a folder where nothing can be created: refused before solving, exit 2."""
    target = os.path.join(str(read_only_folder), "cert.npz")
    code, out, lines = run(capsys, "solve", or3, "--save-certificate", target)
    assert code == 2 and out == "" and f"cannot create files in {read_only_folder}" in one_error(lines)


@pytest.mark.parametrize("make,needle", [
    (lambda t: t, "is a folder"),
    (lambda t: t / "missing" / "deeper" / "cert.npz", "folder {t}/missing does not exist"),
    (lambda t: t / "or3.tbl" / "cert.npz", "{t}/or3.tbl is a file, not a folder"),
    (lambda t: t / "or3.tbl", "already exists (pass --force to overwrite it)"),
])
@pytest.mark.parametrize("command", ["solve", "gamma"])
def test_save_certificate_bad_paths(or3, tmp_path, capsys, no_solve, make, needle, command):
    """A folder, a missing folder, a file used as a folder and an existing file are refused up front."""
    argv = [command, or3, "--save-certificate", make(tmp_path)]
    if command == "gamma":
        argv += ["--callable", f"{tmp_path / 'never.py'}:g"]  # never loaded: the path check comes first
    code, out, lines = run(capsys, *argv)
    assert code == 2 and out == "" and needle.format(t=tmp_path) in one_error(lines)


def test_save_certificate_force(or3, tmp_path, capsys):
    """--force replaces an existing certificate; the new file verifies to sqrt(3) (OR_3, common knowledge)."""
    from advbound.evidence.certificate import load_certificate
    from advbound.evidence.verify import verify_certificate

    cert = tmp_path / "c.npz"
    cert.write_text("old")
    assert main(["solve", str(or3), "--solver", "CLARABEL", "--save-certificate", str(cert), "--force"]) == 0
    rep = verify_certificate(load_certificate(cert))
    assert rep.passed and abs(rep.lower - 3 ** 0.5) < 1e-6


# ---------------------------------------------------------------------------------------------
# Oversized work refused up front
# ---------------------------------------------------------------------------------------------
def test_memory_budget_reads_the_machine(monkeypatch):
    """The budget is positive and at most the machine's total memory; the environment variable caps it."""
    monkeypatch.delenv(MEMORY_LIMIT_ENV, raising=False)
    b = memory_budget()
    if b["available"] is None:
        pytest.skip("no memory information on this system")
    assert 0 < b["available"] and (b["total"] is None or b["available"] <= b["total"])
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "1M")
    b = memory_budget()
    assert b["available"] == 1 << 20 and MEMORY_LIMIT_ENV in b["source"]


def test_bad_memory_limit_env(or3, capsys, monkeypatch):
    """A malformed ADVBOUND_MEMORY_LIMIT is bad input naming the variable, exit 2."""
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "lots")
    code, out, lines = run(capsys, "solve", or3)
    assert code == 2 and MEMORY_LIMIT_ENV in one_error(lines)


def test_check_memory_refuses_and_allows():
    """check_memory raises TooLargeError past the budget with estimate and override, and passes with allow_large."""
    est = {"what": "the job", "solver": "SCS", "memory_bytes": 3 << 30, "seconds": 120.0}
    with pytest.raises(TooLargeError, match=r"the job with SCS needs about 3.0 GB .* 1.0 GB is available .* "
                                            r"--allow-large"):
        check_memory(est, budget=1 << 30)
    check_memory(est, budget=1 << 30, allow_large=True)
    check_memory(est, budget=4 << 30)


def test_solve_refused_before_building(or3, capsys, monkeypatch):
    """solve past the budget: exit 2, one line with the estimate and --allow-large; the SDP is never built."""
    import advbound.programs.sdp

    def _no_build(*a, **k):
        raise AssertionError("the SDP was built")

    monkeypatch.setattr(advbound.programs.sdp, "formulate", _no_build)
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "100")
    code, out, lines = run(capsys, "solve", or3, "--method", "dense")
    line = one_error(lines)
    assert code == 2 and "needs about" in line and "100 B is available" in line and "--allow-large" in line
    assert "--method factored" in line  # OR_3 has two output values


def test_solve_allow_large(or3, capsys, monkeypatch):
    """--allow-large lifts the refusal: OR_3 solves to sqrt(3) (common knowledge) under a 100-byte budget."""
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "100")
    code, out, _ = run(capsys, "solve", or3, "--allow-large", "--solver", "CLARABEL", "--json")
    assert code == 0 and abs(json.loads(out)["lower"] - 3 ** 0.5) < 1e-6


def test_library_solve_refuses(monkeypatch):
    """The library solve() refuses a dense program past the budget too (allow_large=False is the default)."""
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "100")
    with pytest.raises(TooLargeError, match="allow_large=True"):
        advbound.programs.solve.solve(or_function(2), method="dense")


def test_solve_estimate_grows_with_solver():
    """The interior-point estimate adds 8 (s(s+1)/2)^2 bytes per LMI of size s to the SCS one (module formula)."""
    f = parity_function(5)
    scs, ipm = solve_estimate(f, solver="SCS"), solve_estimate(f, solver="CLARABEL")
    assert ipm["memory_bytes"] - scs["memory_bytes"] == 5 * 8 * (32 * 33 // 2) ** 2


@pytest.mark.parametrize("f,t", [
    (majority_function(5), 2), (or_function(4), 2), (parity_function(4), 3),
    (PartialFunction.from_pairs("012", [(a + b, int(a == b)) for a in "012" for b in "012"]), 2),
])
def test_exact_estimate_matches_program(f, t):
    """Without symmetry the estimate's variable and equality counts are those of formulate_exact."""
    from advbound.programs.exact import formulate_exact

    e = exact_estimate(f, t, use_symmetry=False)
    z = formulate_exact(f, t, use_symmetry=False).sizes
    assert (e["variables"], e["equalities"], e["face_dims"]) == (z["variables"], z["equalities"], z["face_dims"])


def test_exact_queries_refused(or3, capsys, monkeypatch):
    """exact --queries past the budget is refused up front with the estimate and --allow-large, exit 2."""
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "100")
    code, out, lines = run(capsys, "exact", or3, "--queries", "2", "--no-symmetry")
    line = one_error(lines)
    assert code == 2 and "exact 2-query program" in line and "--allow-large" in line


def test_exact_error_search_capped(or3, capsys, monkeypatch):
    """exact --error stops at the largest t that fits and says so (OR_3 needs 3 queries exactly: not reached)."""
    f = or_function(3)
    limit = exact_estimate(f, 1, use_symmetry=False)["memory_bytes"]
    assert exact_estimate(f, 2, use_symmetry=False)["memory_bytes"] > limit
    monkeypatch.setenv(MEMORY_LIMIT_ENV, str(limit))
    code, out, lines = run(capsys, "exact", or3, "--error", "0", "--no-symmetry", "--json")
    d = json.loads(out)
    assert code == 1 and d["reached"] is False and d["queries"] == 1 and d["memory_cap"]["queries"] == 1
    assert len(lines) == 1 and lines[0].startswith("advbound: search stopped at t = 1")


def test_gamma_callable_refused_before_calls(or3, tmp_path, capsys, monkeypatch):
    """gamma --callable past the budget is refused before the callable is called once."""
    mod = tmp_path / "g.py"
    mod.write_text("def g(x, y):\n    raise AssertionError('called')\n")
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "100")
    code, out, lines = run(capsys, "gamma", or3, "--callable", f"{mod}:g")
    line = one_error(lines)
    assert code == 2 and "dense Γ from a callable (8 inputs, 64 calls)" in line and "--allow-large" in line


def test_inspect_shows_estimates(or3, capsys):
    """inspect --json carries both solver estimates and the machine's available memory."""
    code, out, _ = run(capsys, "inspect", or3, "--json")
    d = json.loads(out)
    assert set(d["solve_estimates"]) == {"SCS", "CLARABEL"} and "available" in d["memory_available"]
    assert d["solve_estimates"]["CLARABEL"]["memory_bytes"] > d["solve_estimates"]["SCS"]["memory_bytes"]
