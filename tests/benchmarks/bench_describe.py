"""Time the classical step at scale: ``describe`` of a study with many appraisers.

Not a test (timings on a shared machine are noisy): it prints figures, medians of
``--repeats`` runs. The target is 1000 appraisers x 5 parts x 2 trials within 10 s;
pairwise statistics are listed only up to ``MAX_PAIRWISE_APPRAISERS`` appraisers,
which is what keeps this case fast.

    python tests/benchmarks/bench_describe.py --repeats 3 --json
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def write_study(path: Path, appraisers: int, parts: int, trials: int, seed: int = 0) -> None:
    """An invented study: random calls, every appraiser calling every part ``trials`` times."""
    rng = np.random.default_rng(seed)
    rows = ["part,appraiser,trial,call"]
    for a in range(appraisers):
        for p in range(parts):
            rows += [f"P{p},A{a},{t},{rng.integers(2)}" for t in range(1, trials + 1)]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")


def time_describe(path: Path) -> tuple[float, float]:
    """Seconds of the library call, and of the whole command in a new process."""
    from bayes_rr.study.describe import describe_file

    start = time.perf_counter()
    describe_file(path)
    library = time.perf_counter() - start
    start = time.perf_counter()
    subprocess.run(
        [sys.executable, "-m", "bayes_rr.cli", "describe", str(path), "--json"],
        check=True,
        capture_output=True,
    )
    return library, time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--json", action="store_true", help="print JSON")
    args = parser.parse_args()
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        for appraisers, parts, trials in ((1000, 5, 2), (12, 30, 3)):
            path = Path(tmp) / f"study_{appraisers}.csv"
            write_study(path, appraisers, parts, trials)
            runs = [time_describe(path) for _ in range(args.repeats)]
            results[f"{appraisers}x{parts}x{trials}"] = {
                "library_s_median": statistics.median(r[0] for r in runs),
                "command_s_median": statistics.median(r[1] for r in runs),
                "repeats": args.repeats,
                "target_s": 10.0 if appraisers == 1000 else None,
            }
    if args.json:
        print(json.dumps(results, indent=2))
    else:
        for case, row in results.items():
            print(
                f"{case}: library {row['library_s_median']:.2f} s, whole command "
                f"{row['command_s_median']:.2f} s (medians of {row['repeats']})"
            )


if __name__ == "__main__":
    main()
