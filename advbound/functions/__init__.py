"""Stage 1, the functions: partial functions and everything that builds or reads them.

=====================  ========================================================
:mod:`.function`       the immutable :class:`PartialFunction` value
:mod:`.domain`         its inputs as arrays, in canonical order
:mod:`.timemodel`      time models and budgets that restrict a composed domain
:mod:`.builders`       the public face of the builders below
:mod:`.outer`          outer functions: OR, AND, threshold, majority, parity, predicates
:mod:`.searchrows`     position-search rows, usable row lengths, time profiles
:mod:`.composition`    composition with time budgets; OR of position-search rows
:mod:`.sizelimit`      the domain-size guard applied before building
:mod:`.tablefile`      the ``INPUT OUTPUT`` table file format
:mod:`.instance`       TOML instance files: reading, spec hashes, building
:mod:`.expressions`    the safe expression language of instance files
:mod:`.grid`           ``[grid]`` tables and their points
:mod:`.resolution`     an instance resolved at one grid point
:mod:`.symmetry`       automorphism groups and orbits
:mod:`.rowfamily`      functions of interchangeable rows, given by their input orbits
:mod:`.specfamily`     the row family of an instance file, without listing its inputs
:mod:`.tableaux`       partitions, Young tableaux and symmetrisers for row permutations
:mod:`.rowbasis`       the representative set: exact blocks of S_{n−1}-invariant matrices
:mod:`.sizing`         what a function will cost to solve, before doing it
=====================  ========================================================

Nothing here imports a solver.
"""
