"""Write the invented study of the fallible-reference example.

INVENTED DATA, a scenario made up for this example: a fictional electronics assembler
checks solder joints of a connector by eye under a magnifier. Each joint's reference
status comes from a (fictional) X-ray inspection, which itself misses a voided joint now
and then and flags a sound one now and then: about 1 joint in 12 gets the wrong
reference here. 48 joints, 3 inspectors, 3 looks each.

Run from this folder:  python make_data.py
"""

from pathlib import Path

import numpy as np

from bayes_rr.simulation.known_truth import simulate_status_logit

HEADER = """\
# INVENTED DATA for the bayes-rr fallible-reference example: not a real study. A
# fictional assembler's visual check of solder joints; part = joint, call = the
# inspector's verdict, reference = a (fictional) X-ray inspection that is itself
# wrong for some joints.
"""


def study_text(seed: int = 31) -> str:
    sim = simulate_status_logit(
        48, 3, 3, mu_accept=-2.6, mu_reject=2.4, sigma_part=1.0,
        sigma_appraiser=(0.4, 0.5), sigma_interaction=0.2, reject_share=0.4,
        reference_errors=(0.08, 0.08), seed=seed,
    )  # fmt: skip
    calls = sim.study.calls
    names = dict(zip(sim.study.appraisers, ["Ines", "Jonas", "Kaya"], strict=True))
    said = dict(zip(sim.study.parts, sim.params["reference"], strict=True))
    table = calls.assign(
        part=calls["part"].str.replace("P", "J-", regex=False),
        inspector=calls["appraiser"].map(names),
        call=np.where(calls["call"] == 1, "reject", "accept"),
        reference=np.where(calls["part"].map(said) == 1, "reject", "accept"),
    )
    table = table.sample(frac=1.0, random_state=seed)
    columns = ["part", "inspector", "trial", "call", "reference"]
    return HEADER + table[columns].to_csv(index=False)


def main() -> None:
    here = Path(__file__).resolve().parent
    (here / "study.csv").write_text(study_text())
    print("wrote study.csv (invented data)")


if __name__ == "__main__":
    main()
