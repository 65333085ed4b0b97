"""Stage 4, the studies: sweeps over parameters, their durable store, growth fits and reports.

================  =============================================================
:mod:`.study`     the study file and the resumable point-by-point run
:mod:`.store`     the sqlite result store, with leases for parallel runs
:mod:`.fit`       growth laws, their fits and the verdict
:mod:`.report`    figures, tables and summary text, from the store alone
================  =============================================================
"""
