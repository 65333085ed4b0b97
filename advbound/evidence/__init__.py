"""Stage 2, the evidence: certificates and everything that checks them, independently of any solver.

====================  =========================================================
:mod:`.certificate`   the :class:`Certificate` value, its file format and acceptance rule
:mod:`.verify`        floating-point verification of both bounds
:mod:`.rigorous`      exact-arithmetic verification of the lower bound
:mod:`.iterative`     matrix-free norm bounds for large adversary matrices
:mod:`.usergamma`     a researcher's own adversary matrix: read, evaluate, improve
:mod:`.export`        LaTeX evidence for a proof draft, from certificate files
====================  =========================================================

No module here imports cvxpy (a test checks this), so a certificate can be
re-checked on a machine that has no solver.
"""
