"""Write the invented plug-gauge study of this example from a seeded simulation.

The scenario is made up for this project: a fictional valve-body shop checks the
bore of each body with a go/no-go plug gauge against an upper limit of 10.050 mm.
Three inspectors call 30 bodies three times each; each body's bore was measured on
a (fictional) coordinate measuring machine, so its reference value is known. The
simulation gives the inspectors effective limits of 10.046, 10.050 and 10.056 mm.

Run from the repository root:  python examples/gauge/make_gauge_data.py
"""

from pathlib import Path

import numpy as np

from bayes_rr.simulation.known_truth import simulate_call_curve

HEADER = """\
# INVENTED DATA for a bayes-rr example: not a real study. A fictional valve-body
# shop's go/no-go plug gauge on a bore with an upper limit of 10.050 mm; 3
# inspectors x 30 bodies x 3 rounds; reference values from a (fictional) CMM.
"""
NAMES = {"A1": "Ines", "A2": "Jonas", "A3": "Kemal"}


def gauge_text() -> str:
    """The example study as CSV text (header comment included)."""
    sim = simulate_call_curve(
        n_parts=30, n_appraisers=3, n_trials=3, upper_limit=10.050, value_mean=10.048,
        value_sd=0.008, effective_limits=(10.046, 10.050, 10.056), widths=(0.002, 0.003, 0.004),
        seed=7,
    )  # fmt: skip
    study = sim.study
    calls = study.calls.copy()
    calls["appraiser"] = calls["appraiser"].map(NAMES)
    calls["call"] = np.where(calls["call"] == 1, "no-go", "go")
    calls["reference_value"] = calls["part"].map(study.reference_value.round(4))
    columns = ["part", "appraiser", "trial", "call", "reference_value"]
    return HEADER + calls[columns].to_csv(index=False)


if __name__ == "__main__":
    out = Path(__file__).resolve().parent / "gauge_study.csv"
    out.write_text(gauge_text(), encoding="utf-8")
    print(f"wrote {out}")
