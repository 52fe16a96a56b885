"""Figures of plans and calibrations (drawn from their results; nothing is fitted)."""

from __future__ import annotations

import io

import numpy as np


def _png(fig) -> bytes:
    import matplotlib.pyplot as plt

    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110, bbox_inches="tight")
    plt.close(fig)
    return buffer.getvalue()


def width_figure(rows: list[dict], prob: float) -> bytes:
    """Median interval width (with the range over the simulations) against the number
    of calls of each design, one panel per result."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from bayes_rr.core.glossary import result_label

    keys = [k for k in dict.fromkeys(k for r in rows for k in r["expected_width"])]
    cols = min(3, max(1, len(keys)))
    nrows = max(1, -(-len(keys) // cols))
    fig, axes = plt.subplots(nrows, cols, figsize=(4.2 * cols, 3.2 * nrows), squeeze=False)
    for ax, key in zip(axes.ravel(), keys, strict=False):
        groups = {}
        for row in rows:
            if key in row["expected_width"]:
                groups.setdefault((row["appraisers"], row["trials"]), []).append(row)
        for (appraisers, trials), items in sorted(groups.items()):
            x = np.array([r["calls"] for r in items])
            y = np.array([r["expected_width"][key] for r in items])
            low = np.array([r["width_range"][key][0] for r in items])
            high = np.array([r["width_range"][key][1] for r in items])
            order = np.argsort(x)
            spread = [y[order] - low[order], high[order] - y[order]]
            label = f"{appraisers} appraisers x {trials} trials"
            ax.errorbar(x[order], y[order], yerr=spread, marker="o", capsize=3, label=label)
        ax.set_title(result_label(key), fontsize=9)
        ax.set_xlabel("calls in the study")
        ax.set_ylabel(f"{prob:.0%} interval width")
        ax.set_ylim(bottom=0)
    for ax in axes.ravel()[len(keys) :]:
        ax.set_visible(False)
    if keys:
        axes.ravel()[0].legend(fontsize=7)
    fig.suptitle("Expected interval width by design (median, range over simulated studies)",
                 fontsize=10)  # fmt: skip
    fig.tight_layout()
    return _png(fig)


def ecdf_difference_figure(ranks: dict[str, np.ndarray], prob: float = 0.95) -> bytes:
    """ECDF of the fractional ranks minus the uniform CDF, with a simultaneous
    ``prob`` band (Saeilynoja et al. 2022, via ArviZ's optimised band): a calibrated fit
    stays inside the band."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from arviz.stats.ecdf_utils import ecdf_confidence_band

    from bayes_rr.core.glossary import result_label

    names = list(ranks)
    cols = min(4, max(1, len(names)))
    nrows = max(1, -(-len(names) // cols))
    fig, axes = plt.subplots(nrows, cols, figsize=(3.2 * cols, 2.6 * nrows), squeeze=False)
    grid = np.linspace(0, 1, 101)
    for ax, name in zip(axes.ravel(), names, strict=False):
        values = np.sort(np.asarray(ranks[name]))
        count = values.size
        ecdf = np.searchsorted(values, grid, side="right") / count
        low, high = ecdf_confidence_band(count, grid, grid, prob=prob, method="optimized")
        ax.fill_between(grid, low - grid, high - grid, color="0.85", label=f"{prob:.0%} band")
        ax.plot(grid, ecdf - grid, color="C0")
        ax.axhline(0, color="0.4", lw=0.8)
        ax.set_title(result_label(name) if "__" in name else name, fontsize=8)
        ax.set_xlabel("fractional rank", fontsize=8)
    for ax in axes.ravel()[len(names) :]:
        ax.set_visible(False)
    fig.suptitle("Rank ECDF minus uniform, with simultaneous band", fontsize=10)
    fig.tight_layout()
    return _png(fig)
