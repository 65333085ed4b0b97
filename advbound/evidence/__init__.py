"""Stage 2, the evidence: certificates and everything that checks them, independently of any solver.

====================  =========================================================
:mod:`.certificate`   the dense :class:`Certificate`, its file format and acceptance rule
:mod:`.verify`        floating-point verification of both bounds
:mod:`.rigorous`      exact-arithmetic verification of the lower bound
:mod:`.exactlinalg`   exact Rayleigh quotients and proofs of positive definiteness
:mod:`.orbitcert`     orbit certificates of interchangeable rows: value, file, acceptance rule
:mod:`.orbitcheck`    bounds of an orbit certificate in the reduced basis
:mod:`.orbittable`    an orbit certificate's Γ by pair orbit and input orbit
:mod:`.iterative`     matrix-free norm bounds for large adversary matrices
:mod:`.gammainput`    reading a researcher's own Γ (callable or entries file)
:mod:`.usergamma`     evaluating and improving it
:mod:`.orbitgamma`    a row-invariant Γ by pair orbits, norms from the representative set
:mod:`.orbitquotient` a row-invariant Γ by pair orbits, norms from quotient matrices
:mod:`.lift`          a solved Γ carried to a larger instance, orbit by orbit
:mod:`.export`        LaTeX evidence for a proof draft, from certificate files
====================  =========================================================

No module here imports cvxpy (a test checks this), so a certificate can be
re-checked on a machine that has no solver.
"""
