"""The sequential example from Python (INVENTED DATA; see README.md in this folder).

Run from this folder:  python sequential.py [OUT_DIR]
"""

import sys
from pathlib import Path

from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.io.fit_folder import load_fit, write_fit
from bayes_rr.priors.earlier import as_dict, prior_from_fit
from bayes_rr.priors.spec import load_spec
from bayes_rr.results.decisions import load_criteria
from bayes_rr.study.data import read_study
from bayes_rr.workflow.fit import fit_study

HERE = Path(__file__).resolve().parent


def main(out_dir: Path) -> None:
    out_dir.mkdir(parents=True, exist_ok=True)
    criteria = load_criteria(HERE / "criteria.toml")
    spec = load_spec("reference-logit")
    last = fit_study(read_study(HERE / "last_year.csv"), spec,
                     SamplerSettings.from_spec(spec, seed=1), criteria=criteria)  # fmt: skip
    folder = write_fit(last, out_dir / "fit-2025", overwrite=True)

    with_prior, approximations = prior_from_fit(load_fit(folder), weight=0.7)
    for a in approximations:
        print(f"{a.label:28s} quantile gap {a.quantile_gap:.3f}")
    this = fit_study(
        read_study(HERE / "this_year.csv"), with_prior,
        SamplerSettings.from_spec(with_prior, seed=1), criteria=criteria,
        prior_from=as_dict(with_prior.earlier, approximations),
    )  # fmt: skip
    write_fit(this, out_dir / "fit-2026", overwrite=True)
    for row in this.criteria:
        print(row["sentence"])
    print(this.prior_sensitivity["prior_sensitive"])


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path("bayes-rr-sequential"))
