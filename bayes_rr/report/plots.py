"""Figures. Each function takes results (arrays, summary rows, check results) and returns
a matplotlib Figure; none of them fits or computes a statistic.

Readable in grey print: quantities are told apart by position, marker shape and
line style, never by colour alone. Figures are made with ``matplotlib.figure.Figure``
directly (no pyplot state), so they work on any backend and in threads.
"""

from __future__ import annotations

import contextlib
import textwrap
from collections.abc import Iterator

import matplotlib
import numpy as np
from matplotlib.figure import Figure

STUDY_PANELS = (
    ("rr_variance", "R&R variance T (0/1 call scale)"),
    ("repeatability_variance", "repeatability variance R"),
    ("reproducibility_variance", "reproducibility variance V"),
    ("reproducibility_share", "reproducibility share V/T"),
)
GREY = "0.35"


@contextlib.contextmanager
def literal_text() -> Iterator[None]:
    """Make and draw figures in this block with every text taken literally: a "$" in a
    part or appraiser name starts no mathematics. (Tick labels are made when a figure
    is drawn, so the block must hold the drawing too, not only the making.)"""
    with matplotlib.rc_context({"text.parse_math": False}):
        yield


def _new(width: float, height: float, rows: int = 1, cols: int = 1):
    fig = Figure(figsize=(width, height), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False)
    return fig, axes


def study_level_densities(
    draws: dict[str, np.ndarray],
    rows: dict[str, dict],
    classical: dict[str, dict] | None = None,
    *,
    scope: str = "study",
    prob: float = 0.95,
) -> Figure:
    """Posterior density (histogram) of each study-level estimand, its interval and mean,
    with the classical plug-in (triangle) and corrected (square) estimates marked.

    ``draws``: key -> flat draws; ``rows``: key -> summary row; ``classical``:
    {"plug_in": {...}, "corrected": {...}} study-level dicts.
    """
    fig, axes = _new(8.0, 5.2, 2, 2)
    for ax, (key, label) in zip(axes.ravel(), STUDY_PANELS, strict=True):
        values = draws.get(key)
        if values is None:
            ax.set_visible(False)
            continue
        values = values[np.isfinite(values)]
        ax.hist(values, bins=60, density=True, histtype="stepfilled", color="0.85",
                edgecolor="0.3")  # fmt: skip
        row = rows.get(key)
        if row and row.get("mean") is not None:
            ax.plot([row["lower"], row["upper"]], [0, 0], color="black", lw=5,
                    solid_capstyle="butt", label=f"{prob:.0%} interval", clip_on=False)  # fmt: skip
            ax.plot(row["mean"], 0, "o", color="white", mec="black", ms=7, label="posterior mean",
                    clip_on=False)  # fmt: skip
        for kind, marker, style in (("plug_in", "^", "--"), ("corrected", "s", ":")):
            value = (classical or {}).get(kind, {}).get(key)
            if value is not None:
                ax.axvline(value, color=GREY, ls=style, lw=1)
                ax.plot(value, ax.get_ylim()[1] * 0.9, marker, color="black", mfc="white",
                        label=f"classical {kind.replace('_', '-')}")  # fmt: skip
        ax.set_xlabel(label)
        ax.set_yticks([])
    axes[0, 0].legend(fontsize=7, loc="upper right", frameon=False)
    fig.suptitle(f"Study-level estimands ({scope} scope): posterior densities", fontsize=11)
    return fig


def per_part_intervals(rows: list[dict], *, scope: str = "study", prob: float = 0.95) -> Figure:
    """Per-part repeatability and reproducibility variances with intervals, parts ordered
    by their posterior call rate (``rows``: summary rows at level ``part``)."""
    by = {}
    for row in rows:
        if row["level"] == "part" and row["scope"] == scope:
            by.setdefault(row["key"], {})[row["part"]] = row
    rate = by.get("call_rate", {})
    parts = sorted(rate, key=lambda p: rate[p]["mean"] if rate[p]["mean"] is not None else 0)
    height = max(3.0, 0.17 * len(parts) + 1.2)
    fig, axes = _new(8.0, height, 1, 2)
    y = np.arange(len(parts))
    for ax, (key, label, marker) in zip(
        axes[0],
        (("repeatability_variance", "repeatability variance R_i", "o"),
         ("reproducibility_variance", "reproducibility variance V_i", "s")),
        strict=True,
    ):  # fmt: skip
        table = by.get(key, {})
        mean = np.array([table[p]["mean"] if p in table else np.nan for p in parts], dtype=float)
        low = np.array([table[p]["lower"] if p in table else np.nan for p in parts], dtype=float)
        high = np.array([table[p]["upper"] if p in table else np.nan for p in parts], dtype=float)
        ax.hlines(y, low, high, color="black", lw=1.2)
        ax.plot(mean, y, marker, color="black", mfc="white", ms=4)
        ax.set_xlabel(f"{label} ({prob:.0%} interval)")
        ax.set_xlim(left=0)
        ax.grid(axis="x", color="0.9")
    axes[0, 0].set_yticks(y, parts, fontsize=6 if len(parts) > 40 else 8)
    axes[0, 1].set_yticks(y, [""] * len(parts))
    axes[0, 0].set_ylabel("part (ordered by call rate, lowest at the bottom)")
    fig.suptitle(f"Per-part variances of a 0/1 call ({scope} scope)", fontsize=11)
    return fig


