"""Write two invented yearly studies for the sequential example.

INVENTED DATA, a scenario made up for this example: a fictional bottling plant
checks cap seals with a handheld go/no-go torque gauge. Each year, the plant's
quality team runs a study: operators check caps whose seal status is known from a
(fictional) laboratory leak test. Last year: 40 caps, 4 operators, 3 checks each.
This year, after new gauges arrived: 24 caps, 3 operators, 2 checks each; too
small on its own, so last year's fit is carried in as prior.

Run from this folder:  python make_data.py
"""

from pathlib import Path

import numpy as np

from bayes_rr.simulation.known_truth import simulate_status_logit

HEADER = """\
# INVENTED DATA for the bayes-rr sequential example: not a real study. A fictional
# bottling plant's go/no-go torque check of cap seals ({year}); part = cap,
# call = the gauge's verdict, reference = a (fictional) laboratory leak test.
"""


def study_text(year: str, parts: int, operators: list[str], trials: int, seed: int) -> str:
    sim = simulate_status_logit(
        parts, len(operators), trials, mu_accept=-2.8, mu_reject=2.6, sigma_part=1.0,
        sigma_appraiser=(0.5, 0.6), sigma_interaction=0.2, reject_share=0.4, seed=seed,
    )  # fmt: skip
    calls = sim.study.calls
    names = dict(zip(sim.study.appraisers, operators, strict=True))
    reference = sim.study.reference
    table = calls.assign(
        part=calls["part"].str.replace("P", f"C{year[-2:]}-", regex=False),
        operator=calls["appraiser"].map(names),
        call=np.where(calls["call"] == 1, "reject", "accept"),
        reference=np.where(calls["part"].map(reference) == 1, "reject", "accept"),
    )
    table = table.sample(frac=1.0, random_state=seed)
    columns = ["part", "operator", "trial", "call", "reference"]
    return HEADER.format(year=year) + table[columns].to_csv(index=False)


def main() -> None:
    here = Path(__file__).resolve().parent
    (here / "last_year.csv").write_text(
        study_text("2025", 40, ["Dana", "Eli", "Farid", "Greta"], 3, seed=21)
    )
    (here / "this_year.csv").write_text(
        study_text("2026", 24, ["Dana", "Hugo", "Iris"], 2, seed=22)
    )
    print("wrote last_year.csv and this_year.csv (invented data)")


if __name__ == "__main__":
    main()
