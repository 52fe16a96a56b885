"""The sequential example from Python (INVENTED DATA; see README.md in this folder).

Run from this folder:  python sequential.py [OUT_DIR]
"""

import sys
from pathlib import Path

import bayes_rr as brr

HERE = Path(__file__).resolve().parent


def main(out_dir: Path, draws: int | None = None) -> None:
    out_dir.mkdir(parents=True, exist_ok=True)
    criteria = HERE / "criteria.toml"
    last = brr.fit(HERE / "last_year.csv", "reference-logit", seed=1, draws=draws,
                   criteria=criteria)  # fmt: skip
    folder = last.save(out_dir / "fit-2025", overwrite=True)

    this = brr.fit(HERE / "this_year.csv", seed=1, draws=draws, criteria=criteria,
                   prior_from=folder, prior_weight=0.7)  # fmt: skip
    for row in this.document["prior_from"]["parameters"]:
        print(f"{row['label']:28s} quantile gap {row['quantile_gap']:.3f}")
    this.save(out_dir / "fit-2026", overwrite=True)
    for row in this.document["criteria"]:
        print(row["sentence"])
    print(this.document["prior_sensitivity"]["prior_sensitive"])


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path("bayes-rr-sequential"))
