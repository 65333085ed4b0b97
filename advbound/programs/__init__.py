"""Stage 3, the programs: the semidefinite programs whose solutions become certificates.

=====================  ========================================================
:mod:`.solve`          the public :func:`solve` entry point and method choice
:mod:`.sdp`            the dense ADV± / ADV programs (the only cvxpy formulation)
:mod:`.symmetric`      the program reduced by a function's automorphism group
:mod:`.rowsym`         the program reduced by row permutations, never |D|×|D|
:mod:`.factored`       a first-order solver for large two-output functions
:mod:`.largescale`     verified lower bounds from low-rank matrices, where no SDP fits
:mod:`.exact`          the exact t-query success probability (Barnum–Saks–Szegedy)
=====================  ========================================================

Every program returns its result only after :mod:`advbound.evidence` has checked it.
"""
