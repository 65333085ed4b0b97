"""Stage 3, the programs: the semidefinite programs whose solutions become certificates.

=========================  ====================================================
:mod:`.solve`              the public :func:`solve` entry point and the dense path
:mod:`.choose`             which program ``method="auto"`` runs, and why
:mod:`.sdp`                the dense ADV± / ADV programs (the only cvxpy formulation)
:mod:`.symmetric`          the program reduced by a function's automorphism group
:mod:`.symmetric_program`  its invariant formulation
:mod:`.symmetric_blocks`   its block diagonalisation and chordal decomposition
:mod:`.rowsym`             the program reduced by row permutations, never |D|×|D|
:mod:`.factored`           a first-order solver for large two-output functions
:mod:`.factored_lagrangian`  its augmented-Lagrangian optimiser
:mod:`.largescale`         verified lower bounds from low-rank matrices, where no SDP fits
:mod:`.gammafit`           free constants of a user-supplied Γ, fitted to the certified bound
:mod:`.exact`              the exact t-query success probability: entry points and solve
:mod:`.exact_program`      its formulation (the Barnum–Saks–Szegedy program)
:mod:`.exact_symmetry`     its symmetry reduction
:mod:`.exact_verify`       its numpy checks
:mod:`.exact_result`       its result object
=========================  ====================================================

Every program returns its result only after :mod:`advbound.evidence` has checked it.
"""
