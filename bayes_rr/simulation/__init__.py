"""Many fits at once: planning the next study, checking that intervals are calibrated,
and fitting a batch of studies, each fit a task on a Dask cluster.

designs  the study designs to try and the mix of parts in them
truths   studies simulated from the prior (or an earlier fit) with their truth
quick    a lean fit of one simulated study: the draws a plan or calibration needs
runner   the Dask runner: one task per fit, results written per task, resumable
plan, calibrate, batch   the three commands as library functions
figures  their figures (they never fit)
"""
