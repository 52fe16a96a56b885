"""The whole job from Python, on the bundled demo study (invented data).

Run from anywhere after `pip install .`:  python examples/analyse_demo.py [OUT_DIR]
"""

import sys
from pathlib import Path

from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.io.fit_folder import write_fit
from bayes_rr.priors.spec import load_spec
from bayes_rr.study.classical import classical_statistics
from bayes_rr.study.data import read_study
from bayes_rr.study.describe import demo_path
from bayes_rr.workflow.fit import fit_study
from bayes_rr.workflow.steps import check_fit, report_fit


def main(out_dir: Path) -> None:
    study = read_study(demo_path())
    print(study.design())

    classical = classical_statistics(study)
    print("classical (corrected) study level:", classical.corrected.study)

    spec = load_spec("crossed-logit")
    result = fit_study(study, spec, SamplerSettings.from_spec(spec, seed=1))
    print("converged:", result.diagnostics.ok, result.diagnostics.reasons)
    for row in result.estimand_rows:
        if row.level == "study" and row.key in ("repeat_disagreement", "reproducibility_share"):
            print(f"{row.scope:10s} {row.key:22s} {row.mean:.3f} ({row.lower:.3f}-{row.upper:.3f})")

    folder = write_fit(result, out_dir / "fit", overwrite=True)
    checks = check_fit(folder)
    print("posterior predictive check:", checks["posterior_predictive"]["verdict"])
    print("report:", report_fit(folder, title="Demo study (invented data)"))


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path("bayes-rr-example"))
