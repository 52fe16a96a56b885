"""Write the summaries of two seeded fits, for tests/data/summaries_before_speedups.json.

Not collected by pytest. Run with the code of the commit to record, e.g.

    git worktree add /tmp/old COMMIT
    PYTHONPATH=/tmp/old python tests/benchmarks/make_speed_reference.py OUT.json

First recorded at cf519db (before the speed work); recorded again when the study-scope
wrong-call rates came to average over the parts each appraiser called (the study has
empty cells, so those rows moved by definition, not by Monte Carlo error).

The study and settings are those of tests/conftest.py (small_sim, FAST).
"""

import json
import sys
import warnings

from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.priors.spec import load_spec
from bayes_rr.simulation.known_truth import simulate_crossed_logit
from bayes_rr.workflow.fit import fit_study

FIELDS = ("key", "scope", "level", "appraiser", "mean", "median", "sd", "lower", "upper",
          "r_hat", "ess_bulk", "ess_tail")  # fmt: skip


def main(path: str) -> None:
    warnings.filterwarnings("ignore")
    sim = simulate_crossed_logit(
        24, 3, 2, mu=-1.0, sigma_part=2.0, sigma_appraiser=0.6, sigma_interaction=0.3,
        reference_effect=3.0, missing_share=0.1, seed=42,
    )  # fmt: skip
    fits = {}
    for name in ("crossed-logit", "reference-logit"):
        spec = load_spec(name)
        settings = SamplerSettings.from_spec(spec, draws=1000, tune=1000, chains=4, seed=3)
        result = fit_study(sim.study, spec, settings)
        rows = result.estimand_rows + result.parameter_rows
        fits[name] = [{f: getattr(r, f) for f in FIELDS} for r in rows if r.level != "part"]
    with open(path, "w") as out:
        json.dump({"fits": fits}, out, indent=1)


if __name__ == "__main__":
    main(sys.argv[1])
