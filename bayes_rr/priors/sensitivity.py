"""Prior sensitivity by power-scaling (Kallioinen, Paananen, Buerkner and Vehtari 2023,
"Detecting and diagnosing prior and likelihood sensitivity with power-scaling",
Statistics and Computing 34:57).

The stated hyper-priors (and an earlier study's factors) are raised to a power
alpha near 1 and the likelihood likewise, by Pareto-smoothed importance weighting of
the existing draws (no refit); the diagnostic is the rate of change of the
cumulative Jensen-Shannon distance of each estimand's posterior with alpha
(``arviz.psens``). The verdict uses the paper's threshold 0.05 on the prior
sensitivity:

* below the threshold: the data drive the result;
* at or above it: the prior shapes it. The likelihood sensitivity says more: below
  the threshold, the data say little about the result (the prior sets it); at or
  above it, prior and data both shape it. The paper reads that last case as a
  possible prior-data conflict, but in hierarchical models with an informative
  prior that agrees with the data (an earlier study, say) it is the rule, so it is
  reported as it is and not called a conflict.
"""

from __future__ import annotations

import warnings

import numpy as np
import xarray as xr

from bayes_rr.core import glossary
from bayes_rr.priors.hyperpriors import flat_priors, log_prior
from bayes_rr.priors.spec import ModelSpec

THRESHOLD = 0.05
DELTA = 0.01
LEVELS = ("study", "system")
VERDICTS = {
    "data": "driven by the data",
    "prior": "set by the prior: the data say little about it",
    "both": "shaped by the prior and the data together",
}


def verdict(prior: float, likelihood: float, threshold: float = THRESHOLD) -> str:
    """``data``, ``prior`` or ``both`` (see the module docstring)."""
    if not prior >= threshold:
        return "data"
    return "both" if likelihood >= threshold else "prior"


def _keyed(estimands: xr.Dataset) -> list[str]:
    return [
        name for name in estimands.data_vars
        if estimands[name].ndim == 2 and name.split("__")[1] in LEVELS
    ]  # fmt: skip


def prior_sensitivity(
    posterior: xr.Dataset,
    estimands: xr.Dataset,
    log_likelihood: xr.Dataset,
    spec: ModelSpec,
    threshold: float = THRESHOLD,
) -> dict:
    """Power-scaling sensitivity of every study- and system-level estimand.

    Returns the ``prior_sensitivity`` block of summary.json: ``rows`` (``scope``,
    ``level``, ``key``, ``prior``, ``likelihood``, ``verdict``), the threshold and
    the method, ``prior_sensitive`` (``scope key`` labels of every result the prior
    shapes) and ``data_driven``.
    """
    import arviz as az

    names = _keyed(estimands)
    log_p = log_prior(posterior, spec)
    data = az.InferenceData(
        posterior=estimands[names],
        log_prior=xr.Dataset(
            {"hyper_priors": (("chain", "draw"), log_p)},
            coords={"chain": posterior["chain"].to_numpy(), "draw": posterior["draw"].to_numpy()},
        ),
        log_likelihood=log_likelihood,
    )
    with warnings.catch_warnings():
        # Pareto k warnings of the importance weights concern alpha far from 1; at
        # alpha = 1 +- DELTA the weights are near uniform.
        warnings.simplefilter("ignore")
        prior = az.psens(data, component="prior", delta=DELTA)
        likelihood = az.psens(data, component="likelihood", delta=DELTA)
    rows = []
    for name in names:
        scope, level, key = name.split("__")
        p, lik = float(prior[name]), float(likelihood[name])
        if not (np.isfinite(p) and np.isfinite(lik)):
            continue
        kind = verdict(p, lik, threshold)
        rows.append(
            {"scope": scope, "level": level, "key": key, "prior": p, "likelihood": lik,
             "verdict": kind, "verdict_words": VERDICTS[kind]}
        )  # fmt: skip
    label = lambda r: f"{r['scope']} {r['key'].replace('_', ' ')}"  # noqa: E731
    return {
        "method": "power-scaling of the stated hyper-priors and of the likelihood, "
        f"alpha = 1 +- {DELTA} by importance weighting; cumulative Jensen-Shannon "
        "distance per unit log alpha (Kallioinen et al. 2023; arviz.psens)",
        "threshold": threshold,
        "scaled_priors": "stated hyper-priors, the LKJ prior on the correlation of an "
        "appraiser's effects (status models) and any earlier-study factors; group effects "
        "given their scales are not stated priors and are not scaled",
        "likelihood": SCALED_LIKELIHOOD.get(spec.family, "the cell likelihood"),
        "blind_to": flat_priors(spec),
        "blind_note": (
            "Power-scaling cannot see the influence of a flat prior (a constant density "
            f"raised to a power is unchanged): {', '.join(flat_priors(spec))}. Judge "
            "those by the interval's width against the prior's range instead."
            if flat_priors(spec)
            else None
        ),
        "rows": rows,
        "prior_sensitive": [label(r) for r in rows if r["verdict"] != "data"],
        "data_driven": [label(r) for r in rows if r["verdict"] == "data"],
    }


SCALED_LIKELIHOOD = {
    "logit": "the cell likelihood with the appraiser-by-part effect integrated "
    "out by quadrature (those effects are sampled, but the likelihood scaled is the "
    "marginal one)",
    "reference_logit": "the cell likelihood with the appraiser-by-part effect integrated "
    "out by quadrature (those effects are sampled, but the likelihood scaled is the "
    "marginal one)",
    "beta_binomial": "the beta-binomial cell likelihood (each cell's call probability "
    "integrated out)",
    "latent_class": "each part's likelihood with its class summed out and its part "
    "effect integrated out",
    "call_curve": "the binomial cell likelihood",
    "latent_trait": "the binomial cell likelihood (the parts' positions are sampled)",
}
"""Which likelihood power-scaling raises to a power, per family (said in the report)."""

HEADLINE_KEYS = (
    "call_rate",
    "repeatability_variance",
    "reproducibility_variance",
    "reproducibility_share",
    "false_reject_rate",
    "false_accept_rate",
)
"""The results a short verdict (the terminal's) names; the report and summary.json
give every row."""


def sentences(block: dict, earlier: bool = False, keys: tuple[str, ...] | None = None) -> list[str]:
    """The verdict in words: which results the prior shapes, which the data drive
    (only those with a key in ``keys``, when given)."""
    if not block or not block.get("rows"):
        return []
    rows = block["rows"]
    if keys is not None:
        rows = [r for r in rows if r["key"] in keys]
    name = lambda r: f"{glossary.name(r['key'])} ({r['scope']})"  # noqa: E731
    shaped = [name(r) for r in rows if r["verdict"] != "data"]
    weak = [name(r) for r in rows if r["verdict"] == "prior"]
    prior_words = "the prior (the earlier study among it)" if earlier else "the prior"
    out = []
    if shaped:
        text = (
            f"Shaped by {prior_words}, with power-scaling sensitivity at or above "
            f"{block['threshold']:g}: {', '.join(shaped)}."
        )
        if weak:
            text += f" Of these the data say little about: {', '.join(weak)}."
        if not earlier:
            text += (
                " Read them with the prior in mind; more appraisers, more parts or an "
                "earlier study as prior make them rest on data."
            )
        out.append(text)
    data = len(rows) - len(shaped)
    which = "headline" if keys is not None else "study- and system-level"
    out.append(
        f"{data} of {len(rows)} {which} results are driven by the data "
        f"(prior sensitivity below {block['threshold']:g})."
    )
    if block.get("blind_note"):
        out.append(block["blind_note"])
    return out
