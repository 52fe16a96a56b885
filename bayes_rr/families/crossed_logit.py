"""The crossed hierarchical logit (family 2 of the statistical contract).

logit p_ij = mu + a_i + b_j + c_ij (+ beta r_i): parts (a_i), appraisers (b_j) and
appraiser-by-part disagreement (c_ij) as crossed group effects on cell counts.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import xarray as xr
from scipy.special import expit, log_expit

from bayes_rr.core.moments import (
    decompose_population_logit,
    integrated_cell_log_lik,
    log_binom_coef,
    split_reproducibility_logit,
)
from bayes_rr.families import forward
from bayes_rr.families.base import (
    Family,
    LatentDraws,
    cell_index,
    cell_memory,
    draws_of,
    optional_draws,
    part_linear_predictor,
    single_intercept,
    term_hyper_parameters,
)
from bayes_rr.families.terms import (
    APPRAISER_TERM,
    INTERACTION_TERM,
    PART_TERM,
    REFERENCE_TERM,
    FamilyInfo,
)

if TYPE_CHECKING:
    import pymc as pm

    from bayes_rr.priors.spec import ModelSpec
    from bayes_rr.study.data import StudyData

EFFECT_DIMS = {"part": "part", "appraiser": "appraiser", "interaction": "cell"}

INFO = FamilyInfo(
    "logit",
    "crossed hierarchical logit: logit p_ij = mu + a_i + b_j + c_ij (docs/statistics.md family 2)",
    {t.name: t for t in (PART_TERM, APPRAISER_TERM, INTERACTION_TERM, REFERENCE_TERM)},
    required_terms=("part",),
)


def build(spec: ModelSpec, study: StudyData) -> pm.Model:
    """logit p_ij = mu + a_i + b_j + c_ij (+ beta r_i); s_ij ~ Binomial(n_ij, p_ij)."""
    return _build(spec, study, means=(), nodes=None)


GRAND_MEAN = "grand_mean"
"""The sampled sum of the intercept and the means of the part and appraiser effects."""
DEVIATIONS = {"part": "part_deviation", "appraiser": "appraiser_deviation"}
"""The sampled effects less their mean (zero-sum; ``_z`` appended when non-centred)."""
INTEGRATED = "integrated_cells"
"""The potential of the interaction integrated out of the cells."""
MEAN_TERMS = ("part", "appraiser")
SIGNED_SCALE = "sigma_interaction_signed"
"""The sampled signed interaction scale (its absolute value is sigma_interaction)."""
SIGNED_PRIORS = {"half_normal": "normal", "half_student_t": "student_t"}
PYMC_SIGNED = {"normal": "Normal", "student_t": "StudentT"}


def signed_scale_prior(spec: ModelSpec) -> str | None:
    """The symmetric prior whose absolute value is the interaction scale's stated prior
    (half-normal -> normal, half-t -> t), or None: then the scale is sampled on the log
    scale as stated. None too when an earlier study puts a factor on the scale."""
    term = spec.term("interaction")
    if term is None or term.prior is None:
        return None
    earlier = spec.earlier
    for factor in earlier.factors if earlier is not None else ():
        if factor.parameter == "sigma_interaction":
            return None
    return SIGNED_PRIORS.get(term.prior.distribution)


def intercept_normal(spec: ModelSpec) -> tuple[float, float] | None:
    """Mean and sd of the intercept's prior times the earlier study's factor (each
    Gaussian on the logit scale); None when the stated prior is not normal."""
    prior = spec.intercept
    if prior.distribution != "normal":
        return None
    mean, sd = float(prior.kwargs["mu"]), float(prior.kwargs["sigma"])
    precision, weighted = 1 / sd**2, mean / sd**2
    earlier = spec.earlier
    for factor in earlier.factors if earlier is not None else ():
        if factor.parameter == "intercept" and factor.status is None:
            if factor.scale != "identity":
                return None
            factor_precision = earlier.weight / float(factor.sigma) ** 2
            precision += factor_precision
            weighted += factor_precision * float(factor.mu)
    return weighted / precision, 1 / np.sqrt(precision)


def grand_mean_terms(spec: ModelSpec, study: StudyData) -> tuple[str, ...]:
    """The group terms whose means are sampled inside the grand mean (none when the
    intercept's prior is not normal: the split after sampling needs it Gaussian)."""
    if intercept_normal(spec) is None:
        return ()
    levels = {"part": len(study.parts), "appraiser": len(study.appraisers)}
    return tuple(t.name for t in spec.terms
                 if t.kind == "group" and t.name in MEAN_TERMS
                 and levels[t.name] >= 2)  # fmt: skip


def interaction_nodes(spec: ModelSpec, study: StudyData) -> int | None:
    """Nodes of the rule that integrates the interaction out, or None to sample it."""
    from bayes_rr.core.cell_rule import rule_nodes

    term = spec.term("interaction")
    if term is None or term.kind != "group":
        return None
    return rule_nodes(study.cells["n"].to_numpy())


def sampled_form(spec: ModelSpec, study: StudyData, integrate: bool = True) -> str:
    """In words, what :func:`build_sampled` samples (recorded with the fit)."""
    parts = []
    means = grand_mean_terms(spec, study)
    if means:
        parts.append("grand mean of the intercept and the " + " and ".join(means) + " effects")
    nodes = interaction_nodes(spec, study) if integrate else None
    if nodes is not None:
        parts.append(
            f"interaction integrated out of each cell ({nodes}-node Gauss-Hermite)"
            + (", its scale sampled with a sign" if signed_scale_prior(spec) else "")
        )
    return "; ".join(parts) or "as stated"


def build_sampled(spec: ModelSpec, study: StudyData, integrate: bool = True) -> pm.Model:
    """The model the sampler runs: the same posterior as :func:`build`, reparameterized.

    The intercept mu and the means of the part and appraiser effects are confounded
    (the data see only their sum), which is what slows the sampler on large studies.
    With a_i ~ N(0, s_a), b_j ~ N(0, s_b), mu ~ N(m0, s0): a = abar + a_dev with a_dev
    ZeroSumNormal(s_a) independent of abar ~ N(0, s_a^2 / I), likewise b. The sampler
    takes G = mu + abar + bbar ~ N(m0, s0^2 + s_a^2/I + s_b^2/J) and the deviations;
    :func:`complete` draws (mu, abar, bbar) given G afterwards (Gaussian, exact). With
    ``integrate`` and a design of few calls a cell, the interaction is integrated out
    of each cell by a fixed rule (:mod:`bayes_rr.families.cell_integral`) and its
    effects are drawn afterwards too. The integrated likelihood is then an even function
    of the interaction's scale (the rule's nodes are symmetric), so the scale is sampled
    as a signed value s with the symmetric prior whose |s| has the stated one
    (:func:`signed_scale_prior`): the posterior of s is smooth through 0, where a log
    transform would give the sampler a long tail (on a simulated 150 x 8 x 3 study at
    target_accept 0.9 the scale's tail ESS rose from 910 to 5,921 of 8,000 draws).
    """
    nodes = interaction_nodes(spec, study) if integrate else None
    return _build(spec, study, grand_mean_terms(spec, study), nodes)


def _build(spec: ModelSpec, study: StudyData, means: tuple[str, ...],
           nodes: int | None) -> pm.Model:  # fmt: skip
    """The crossed logit with the intercept and the means of the ``means`` terms sampled
    as one grand mean, and the interaction integrated out by a ``nodes``-node rule (None:
    sampled); with neither, the stated model."""
    import pymc as pm
    import pytensor.tensor as pt

    from bayes_rr.families.pymc_parts import (
        coords,
        group_effect,
        observed_calls,
        pymc_prior,
        reference_term,
        resolve_parameterization,
    )

    cells = study.cells
    part, app = cell_index(study)
    index = {"part": part, "appraiser": app, "interaction": slice(None)}
    levels = {"part": len(study.parts), "appraiser": len(study.appraisers)}
    groups = [t for t in spec.terms if t.kind == "group"]
    with pm.Model(coords=coords(study)) as model:
        # each scale just before its effect, as stated; the grand mean needs them first
        scales = {}
        signed_prior = signed_scale_prior(spec) if nodes is not None else None
        if signed_prior is not None:
            # the integrated likelihood is even in the scale: sampled as a signed value
            # whose absolute value has the stated prior (no log transform, no long tail
            # towards 0 where the data cannot tell the scale from nothing)
            distribution = getattr(pm, PYMC_SIGNED[signed_prior])
            signed = distribution(SIGNED_SCALE, **spec.term("interaction").prior.kwargs)
            scales["interaction"] = pm.Deterministic("sigma_interaction", pt.abs(signed))
        for term in groups if means else ():
            if term.name not in scales:
                scales[term.name] = pymc_prior(f"sigma_{term.name}", term.prior)
        if means:
            m0, s0 = intercept_normal(spec)
            variance = s0**2 + sum(scales[name] ** 2 / levels[name] for name in means)
            eta = pm.Normal(GRAND_MEAN, mu=m0, sigma=pt.sqrt(variance))
        else:
            eta = pymc_prior("intercept", spec.intercept)
        for term in groups:
            if term.name not in scales:
                scales[term.name] = pymc_prior(f"sigma_{term.name}", term.prior)
            name, scale = term.name, scales[term.name]
            way = resolve_parameterization(term, study)
            if name in means:
                dims = EFFECT_DIMS[name]
                if way == "centered":
                    effect = pm.ZeroSumNormal(DEVIATIONS[name], sigma=scale, dims=dims)
                else:
                    effect = scale * pm.ZeroSumNormal(f"{DEVIATIONS[name]}_z", sigma=1.0, dims=dims)
            elif name == "interaction" and nodes is not None:
                continue
            else:
                effect = group_effect(f"{name}_effect", scale, EFFECT_DIMS[name], way)
            eta = eta + effect[index[name]]
        eta = eta + reference_term(spec, study, index["part"])
        if nodes is not None:
            from bayes_rr.families.cell_integral import integrated_cells

            calls = observed_calls(study)
            # the binomial coefficients are left out: constant in the parameters
            total = integrated_cells(eta, scales["interaction"], cells["n"].to_numpy(), calls,
                                     nodes)  # fmt: skip
            pm.Potential(INTEGRATED, total)
        else:
            pm.Binomial("s", n=cells["n"].to_numpy(), logit_p=eta,
                        observed=observed_calls(study), dims="cell")  # fmt: skip
    return model


def _split_grand_mean(posterior: xr.Dataset, spec: ModelSpec, study: StudyData,
                      means: tuple[str, ...], rng: np.random.Generator) -> dict:  # fmt: skip
    """(S,) intercept and (S, level) effects from the grand mean and the deviations.

    Given G, (mu, abar, bbar) is the Gaussian N(m, diag(v)) conditioned on its sum: draw
    z ~ N(0, diag(v)) and add v / sum(v) times what the sum misses (exact)."""
    m0, s0 = intercept_normal(spec)
    grand = draws_of(posterior, GRAND_MEAN)
    levels = {"part": len(study.parts), "appraiser": len(study.appraisers)}
    variances = [np.full_like(grand, s0**2)]
    variances += [draws_of(posterior, f"sigma_{name}") ** 2 / levels[name] for name in means]
    v = np.stack(variances, axis=1)
    z = rng.standard_normal(v.shape) * np.sqrt(v)
    x = z + v / v.sum(axis=1, keepdims=True) * (grand - m0 - z.sum(axis=1))[:, None]
    out = {"intercept": m0 + x[:, 0]}
    for column, name in enumerate(means, 1):
        if DEVIATIONS[name] in posterior:
            deviation = draws_of(posterior, DEVIATIONS[name])
        else:
            scale = draws_of(posterior, f"sigma_{name}")[:, None]
            deviation = scale * draws_of(posterior, f"{DEVIATIONS[name]}_z")
        out[f"{name}_effect"] = x[:, column, None] + deviation
    return out


def complete(posterior: xr.Dataset, spec: ModelSpec, study: StudyData,
             rng: np.random.Generator) -> tuple[xr.Dataset, dict]:  # fmt: skip
    """The draws of :func:`build` from those of :func:`build_sampled`.

    Writes ``intercept``, the effects of the grand-mean terms and, when the interaction
    was integrated out, ``interaction_effect`` drawn from each cell's conditional given
    the draw's other parameters (and the cell's calls); drops the sampled-only
    variables. Returns the completed posterior and, for an integrated interaction, the
    rule's check at the largest scales drawn (:func:`bayes_rr.core.cell_rule.rule_error`).
    """
    from bayes_rr.core.cell_rule import rule_error
    from bayes_rr.core.kernels import draw_cell_effects
    from bayes_rr.families.layout import coords

    chains, draws = posterior.sizes["chain"], posterior.sizes["draw"]
    labels = coords(study)
    shape = {"part": len(labels["part"]), "appraiser": len(labels["appraiser"])}
    added = {}
    sampled = set(posterior.data_vars)
    means = tuple(n for n in MEAN_TERMS if {DEVIATIONS[n], f"{DEVIATIONS[n]}_z"} & sampled)
    if GRAND_MEAN in posterior:
        split = _split_grand_mean(posterior, spec, study, means, rng)
        added["intercept"] = ((), split.pop("intercept"))
        for name in means:
            added[f"{name}_effect"] = ((EFFECT_DIMS[name],), split[f"{name}_effect"])
    check: dict = {}
    integrated = (spec.term("interaction") is not None and "sigma_interaction" in posterior
                  and "interaction_effect" not in posterior)  # fmt: skip
    whole = posterior.assign(
        {
            name: (("chain", "draw", *dims), value.reshape(chains, draws, *value.shape[1:]))
            for name, (dims, value) in added.items()
        }
    )
    if integrated:
        part, app = cell_index(study)
        eta = part_linear_predictor(whole, study)[:, part]
        eta = eta + optional_draws(whole, "appraiser_effect", (1, shape["appraiser"]))[:, app]
        sigma = draws_of(whole, "sigma_interaction")
        n, k = study.cells["n"].to_numpy(), study.cells["s"].to_numpy()
        check = rule_error(eta, sigma, n, k, interaction_nodes(spec, study))
        effects = draw_cell_effects(eta, sigma, n, k, seed=int(rng.integers(2**62)))
        whole = whole.assign(interaction_effect=(("chain", "draw", "cell"),
                                                 effects.reshape(chains, draws, -1)))  # fmt: skip
    whole = _with_standardized_effects(whole, spec, study)
    sampled_only = [GRAND_MEAN, SIGNED_SCALE, *DEVIATIONS.values(),
                    *(f"{v}_z" for v in DEVIATIONS.values())]  # fmt: skip
    whole = whole.drop_vars([v for v in sampled_only if v in whole])
    return whole.assign_coords({d: labels[d] for d in ("part", "appraiser", "cell")
                                if d in whole.dims}), check  # fmt: skip


def _with_standardized_effects(posterior: xr.Dataset, spec: ModelSpec,
                               study: StudyData) -> xr.Dataset:  # fmt: skip
    """Adds ``<term>_effect_z`` = effect / scale for each non-centred term that lacks it,
    so that the completed draws hold every free variable of :func:`build`'s model (the
    stated model's log densities can be evaluated at them)."""
    from bayes_rr.families.pymc_parts import resolve_parameterization

    for term in spec.terms:
        name = f"{term.name}_effect"
        if (term.kind != "group" or name not in posterior or f"{name}_z" in posterior
                or resolve_parameterization(term, study) == "centered"):  # fmt: skip
            continue
        posterior = posterior.assign(
            {f"{name}_z": posterior[name] / posterior[f"sigma_{term.name}"]}
        )
    return posterior


def prior_draws(spec: ModelSpec, study: StudyData, rng: np.random.Generator, draws: int):
    out = {"intercept": ((), forward.draw(spec.intercept, rng, (draws,)))}
    out.update(forward.group_effects(spec, study, rng, draws, ("part", "appraiser", "interaction")))
    out.update(forward.reference_effect(spec, study, rng, draws))
    return out


def cell_linear_predictor(posterior: xr.Dataset, study: StudyData) -> np.ndarray:
    """(S, cell) logit p_ij of the observed cells."""
    part, app = cell_index(study)
    eta = part_linear_predictor(posterior, study)[:, part]
    if "appraiser_effect" in posterior:
        eta = eta + draws_of(posterior, "appraiser_effect")[:, app]
    if "interaction_effect" in posterior:
        eta = eta + draws_of(posterior, "interaction_effect")
    return eta


def latent(posterior: xr.Dataset, spec, study: StudyData, rng) -> LatentDraws:
    n_parts, n_app = len(study.parts), len(study.appraisers)
    eta_part = part_linear_predictor(posterior, study)
    s = eta_part.shape[0]
    b = optional_draws(posterior, "appraiser_effect", (s, n_app))
    sigma_b = optional_draws(posterior, "sigma_appraiser", (s,))
    sigma_c = optional_draws(posterior, "sigma_interaction", (s,))
    # Cells without calls get c_ij from its prior given sigma_c: the posterior of
    # an unobserved interaction effect.
    c = rng.standard_normal((s, n_parts, n_app)) * sigma_c[:, None, None]
    part, app = cell_index(study)
    if "interaction_effect" in posterior:
        c[:, part, app] = draws_of(posterior, "interaction_effect")
    eta = eta_part[:, :, None] + b[:, None, :] + c
    p, q = expit(eta), expit(-eta)
    population = decompose_population_logit(eta_part, np.sqrt(sigma_b**2 + sigma_c**2))
    if "sigma_appraiser" in posterior and "sigma_interaction" in posterior:
        population.update(split_reproducibility_logit(eta_part, sigma_b, sigma_c))
    cells = study.cells
    n, k = cells["n"].to_numpy(), cells["s"].to_numpy()
    if "interaction_effect" in posterior:
        # Leave-one-cell-out needs the cell's likelihood with its own interaction
        # effect integrated out: that effect is informed by the cell alone.
        log_lik = integrated_cell_log_lik(eta_part[:, part] + b[:, app], sigma_c, n, k)
    else:
        eta_cell = eta[:, part, app]
        log_lik = log_binom_coef(n, k) + k * log_expit(eta_cell) + (n - k) * log_expit(-eta_cell)
    return LatentDraws(p, population, log_lik, q_study=q)


def cell_probabilities(posterior: xr.Dataset, spec, study: StudyData, rng) -> np.ndarray:
    """The same parts and appraisers, effects from the draw."""
    return expit(cell_linear_predictor(posterior, study))


def hyper_parameters(spec: ModelSpec):
    return (single_intercept(spec), *term_hyper_parameters(spec))


FAMILY = Family(
    info=INFO,
    build=build,
    prior_draws=prior_draws,
    latent=latent,
    cell_probabilities=cell_probabilities,
    hyper_parameters=hyper_parameters,
    memory_per_draw=cell_memory,
    appraiser_rows=True,
    statements=("call_rate", "appraiser_difference", "repeat_disagreement"),
    simulated=True,
    build_sampled=build_sampled,
    complete=complete,
    sampled_form=sampled_form,
)