def appraiser_call_rates(rows: list[dict], *, prob: float = 0.95) -> Figure | None:
    """Each appraiser's mean call (reject) rate over the study's parts, with intervals."""
    mine = [r for r in rows if r["level"] == "appraiser" and r["key"] == "call_rate"]
    if not mine:
        return None
    fig, axes = _new(6.0, max(2.0, 0.45 * len(mine) + 1.0))
    ax = axes[0, 0]
    y = np.arange(len(mine))
    ax.hlines(y, [r["lower"] for r in mine], [r["upper"] for r in mine], color="black", lw=2)
    ax.plot([r["mean"] for r in mine], y, "D", color="black", mfc="white")
    ax.set_yticks(y, [r["appraiser"] for r in mine])
    ax.set_xlabel(f"probability of a reject call, averaged over the study's parts "
                  f"({prob:.0%} interval)")  # fmt: skip
    ax.grid(axis="x", color="0.9")
    return fig


def call_grid(
    parts: list[str], appraisers: list[str], n: np.ndarray, s: np.ndarray,
    reference: np.ndarray | None = None,
) -> Figure:  # fmt: skip
    """Observed share of reject calls per part x appraiser cell (grey scale, with s/n), and
    each part's reference status beside the grid when known."""
    share = np.where(n > 0, s / np.maximum(n, 1), np.nan)
    height = max(3.0, 0.17 * len(parts) + 1.5)
    fig, axes = _new(min(8.0, 2.0 + 1.1 * len(appraisers)), height)
    ax = axes[0, 0]
    image = ax.imshow(share, cmap="Greys", vmin=0, vmax=1, aspect="auto")
    ax.set_xticks(np.arange(len(appraisers)), appraisers)
    ax.set_yticks(np.arange(len(parts)), parts, fontsize=6 if len(parts) > 40 else 8)
    if len(parts) <= 80:
        for i in range(len(parts)):
            for j in range(len(appraisers)):
                text = f"{s[i, j]}/{n[i, j]}" if n[i, j] else "-"
                ax.text(j, i, text, ha="center", va="center", fontsize=6,
                        color="white" if share[i, j] > 0.55 else "black")  # fmt: skip
    if reference is not None:
        # the reference status in a column of its own, right of the appraisers
        for i, status in enumerate(reference):
            ax.text(len(appraisers), i, "reject" if status else "accept", ha="center",
                    va="center", fontsize=6, fontweight="bold" if status else "normal")  # fmt: skip
        ax.set_xlim(-0.5, len(appraisers) + 0.5)
        ax.set_xticks(np.arange(len(appraisers) + 1), [*appraisers, "reference"])
    fig.colorbar(image, ax=ax, label="observed share of reject calls")
    ax.set_title("Calls per part and appraiser: rejects/calls in each cell", fontsize=9)
    ax.set_xlabel("appraiser")
    ax.set_ylabel("part")
    return fig


def predictive_checks(statistics: list[dict]) -> Figure:
    """Observed value (vertical line) against the replicated distribution of each
    posterior predictive check statistic; flagged statistics are marked in the title."""
    count = len(statistics)
    cols = 4
    rows = int(np.ceil(count / cols))
    fig, axes = _new(9.0, 1.9 * rows + 0.6, rows, cols)
    for ax, stat in zip(axes.ravel(), statistics, strict=False):
        rep = np.asarray(stat["replicated"], dtype=float)
        observed = float(stat["observed"])
        values = np.append(rep, observed)
        if np.all(values == np.round(values)):
            # counts: one bar per whole number, on an integer axis
            low, high = int(values.min()), int(values.max())
            bins = np.arange(low, high + 2) - 0.5
            ax.xaxis.get_major_locator().set_params(integer=True)
        else:
            # shares: bins over the values seen, on the share's own (0-1) scale
            low, high = values.min(), values.max()
            pad = max((high - low) * 0.05, 0.005)
            bins = np.linspace(max(0.0, low - pad), min(1.0, high + pad), 21)
        ax.hist(rep, bins=bins, color="0.8", edgecolor="0.4")
        ax.axvline(observed, color="black", lw=2, ls="-")
        flag = " (flagged)" if stat["flagged"] else ""
        title = textwrap.fill(stat.get("description") or stat["name"], 34)
        ax.set_title(f"{title}\np = {stat['p_value']:.2f}{flag}", fontsize=6.5)
        ax.tick_params(labelsize=6)
        ax.set_yticks([])
    for ax in axes.ravel()[count:]:
        ax.set_visible(False)
    fig.suptitle("Model check: the statistic in studies replicated from the posterior (bars) "
                 "and in the data (line)", fontsize=10)  # fmt: skip
    return fig


