"""LaTeX snippets for a proof draft, built from certificate files.

This module owns :func:`export_latex`: one booktabs table row per certificate
(description, ``|D|``, the rigorous lower bound rounded down, the float upper bound
when a dual witness verified), one macro per number (``\\advLowerA``, ``\\advUpperA``,
``\\advSizeA``, then ``B``, ..., ``Z``, ``AA``, ...: letters only), a sentence saying
what was verified and how, the exact rational of each bound in a comment, and the
SHA-256 of each certificate file.  The snippet needs ``\\usepackage{booktabs}``.
Typical call::

    tex = export_latex(["or4.npz", "or9.npz"])          # runs the rigorous check on each file
    tex = export_latex(paths, against="instances/or3_sum_T.toml")   # also names each function

Every file must pass the acceptance rule (:func:`advbound.evidence.certificate.load_certificate`),
or :class:`~advbound.errors.CertificateError` is raised before anything is checked.

Binding a number to its function: :func:`match_instance` checks that a certificate's
function is exactly the function an instance file (at a grid point) or table file
defines (:func:`advbound.evidence.verify.function_difference`) and returns the instance's spec
hash (:func:`advbound.functions.instance.spec_key`).  With ``against=`` the snippet writes that
hash beside each certificate's SHA-256; without it, a ``spec_key`` recorded in the
file's metadata is written and marked as not checked.

>>> macro_suffix(0), macro_suffix(25), macro_suffix(26), macro_suffix(27)
('A', 'Z', 'AA', 'AB')
"""

from __future__ import annotations

import dataclasses
import hashlib
import os

import numpy as np

from advbound.evidence.certificate import Certificate
from advbound.evidence.orbitcert import load_any_certificate
from advbound.errors import CertificateError, InvalidInstanceError

__all__ = ["ExportRow", "InstanceMatch", "export_latex", "export_rows", "render_latex", "match_instance",
           "macro_suffix", "latex_escape", "sha256_file"]

_ESCAPES = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
            "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}"}


def macro_suffix(i: int) -> str:
    """Letters-only suffix for the ``i``-th certificate (0 -> A, 25 -> Z, 26 -> AA)."""
    s = ""
    i += 1
    while i:
        i, r = divmod(i - 1, 26)
        s = chr(65 + r) + s
    return s


def latex_escape(text: str) -> str:
    r"""Escape LaTeX special characters.

    >>> latex_escape("OR_3 & 50%")
    'OR\\_3 \\& 50\\%'
    """
    return "".join(_ESCAPES.get(ch, ch) for ch in str(text))


