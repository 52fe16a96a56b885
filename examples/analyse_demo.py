"""The whole job from Python, on the bundled demo study (invented data).

Run from anywhere after `pip install .`:  python examples/analyse_demo.py [OUT_DIR]
(or paste the lines of main() into a notebook cell by cell).
"""

import sys
from pathlib import Path

import pandas as pd

import bayes_rr as brr
from bayes_rr.study.describe import demo_path


def main(out_dir: Path, draws: int | None = None) -> None:
    # A DataFrame as a notebook user would have it (the demo file has comment lines).
    frame = pd.read_csv(demo_path(), comment="#")
    study = brr.read_study(frame, part="part", appraiser="appraiser", call="call",
                           reference="reference")  # fmt: skip

    description = brr.describe(study)
    print(description.by_appraiser().round(3).to_string(index=False))

    fit = brr.fit(study, seed=1, draws=draws)  # the data have a reference: reference-logit
    print(fit)
    summary = fit.summary()
    headline = summary[(summary["level"] == "study") & summary["key"].isin(
        ["repeat_disagreement", "reproducibility_share"])]  # fmt: skip
    print(headline[["key", "scope", "mean", "lower", "upper"]].round(3).to_string(index=False))
    rates = fit.rates()
    columns = ["key", "scope", "appraiser", "mean", "lower", "upper"]
    print(rates[rates["level"] == "appraiser"][columns].round(3).to_string(index=False))

    print("posterior predictive check:", fit.check()["posterior_predictive"]["verdict"])
    folder = fit.save(out_dir / "fit", overwrite=True)
    print("fit folder:", folder)
    print("report:", fit.report(out_dir / "report.html", title="Demo study (invented data)",
                                overwrite=True))  # fmt: skip


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path("bayes-rr-example"))