def rank_plots(draws: dict[str, np.ndarray]) -> Figure:
    """Rank histograms per chain of each hyper-parameter (``draws``: name -> (chain, draw)).

    Flat, overlapping step lines mean the chains explore the same distribution."""
    names = list(draws)
    cols = min(3, len(names))
    rows = int(np.ceil(len(names) / cols))
    fig, axes = _new(8.0, 2.2 * rows + 0.5, rows, cols)
    styles = ("-", "--", ":", "-.")
    for ax, name in zip(axes.ravel(), names, strict=False):
        values = np.asarray(draws[name])
        ranks = values.ravel().argsort().argsort().reshape(values.shape)
        bins = np.linspace(0, ranks.size, 21)
        for c in range(values.shape[0]):
            counts, _ = np.histogram(ranks[c], bins=bins)
            ax.step(bins[:-1], counts, where="post", color="black", ls=styles[c % 4], lw=1,
                    label=f"chain {c + 1}")  # fmt: skip
        ax.axhline(values.shape[1] / 20, color=GREY, lw=0.8)
        ax.set_title(name, fontsize=8)
        ax.set_yticks([])
        ax.set_xticks([])
        ax.set_xlabel("rank of the draw among all chains", fontsize=6)
        ax.set_ylabel("draws per bin", fontsize=6)
    for ax in axes.ravel()[len(names) :]:
        ax.set_visible(False)
    axes[0, 0].legend(fontsize=6, frameon=False)
    fig.suptitle("Rank plots of the hyper-parameters (convergence)", fontsize=10)
    return fig


def call_curves(
    grid: np.ndarray,
    median: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    values: np.ndarray,
    shares: np.ndarray,
    appraisers: list[str],
    limits: list[tuple[str, float]],
    prob: float = 0.95,
) -> Figure:
    """Each appraiser's fitted call curve (median and ``prob`` band) over the observed share
    of reject calls of each part, against the reference value; the limits dashed."""
    count = len(appraisers)
    cols = min(count, 3)
    rows = -(-count // cols)
    fig, axes = _new(3.0 * cols + 0.5, 2.6 * rows, rows, cols)
    for j, name in enumerate(appraisers):
        ax = axes[j // cols, j % cols]
        ax.fill_between(grid, lower[j], upper[j], color="0.82", label=f"{prob:.0%} band")
        ax.plot(grid, median[j], color="black", lw=1.2, label="fitted curve")
        seen = np.isfinite(shares[:, j])
        ax.plot(values[seen], shares[seen, j], "o", ms=3, mfc="white", mec=GREY,
                label="observed share")  # fmt: skip
        for side, value in limits:
            ax.axvline(value, color=GREY, ls="--", lw=0.8)
            ax.text(value, 1.02, f"{side} limit", ha="center", va="bottom", fontsize=7)
        ax.set_ylim(-0.03, 1.08)
        ax.set_title(name, fontsize=9)
        ax.set_xlabel("reference value")
        ax.set_ylabel("P(reject call)")
    for k in range(count, rows * cols):
        axes[k // cols, k % cols].set_visible(False)
    axes[0, 0].legend(fontsize=7, loc="center right")
    return fig


def appraiser_differences(pairs: list[dict], prob: float = 0.95) -> Figure | None:
    """Each pair's posterior difference with its interval, one row a pair, grouped by
    quantity; zero dashed."""
    if not pairs:
        return None
    fig, axes = _new(6.5, 0.35 * len(pairs) + 1.2)
    ax = axes[0, 0]
    y = np.arange(len(pairs))[::-1]
    for k, row in enumerate(pairs):
        ax.plot([row["lower"], row["upper"]], [y[k], y[k]], color="black", lw=1.2)
        ax.plot(row["mean"], y[k], "o", color="black", ms=4)
    ax.axvline(0, color=GREY, ls="--", lw=0.8)
    ax.set_yticks(y, [f"{r['label']}: {r['appraiser']} - {r['other']}" for r in pairs],
                  fontsize=7)  # fmt: skip
    ax.set_xlabel(f"difference (posterior mean and {prob:.0%} interval)")
    return fig


def strategy_crosses(strategies: list[dict], prob: float = 0.95) -> Figure | None:
    """Escaped bad parts against rejected good parts per million, one interval cross a
    strategy (posterior means, the arms its intervals)."""
    if not strategies:
        return None
    fig, axes = _new(6.5, 4.2)
    ax = axes[0, 0]
    markers = "osD^v<>ph*"
    for k, row in enumerate(strategies):
        x = row["figures"]["rejected_good_per_million"]
        y = row["figures"]["escaped_per_million"]
        ax.errorbar(
            x["mean"], y["mean"],
            xerr=[[x["mean"] - x["lower"]], [x["upper"] - x["mean"]]],
            yerr=[[y["mean"] - y["lower"]], [y["upper"] - y["mean"]]],
            fmt=markers[k % len(markers)], color=f"C{k % 10}", ms=5, lw=1, capsize=2,
            label=row["name"],
        )  # fmt: skip
    ax.set_xlabel(f"good parts rejected per million (mean, {prob:.0%} interval)")
    ax.set_ylabel("bad parts shipped per million")
    ax.legend(fontsize=7, frameon=False)
    return fig