def sha256_file(path) -> str:
    """Hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


#: Grid points of an instance file tried by :func:`match_instance` when no point is named.
MAX_MATCH_POINTS = 1000


@dataclasses.dataclass(frozen=True)
class InstanceMatch:
    """Outcome of :func:`match_instance`.

    Attributes
    ----------
    instance : str
        The instance or table file.
    params : dict or None
        The grid point compared (``None`` for a table file; ``{}`` without a grid).
    spec_key : str or None
        :func:`advbound.functions.instance.spec_key` of that point (``None`` for a table file).
    table_sha256 : str or None
        SHA-256 of a table file's bytes (``None`` for an instance file).
    matched : bool
        True when the certificate's function is exactly the instance's (or, when ``restriction``,
        the instance's function restricted to part of its domain).
    message : str
        ``"same function"``, ``"a restriction of the function (k of N inputs)"``, or the first
        difference (one line).
    restriction : bool
        True when the match is a restriction only: the certificate's lower bound holds for the
        instance, its upper bound only for the restriction.
    """

    instance: str
    params: dict | None
    spec_key: str | None
    table_sha256: str | None
    matched: bool
    message: str
    restriction: bool = False

    def to_dict(self) -> dict:
        """JSON-ready copy."""
        return dataclasses.asdict(self)

    def label(self) -> str:
        """``"f.toml [T=6]"``: the instance and grid point, for messages."""
        if not self.params:
            return self.instance
        return f"{self.instance} [{', '.join(f'{k}={v}' for k, v in self.params.items())}]"


def _candidates(spec, params: dict, limit: int) -> list[dict]:
    """Grid points to compare: ``params`` when it names every grid parameter, else the grid points
    agreeing with it (the values of ``params`` replacing the grid's), at most ``limit``."""
    from advbound.functions.instance import iter_grid_points

    unknown = [k for k in params if k not in spec.grid]
    if unknown:
        known = ", ".join(spec.grid) or "no parameters"
        raise InvalidInstanceError(f"{spec.path}: unknown parameter {unknown[0]!r} (the grid defines {known})")
    if all(k in params for k in spec.grid):
        return [dict(params)]
    seen, out = set(), []
    for point in iter_grid_points(spec):
        p = {k: params.get(k, v) for k, v in point.items()}
        key = tuple(p.items())
        if key in seen:
            continue
        seen.add(key)
        out.append(p)
        if len(out) > limit:
            raise InvalidInstanceError(f"{spec.path}: more than {limit} grid points to compare; name the point "
                                       "with --set")
    return out


def match_instance(cert, path, params: dict | None = None, *, limit: int = MAX_MATCH_POINTS,
                   restriction: bool = False) -> InstanceMatch:
    """Check that ``cert`` is a certificate for the function ``path`` defines.

    With ``restriction`` a certificate whose function is the instance's restricted to part of its
    domain matches too (``InstanceMatch.restriction``), when it is not the same function.

    Parameters
    ----------
    cert : Certificate
        An accepted certificate.
    path : str or path-like
        An instance file (``.toml``, a study file included) or a table file.
    params : dict, optional
        Grid parameters (``--set``).  When they name every grid parameter that point is compared;
        otherwise every grid point agreeing with them is tried (at most ``limit``) and the first
        whose function is the certificate's is returned.

    Returns
    -------
    InstanceMatch
        ``matched`` False with the first difference when the functions differ (a failed check).

    Raises
    ------
    InvalidInstanceError, InvalidFunctionError
        When the file cannot be read or a named grid point cannot be built.
    """
    from advbound.functions.instance import build_instance, load_instance, spec_key
    from advbound.functions.tablefile import read_table
    from advbound.evidence.verify import function_difference

    path = os.fspath(path)
    params = dict(params or {})
    if not path.endswith(".toml"):
        if params:
            raise InvalidInstanceError(f"{path}: --set given for a table file (it has no parameters)")
        diff = function_difference(cert, read_table(path))
        return InstanceMatch(path, None, None, sha256_file(path), diff is None, diff or "same function")
    spec = load_instance(path)
    points = _candidates(spec, params, limit)
    if len(points) == 1:
        f = build_instance(spec, points[0])
        diff = function_difference(cert, f)
        if diff is not None and restriction and function_difference(cert, f, restriction=True) is None:
            return InstanceMatch(path, points[0], spec_key(spec, points[0]), None, True,
                                 f"a restriction of the function ({len(cert.inputs)} of {len(f.inputs)} inputs)",
                                 restriction=True)
        return InstanceMatch(path, points[0], spec_key(spec, points[0]), None, diff is None, diff or "same function")
    for p in points:
        try:  # a grid point with more inputs than the certificate cannot match: refused before building
            f = build_instance(spec, p, max_inputs=None if restriction else len(cert.inputs))
        except InvalidInstanceError:
            continue
        if function_difference(cert, f) is None:
            return InstanceMatch(path, p, spec_key(spec, p), None, True, "same function")
        if restriction and function_difference(cert, f, restriction=True) is None:
            return InstanceMatch(path, p, spec_key(spec, p), None, True,
                                 f"a restriction of the function ({len(cert.inputs)} of {len(f.inputs)} inputs)",
                                 restriction=True)
    return InstanceMatch(path, None, None, None, False,
                         f"the certificate's function is none of the {len(points)} grid points of {path} "
                         "(name one with --set to see the first difference)")


@dataclasses.dataclass(frozen=True)
class ExportRow:
    """One certificate's numbers for the table (``lower_exact`` as ``"p/q"``, ``None`` when unchecked).

    ``spec_key`` is the instance's spec hash: checked (``spec_checked``) when the row was exported
    ``against`` an instance, else as recorded in the file's metadata; ``instance`` names the matched
    instance and grid point, or says why it did not match.
    """

    path: str
    sha256: str
    description: str
    size: int
    lower: float | None
    lower_exact: str | None
    lower_display: str
    verified: bool | None
    upper: float | None
    method: str
    safety: float | None
    denominator: int | None
    spec_key: str | None = None
    spec_checked: bool = False
    instance: str | None = None
    instance_matched: bool | None = None


def export_rows(paths, *, check: bool = True, digits: int = 4, against=None, params: dict | None = None,
                **rigorous_options) -> list[ExportRow]:
    """Load each certificate and (with ``check``) run :func:`advbound.evidence.rigorous.verify_rigorous` on it.

    Every file is loaded (and so held to the acceptance rule) before any is checked.  With
    ``against`` (an instance or table file, ``params`` its grid parameters) each certificate is
    matched with :func:`match_instance`; a certificate whose function is not the instance's is
    a failed row (``verified`` False, shown as "failed").
    """
    from advbound.evidence.rigorous import floor_decimal, verify_rigorous
    from advbound.evidence.verify import verify_certificate

    certs = [(path, _dense(path, load_any_certificate(path))) for path in paths]
    rows = []
    for path, cert in certs:
        desc = str(cert.metadata.get("description") or os.path.basename(str(path)))
        spec = {"spec_key": cert.metadata.get("spec_key"), "spec_checked": False}
        if against is not None:
            m = match_instance(cert, against, params)
            spec = {"spec_key": m.spec_key, "spec_checked": m.matched, "instance_matched": m.matched,
                    "instance": m.label() if m.matched else f"{m.instance}: {m.message}"}
            if not m.matched:
                rows.append(ExportRow(str(path), sha256_file(path), desc, len(cert.inputs), None, None, "failed",
                                      False, None, "not checked", None, None, **dict(spec, spec_key=None)))
                continue
        fl = verify_certificate(cert)
        upper = fl.upper if fl.passed else None
        if check:
            rep = verify_rigorous(cert, **rigorous_options)
            exact = rep.lower_exact if rep.verified else None
            rows.append(ExportRow(str(path), sha256_file(path), desc, len(cert.inputs),
                                  rep.lower if exact is not None else None,
                                  None if exact is None else f"{exact.numerator}/{exact.denominator}",
                                  floor_decimal(exact, digits) if exact is not None else "failed",
                                  rep.verified, upper, rep.method, rep.safety, rep.denominator, **spec))
        else:
            claimed = cert.metadata.get("claimed_lower")
            shown = f"{float(claimed):.{digits}f}" if claimed is not None else "--"
            rows.append(ExportRow(str(path), sha256_file(path), desc, len(cert.inputs),
                                  None if claimed is None else float(claimed), None, shown, None, upper,
                                  "unchecked", None, None, **spec))
    return rows


def _latex_number(x: float) -> str:
    r"""``1e-06`` -> ``10^{-6}``, ``2.5e-07`` -> ``2.5\times 10^{-7}`` (math mode)."""
    m, e = f"{x:.3e}".split("e")
    m = m.rstrip("0").rstrip(".")
    return f"10^{{{int(e)}}}" if m == "1" else f"{m}\\times 10^{{{int(e)}}}"


def _dense(path, cert):
    """A dense certificate as it is; an orbit certificate expanded to its full Γ (its dual is not carried)."""
    from advbound.evidence.orbitcert import OrbitCertificate
    from advbound.evidence.orbitcheck import DENSE_CHECK_LIMIT, expanded_gamma

    if not isinstance(cert, OrbitCertificate):
        return cert
    if cert.size > DENSE_CHECK_LIMIT:
        raise CertificateError(f"{path}: an orbit certificate of {cert.size} inputs; export expands Γ to "
                               f"|D| x |D| and takes at most {DENSE_CHECK_LIMIT} (use advbound verify)")
    f, G = expanded_gamma(cert)
    keep = {k: cert.metadata[k] for k in ("description", "bound", "claimed_lower", "spec_key") if k in cert.metadata}
    return Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs), G, metadata=keep)


