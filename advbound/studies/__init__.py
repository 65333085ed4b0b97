"""Stage 4, the studies: sweeps over parameters, their durable store, growth fits and reports.

=====================  ========================================================
:mod:`.study`          running a study: resumable, point by point
:mod:`.study_spec`     the study file, its points and settings
:mod:`.study_point`    one point, solved in a worker and turned into a stored row
:mod:`.study_pools`    in-process, process-pool and Dask execution
:mod:`.store`          the sqlite result store
:mod:`.store_file`     opening, checking and upgrading the store file
:mod:`.store_rows`     stored rows, run keys and their checks
:mod:`.store_leases`   leases that claim points for parallel runs
:mod:`.fit`            growth laws, their fits and the verdict
:mod:`.report`         writing a report, from the store alone
:mod:`.report_series`  series collected from the store
:mod:`.report_exact`   the exact t-query part of a report
:mod:`.report_tables`  LaTeX, CSV and JSON tables
:mod:`.report_figures` the figures
:mod:`.report_summary` the summary text
:mod:`.orbit_figures`  the figure of ``advbound orbits``
=====================  ========================================================
"""
