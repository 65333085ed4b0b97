"""Stage 1, the functions: partial functions and everything that builds or reads them.

==================  ===========================================================
:mod:`.function`    the immutable :class:`PartialFunction` value
:mod:`.domain`      its inputs as arrays, in canonical order
:mod:`.timemodel`   time models and budgets that restrict a composed domain
:mod:`.builders`    pure constructors: OR, AND, threshold, position search, compose
:mod:`.tablefile`   the ``INPUT OUTPUT`` table file format
:mod:`.instance`    TOML instance files and their parameter grids
:mod:`.symmetry`    automorphism groups and orbits
:mod:`.sizing`      what a function will cost to build and to solve, before doing it
==================  ===========================================================

Nothing here imports a solver.
"""