def export_latex(paths, *, check: bool = True, digits: int = 4, against=None, params: dict | None = None,
                 **rigorous_options) -> str:
    """A LaTeX snippet (table, macros, method sentence, hashes) for the certificates at ``paths``.

    With ``check=False`` the rigorous check is skipped, the lower bounds shown are the
    claims stored in the files, and the snippet says so in its text.  ``against`` and
    ``params`` are passed to :func:`export_rows`.
    """
    return render_latex(export_rows(paths, check=check, digits=digits, against=against, params=params,
                                    **rigorous_options), check=check, digits=digits)


def _spec_note(r) -> str:
    """``"  spec <hash> (instance f.toml [T=6], same function)"`` for the comment beside the SHA-256."""
    if r.instance_matched is False:
        return f"  DOES NOT MATCH {r.instance}"
    if not r.spec_key:
        return f"  instance {r.instance} (a table file: no spec hash)" if r.instance else ""
    if r.spec_checked:
        return f"  spec {r.spec_key} (instance {r.instance}, same function)"
    return f"  spec {r.spec_key} (recorded in the file, not checked)"


def render_latex(rows, *, check: bool = True, digits: int = 4) -> str:
    """The snippet for rows from :func:`export_rows`."""
    out = ["% advbound export: adversary lower bounds (needs \\usepackage{booktabs})"]
    for i, r in enumerate(rows):
        sfx = macro_suffix(i)
        out.append(f"% certificate {sfx}: {os.path.basename(r.path)}  sha256 {r.sha256}{_spec_note(r)}")
        if r.lower_exact is not None:
            out.append(f"% exact lower bound {sfx}: {r.lower_exact}")
        out.append(f"\\newcommand{{\\advLower{sfx}}}{{{r.lower_display}}}")
        out.append(f"\\newcommand{{\\advSize{sfx}}}{{{r.size}}}")
        out.append(f"\\newcommand{{\\advUpper{sfx}}}{{{'--' if r.upper is None else f'{r.upper:.{digits}f}'}}}")
    out += ["\\begin{table}[ht]", "\\centering", "\\begin{tabular}{llrrr}", "\\toprule",
            "& Instance & $|D|$ & Lower bound on $\\mathrm{ADV}^{\\pm}$ & Upper bound (float) \\\\", "\\midrule"]
    for i, r in enumerate(rows):
        sfx = macro_suffix(i)
        out.append(f"{sfx} & {latex_escape(r.description)} & \\advSize{sfx} & $\\advLower{sfx}$ & "
                   f"$\\advUpper{sfx}$ \\\\")
    out += ["\\bottomrule", "\\end{tabular}", "", "\\smallskip{\\footnotesize SHA-256 of the certificate files: "
            + "; ".join(f"{macro_suffix(i)}~\\texttt{{{r.sha256[:16]}\\dots}}" for i, r in enumerate(rows))
            + "." + _spec_footnote(rows) + "}"]
    if check:
        ok = all(r.verified for r in rows)
        methods = sorted({r.method for r in rows})
        how = {"ldl": "exact fraction-free $LDL^{\\mathsf T}$ factorisations in rational arithmetic",
               "cholesky": "floating-point Cholesky factorisations with rigorous a-priori rounding-error bounds "
                           "(the criterion of ``Verification of positive definiteness'', 2006)",
               "mixed": "exact $LDL^{\\mathsf T}$ factorisations and verified floating-point Cholesky "
                        "factorisations",
               "residual": "float Cholesky factors rounded to integers whose residuals were computed exactly "
                           "and shown diagonally dominant",
               "zero": "inspection (every constraint matrix is zero)"}
        safeties = sorted({r.safety for r in rows if r.safety is not None})
        caption = ("Lower bounds are rounded down to " + str(digits) + " decimals. Each was verified from its "
                   "certificate file alone: the adversary matrix $\\Gamma$ was rounded to a rational matrix "
                   "that vanishes exactly on pairs of inputs with equal outputs; $\\|\\Gamma\\|$ was bounded "
                   "below by the exact rational Rayleigh quotient $v^{\\mathsf T}\\Gamma v/v^{\\mathsf T}v$ of a "
                   "rational vector $v$; and each $\\|\\Gamma\\circ\\Delta_j\\|$ was bounded above by a rational "
                   "$c_j'$, chosen with safety scaling $1+s$, $s = "
                   + ", ".join(_latex_number(s) for s in safeties) + "$, over the floating-point norm, by proving "
                   "$c_j' I \\pm \\Gamma\\circ\\Delta_j \\succ 0$ through "
                   + "; ".join(how.get(m, m) for m in methods) + ". ")
        if not ok:
            caption += "Rows shown as ``failed'' did not pass this check and give no bound. "
    else:
        caption = ("Lower bounds are the values claimed in the certificate files; they were NOT re-checked "
                   "for this table (exported with --no-check). ")
    if any(r.instance_matched is False for r in rows):
        caption += "Rows whose certificate is not for the named instance are shown as ``failed''. "
    caption += "Upper bounds are floating-point dual objectives, shown only when the dual witness verified."
    out.append(f"\\caption{{{caption}}}")
    out.append("\\label{tab:adv-bounds}")
    out.append("\\end{table}")
    out.append("% SHA-256 of the certificate files:")
    for i, r in enumerate(rows):
        out.append(f"%   {macro_suffix(i)} {os.path.basename(r.path)}: {r.sha256}{_spec_note(r)}")
    return "\n".join(out) + "\n"


def _spec_footnote(rows) -> str:
    """`` Instance spec hashes (checked): A~\\texttt{...}`` when any row has a spec hash, else ``""``."""
    known = [(macro_suffix(i), r) for i, r in enumerate(rows) if r.spec_key and r.instance_matched is not False]
    if not known:
        return ""
    checked = all(r.spec_checked for _, r in known)
    return (" Instance spec hashes (" + ("checked against the instance file" if checked else
                                        "as recorded in the files, not all checked") + "): "
            + "; ".join(f"{s}~\\texttt{{{r.spec_key[:16]}\\dots}}" for s, r in known) + ".")
