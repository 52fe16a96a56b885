"""``bayes-rr``: a thin command-line shell over the library.

Every command calls library functions that a notebook user can call too;
this module only parses options, prints and chooses exit codes:
0 success, 2 bad input (data, spec, options, output folder), 3 the sampler
did not pass the convergence gate, 130 interrupted (Ctrl-C or SIGTERM; nothing
is written). Every failure is one line on stderr; user strings are printed
literally (the consoles interpret no markup).
"""

from __future__ import annotations

from bayes_rr.cli.fit_commands import check, compare, fit, report
from bayes_rr.cli.shell import app, err, main, out
from bayes_rr.cli.simulation_commands import batch, calibrate, plan
from bayes_rr.cli.study_commands import demo, describe, models, prior
from bayes_rr.cli.terminal import print_description, print_fit

# Commands in the order ``bayes-rr --help`` lists them.
for _command in (
    describe,
    prior,
    models,
    fit,
    check,
    compare,
    report,
    demo,
    plan,
    calibrate,
    batch,
):
    app.command()(_command)

__all__ = ["app", "err", "main", "out", "print_description", "print_fit"]
