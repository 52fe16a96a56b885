"""Write the bundled demo study (invented data) from a seeded simulation.

The scenario is made up for this project: a final visual check of crimped wire
terminals at a fictional harness workshop. Three inspectors call 45 terminals
three times each, in random order, as pass or fail; a lab cross-section of each
terminal gives its reference status. The simulation makes one inspector lean
towards passing terminals, so the study has a reproducibility story to tell.
One inspector missed the third round on a few terminals, so the design is
slightly unbalanced, as real studies are.

Run from the repository root:  python examples/make_demo_data.py
"""

from pathlib import Path

import numpy as np

from bayes_rr.simulation.known_truth import simulate_crossed_logit

HEADER = """\
# INVENTED DATA for the bayes-rr demo: not a real study. A fictional harness
# workshop's final visual check of crimped terminals; 3 inspectors x 45
# terminals x 3 rounds; reference status from a (fictional) lab cross-section.
"""


def demo_text() -> str:
    """The demo study as CSV text (header comment included)."""
    sim = simulate_crossed_logit(
        n_parts=45,
        n_appraisers=3,
        n_trials=3,
        mu=-2.4,
        sigma_part=1.5,
        sigma_appraiser=1.1,
        sigma_interaction=0.5,
        reference_effect=4.8,
        reference_share=0.4,
        appraiser_names=["Ayla", "Bruno", "Chen"],
        seed=12,
    )
    calls = sim.study.calls.copy()
    rng = np.random.default_rng(7)
    # Bruno missed round 3 on four terminals.
    missed = rng.choice(sim.study.parts, size=4, replace=False)
    drop = (calls["appraiser"] == "Bruno") & (calls["trial"] == "3") & calls["part"].isin(missed)
    calls = calls.loc[~drop]
    reference = sim.study.reference
    table = calls.assign(
        part=calls["part"].str.replace("P", "T-", regex=False),
        call=np.where(calls["call"] == 1, "fail", "pass"),
        reference=np.where(calls["part"].map(reference) == 1, "fail", "pass"),
    )
    table = table.sample(frac=1.0, random_state=3)  # the order calls were made in
    return HEADER + table[["part", "appraiser", "trial", "call", "reference"]].to_csv(index=False)


def main() -> None:
    text = demo_text()
    root = Path(__file__).resolve().parent.parent
    for target in (
        root / "examples" / "demo_study.csv",
        root / "bayes_rr" / "demo" / "demo_study.csv",
    ):
        target.write_text(text)
        print(f"wrote {target}")


if __name__ == "__main__":
    main()
