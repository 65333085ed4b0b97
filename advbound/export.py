"""LaTeX snippets for a proof draft, built from certificate files.

This module owns :func:`export_latex`: one booktabs table row per certificate
(description, ``|D|``, the rigorous lower bound rounded down, the float upper bound
when a dual witness verified), one macro per number (``\\advLowerA``, ``\\advUpperA``,
``\\advSizeA``, then ``B``, ..., ``Z``, ``AA``, ...: letters only), a sentence saying
what was verified and how, the exact rational of each bound in a comment, and the
SHA-256 of each certificate file.  The snippet needs ``\\usepackage{booktabs}``.
Typical call::

    tex = export_latex(["or4.npz", "or9.npz"])          # runs the rigorous check on each file

>>> macro_suffix(0), macro_suffix(25), macro_suffix(26), macro_suffix(27)
('A', 'Z', 'AA', 'AB')
"""

from __future__ import annotations

import dataclasses
import hashlib
import os

from .certificate import load_certificate

__all__ = ["ExportRow", "export_latex", "export_rows", "render_latex", "macro_suffix", "latex_escape", "sha256_file"]

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


@dataclasses.dataclass(frozen=True)
class ExportRow:
    """One certificate's numbers for the table (``lower_exact`` as ``"p/q"``, ``None`` when unchecked)."""

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


def export_rows(paths, *, check: bool = True, digits: int = 4, **rigorous_options) -> list[ExportRow]:
    """Load each certificate and (with ``check``) run :func:`advbound.rigorous.verify_rigorous` on it."""
    from .rigorous import floor_decimal, verify_rigorous
    from .verify import verify_certificate

    rows = []
    for path in paths:
        cert = load_certificate(path)
        desc = str(cert.metadata.get("description") or os.path.basename(str(path)))
        fl = verify_certificate(cert)
        upper = fl.upper if fl.passed else None
        if check:
            rep = verify_rigorous(cert, **rigorous_options)
            exact = rep.lower_exact if rep.verified else None
            rows.append(ExportRow(str(path), sha256_file(path), desc, len(cert.inputs),
                                  rep.lower if exact is not None else None,
                                  None if exact is None else f"{exact.numerator}/{exact.denominator}",
                                  floor_decimal(exact, digits) if exact is not None else "failed",
                                  rep.verified, upper, rep.method, rep.safety, rep.denominator))
        else:
            claimed = cert.metadata.get("claimed_lower")
            shown = f"{float(claimed):.{digits}f}" if claimed is not None else "--"
            rows.append(ExportRow(str(path), sha256_file(path), desc, len(cert.inputs),
                                  None if claimed is None else float(claimed), None, shown, None, upper,
                                  "unchecked", None, None))
    return rows


def _latex_number(x: float) -> str:
    r"""``1e-06`` -> ``10^{-6}``, ``2.5e-07`` -> ``2.5\times 10^{-7}`` (math mode)."""
    m, e = f"{x:.3e}".split("e")
    m = m.rstrip("0").rstrip(".")
    return f"10^{{{int(e)}}}" if m == "1" else f"{m}\\times 10^{{{int(e)}}}"


def export_latex(paths, *, check: bool = True, digits: int = 4, **rigorous_options) -> str:
    """A LaTeX snippet (table, macros, method sentence, hashes) for the certificates at ``paths``.

    With ``check=False`` the rigorous check is skipped, the lower bounds shown are the
    claims stored in the files, and the snippet says so in its text.
    """
    return render_latex(export_rows(paths, check=check, digits=digits, **rigorous_options), check=check,
                        digits=digits)


def render_latex(rows, *, check: bool = True, digits: int = 4) -> str:
    """The snippet for rows from :func:`export_rows`."""
    out = ["% advbound export: adversary lower bounds (needs \\usepackage{booktabs})"]
    for i, r in enumerate(rows):
        sfx = macro_suffix(i)
        out.append(f"% certificate {sfx}: {os.path.basename(r.path)}  sha256 {r.sha256}")
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
            + ".}"]
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
    caption += "Upper bounds are floating-point dual objectives, shown only when the dual witness verified."
    out.append(f"\\caption{{{caption}}}")
    out.append("\\label{tab:adv-bounds}")
    out.append("\\end{table}")
    out.append("% SHA-256 of the certificate files:")
    for i, r in enumerate(rows):
        out.append(f"%   {macro_suffix(i)} {os.path.basename(r.path)}: {r.sha256}")
    return "\n".join(out) + "\n"
