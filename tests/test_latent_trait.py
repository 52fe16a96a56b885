"""The latent trait family: parts on the scale of an unmeasured continuous property.

External references: the two-parameter item response model (Birnbaum 1968, in Lord
and Novick, Statistical Theories of Mental Test Scores) is this model with one call
per cell, probit or logistic; scipy.special.ndtr and scipy.stats.norm.ppf (the probit
curve and its 10%-90% distance, 2 z_0.9 w); recovery of a seeded simulation with known
truth (thresholds, widths) as in the other families' recovery tests.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import integrate, stats
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import DataError, SpecError
from bayes_rr.families import latent_trait
from bayes_rr.priors.spec import load_spec
from bayes_rr.simulation.known_truth import simulate_latent_trait

runner = CliRunner()


def test_designs_that_cannot_place_thresholds_and_widths_are_refused():
    """Two appraisers with one call each: 3 free pattern frequencies for 4 parameters
    (the two-parameter item response model needs three items without repeats)."""
    two_single = simulate_latent_trait(30, 2, 1, seed=1).study
    problem = latent_trait.identification_problem(two_single)
    assert problem is not None and "3 free call-pattern frequencies" in problem
    with pytest.raises(DataError, match="cannot be identified"):
        latent_trait.build(load_spec("latent-trait"), two_single)
    assert latent_trait.identification_problem(simulate_latent_trait(30, 3, 1, seed=1).study)\
        is None  # fmt: skip
    assert latent_trait.identification_problem(simulate_latent_trait(30, 2, 2, seed=1).study)\
        is None  # fmt: skip


def test_call_probabilities_are_the_probit_curve_at_each_position():
    """latent_trait.call_probabilities against scipy.special.ndtr((z - t) / w)."""
    import xarray as xr
    from scipy.special import ndtr

    rng = np.random.default_rng(0)
    z, t, w = rng.normal(size=(2, 5)), rng.normal(size=(2, 3)), rng.uniform(0.1, 1, (2, 3))
    posterior = xr.Dataset({
        "part_position": (("chain", "draw", "part"), z[None]),
        "threshold": (("chain", "draw", "appraiser"), t[None]),
        "curve_scale": (("chain", "draw", "appraiser"), w[None]),
    })  # fmt: skip
    p = latent_trait.call_probabilities(posterior, "probit")
    np.testing.assert_allclose(p, ndtr((z[:, :, None] - t[:, None, :]) / w[:, None, :]))


def test_part_mix_is_refused_for_latent_positions():
    from bayes_rr.simulation.designs import check_simulated

    with pytest.raises(SpecError, match="leave --part-mix out"):
        check_simulated(load_spec("latent-trait"), 0.3)


@pytest.fixture(scope="module")
def probit_fit(tmp_path_factory):
    """A probit latent-trait fit of a seeded 40 parts x 4 appraisers x 3 trials study
    simulated from that model."""
    sim = simulate_latent_trait(40, 4, 3, seed=1)
    folder = tmp_path_factory.mktemp("trait")
    spec_path = folder / "probit.toml"
    spec_path.write_text(load_spec("latent-trait").text.replace('link = "logistic"',
                                                                'link = "probit"'))  # fmt: skip
    data = folder / "study.csv"
    sim.study.calls.to_csv(data, index=False)
    out = folder / "fit"
    result = runner.invoke(app, ["fit", str(data), "--model", str(spec_path), "--out", str(out),
                                 "--draws", "1000", "--seed", "3", "--quiet"])  # fmt: skip
    assert result.exit_code == 0, result.output
    return sim, out, " ".join(result.stdout.split())


def test_latent_trait_recovers_thresholds_and_widths(probit_fit):
    """Each appraiser's threshold and 10%-90% transition width (2 z_0.9 w for the probit,
    scipy.stats.norm.ppf) inside its 95% interval, and the thresholds' order recovered
    (the true thresholds are -0.3, 0, 0.2 and 0.5 sd apart)."""
    sim, out, _ = probit_fit
    summary = json.loads((out / "summary.json").read_text())
    assert summary["diagnostics"]["ok"], summary["diagnostics"]
    rows = {(r["key"], r["appraiser"]): r for r in summary["estimands"]
            if r["scope"] == "study" and r["level"] == "appraiser"}  # fmt: skip
    factor = stats.norm.ppf(0.9) - stats.norm.ppf(0.1)
    means = []
    for j, name in enumerate(summary["design"]["appraiser_names"]):
        threshold = rows[("threshold", name)]
        assert threshold["lower"] <= sim.params["thresholds"][j] <= threshold["upper"], name
        width = rows[("transition_width", name)]
        assert width["lower"] <= factor * sim.params["widths"][j] <= width["upper"], name
        means.append(threshold["mean"])
    assert np.all(np.diff(means) > 0), means
    spread = next(r for r in summary["estimands"] if r["key"] == "threshold_spread"
                  and r["scope"] == "study")  # fmt: skip
    assert spread["lower"] <= np.std(sim.params["thresholds"]) <= spread["upper"]


def test_latent_trait_terminal_and_report_show_the_latent_scale(probit_fit):
    _, out, text = probit_fit
    assert "Where each appraiser rejects, on the latent scale" in text
    assert "spread of the thresholds over these appraisers" in text
    result = runner.invoke(app, ["report", str(out)])
    assert result.exit_code == 0, result.output
    html = (out / "report.html").read_text()
    assert "on the latent scale of the judged property" in html
    summary = json.loads((out / "summary.json").read_text())
    positions = [r for r in summary["estimands"] if r["key"] == "part_position"]
    assert len(positions) == 40


def test_positions_follow_the_calls(probit_fit):
    """Parts' posterior positions rank like their true positions (Spearman's rho by
    scipy.stats.spearmanr above 0.85: with 12 calls a part, near-certain parts at the
    ends are ordered only by the prior)."""
    sim, out, _ = probit_fit
    summary = json.loads((out / "summary.json").read_text())
    position = {r["part"]: r["mean"] for r in summary["estimands"] if r["key"] == "part_position"}
    parts = list(sim.study.parts)
    rho = stats.spearmanr([position[p] for p in parts], sim.params["z"]).statistic
    assert rho > 0.85, rho


def test_the_spec_takes_a_curve_link_and_refuses_others():
    from bayes_rr.priors.spec import parse_spec

    text = load_spec("latent-trait").text
    assert load_spec("latent-trait").link == "logistic"
    assert parse_spec(text.replace('link = "logistic"', 'link = "probit"'), "p.toml").link \
        == "probit"  # fmt: skip
    with pytest.raises(SpecError, match=r"curve\.link = 'cloglog'"):
        parse_spec(text.replace('link = "logistic"', 'link = "cloglog"'), "c.toml")


def test_part_log_likelihood_matches_numerical_integration():
    """Each part's calls with its position integrated over N(0, 1), against
    scipy.integrate.quad of prod_j Binom(s_ij; n_ij, expit((z - t_j)/w_j)) phi(z), with one
    curve as steep as w = 0.03."""
    import xarray as xr
    from scipy import integrate
    from scipy.special import expit

    study = simulate_latent_trait(10, 3, 3, seed=2).study
    t, w = np.array([-0.2, 0.1, 0.4]), np.array([0.03, 0.2, 0.5])
    dims = ("chain", "draw", "appraiser")
    posterior = xr.Dataset({"threshold": (dims, t[None, None]),
                            "curve_scale": (dims, w[None, None])})  # fmt: skip
    ours = latent_trait.part_log_likelihood(posterior, "logistic", study)[0]
    cells = study.cells
    for i in range(len(study.parts)):
        mine = cells[cells["part_index"] == i]
        j, s, n = (mine[c].to_numpy() for c in ("appraiser_index", "s", "n"))

        def integrand(z, j=j, s=s, n=n):
            return np.prod(stats.binom.pmf(s, n, expit((z - t[j]) / w[j]))) * stats.norm.pdf(z)

        reference = integrate.quad(integrand, -8, 8, points=list(t), limit=500)[0]
        assert ours[i] == pytest.approx(np.log(reference), abs=1e-6), i


def _loo_idata(unit_values: dict[str, np.ndarray], seed: int):
    import arviz as az
    import xarray as xr

    rng = np.random.default_rng(seed)
    groups = {}
    for name, values in unit_values.items():
        dim = "part" if name == "s_part" or values.shape[-1] == 8 else "cell"
        groups[name] = (("chain", "draw", dim), values)
    posterior = xr.Dataset({"x": (("chain", "draw"), rng.normal(size=(2, 200)))})
    return az.InferenceData(posterior=posterior, log_likelihood=xr.Dataset(groups))


def test_compare_leaves_out_parts_when_a_latent_class_fit_is_among_the_fits():
    """A latent class fit has one likelihood term per part; a latent trait fit gives one
    per part beside its cells; a crossed-logit fit only per cell (refused, named)."""
    from bayes_rr.checks.predictive import compare_fits

    rng = np.random.default_rng(1)
    per_part = rng.normal(-3.0, 0.1, (2, 200, 8))
    per_cell = rng.normal(-1.0, 0.1, (2, 200, 24))
    latent_class = _loo_idata({"s": per_part}, 1)
    trait = _loo_idata({"s": per_cell, "s_part": per_part + 0.5}, 2)
    crossed = _loo_idata({"s": per_cell}, 3)
    same = dict.fromkeys(("latent-class", "latent-trait", "crossed-logit"), "abc")
    done = compare_fits({"latent-class": latent_class, "latent-trait": trait},
                        {k: same[k] for k in ("latent-class", "latent-trait")})  # fmt: skip
    assert done["unit"] == "part" and "one part at a time" in done["method"]
    assert done["models"][0]["model"] == "latent-trait"  # 0.5 more log lik per part
    assert done["models"][1]["elpd_diff"] == pytest.approx(8 * 0.5, abs=0.05)
    with pytest.raises(DataError, match="'crossed-logit' gives none per part"):
        compare_fits({"latent-class": latent_class, "crossed-logit": crossed},
                     {k: same[k] for k in ("latent-class", "crossed-logit")})  # fmt: skip
    cells_only = compare_fits({"latent-trait": trait, "crossed-logit": crossed},
                              {k: same[k] for k in ("latent-trait", "crossed-logit")})  # fmt: skip
    assert cells_only["unit"] == "cell"


def _with_partial_reference(seed: int, limit: float = 0.3, share: float = 1 / 3):
    sim = simulate_latent_trait(60, 4, 3, seed=seed)
    status = (sim.params["z"] > limit).astype(int)
    known = np.random.default_rng(seed).random(60) < share
    table = sim.study.calls.copy()
    given = {p: (str(s) if k else "") for p, s, k in zip(sim.study.parts, status, known,
                                                         strict=True)}  # fmt: skip
    table["reference"] = table["part"].map(given)
    return sim, status, table


def test_a_reference_is_used_not_ignored_and_places_a_latent_limit(tmp_path):
    """A full or partial reference column is the latent trait model's data: no 'not used'
    line, a latent limit among its variables, and positions on each status's side."""
    from bayes_rr.study.data import read_study
    from bayes_rr.workflow.preflight import ignored_options

    _, status, table = _with_partial_reference(2)
    table.to_csv(tmp_path / "partial.csv", index=False)
    full = table.assign(reference=table["part"].map(dict(zip(
        sorted(set(table["part"]), key=lambda p: int(p[1:])), status, strict=True))))  # fmt: skip
    full.to_csv(tmp_path / "full.csv", index=False)
    spec = load_spec("latent-trait")
    for name in ("partial.csv", "full.csv"):
        study = read_study(str(tmp_path / name))
        assert ignored_options(study, spec) == [], name
        model = latent_trait.build(spec, study)
        assert "latent_limit" in model.named_vars, name
        wanted = model.replace_rvs_by_values([model["part_position"], model["latent_limit"]])
        outputs = model.compile_fn(wanted, inputs=model.value_vars, on_unused_input="ignore")
        shapes = model.eval_rv_shapes()
        values, limit = outputs({v.name: np.full(shapes[v.name], 0.1) for v in model.value_vars})
        known = latent_trait.reference_status(study)
        assert np.all(values[known == 1] > limit) and np.all(values[known == 0] < limit), name
    assert ("part_unknown" in latent_trait.build(spec, read_study(str(tmp_path / "partial.csv")))
            .coords)  # fmt: skip


@pytest.mark.slow
def test_a_random_third_of_references_recovers_the_study_rates(tmp_path):
    """Continuous property, 60 parts x 4 appraisers x 3 trials, a random third of the
    parts given their true status (position above 0.3): the appraisers' study-scope
    false reject and false accept rates (the mean of the true call probabilities over
    the study's good and bad parts) lie in their 95% intervals, at least 7 of 8, and the
    limit in its interval."""
    sim, status, table = _with_partial_reference(5)
    table.to_csv(tmp_path / "study.csv", index=False)
    (tmp_path / "line.toml").write_text("bad_share = 0.02\n")
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(tmp_path / "study.csv"), "--model", "latent-trait",
                                 "--out", str(out), "--seed", "1", "--quiet",
                                 "--production", str(tmp_path / "line.toml")])  # fmt: skip
    assert result.exit_code == 0, result.output
    summary = json.loads((out / "summary.json").read_text())
    assert summary["diagnostics"]["ok"], summary["diagnostics"]
    rows = {(r["key"], r["appraiser"]): r for r in summary["estimands"]
            if r["scope"] == "study"}  # fmt: skip
    truth = {"false_reject_rate": sim.p[status == 0].mean(axis=0),
             "false_accept_rate": (1 - sim.p[status == 1]).mean(axis=0)}  # fmt: skip
    held = [
        rows[(key, name)]["lower"] <= values[j] <= rows[(key, name)]["upper"]
        for j, name in enumerate(summary["design"]["appraiser_names"])
        for key, values in truth.items()
    ]
    # eight 95% intervals all hold with probability about 0.66; seven or more of eight
    # with about 0.94 (binomial): the check asks for that (measured here: 7 of 8, A4's
    # false accept rate 0.204 just above its upper limit 0.190)
    assert sum(held) >= 7, held
    limit = rows[("latent_limit", None)]
    assert limit["lower"] <= 0.3 <= limit["upper"]
    # population scope: each appraiser on a new part of the status, the true curves
    # integrated by scipy.integrate.quad over N(0, 1) on each side of 0.3
    from scipy.special import ndtr

    t, w = sim.params["thresholds"], sim.params["widths"]
    population = {(r["key"], r["appraiser"]): r for r in summary["estimands"]
                  if r["scope"] == "population"}  # fmt: skip
    held = []
    for j, name in enumerate(summary["design"]["appraiser_names"]):
        frr = _side_mean(lambda z, j=j: ndtr((z - t[j]) / w[j]), 0.3, 0)
        far = _side_mean(lambda z, j=j: 1 - ndtr((z - t[j]) / w[j]), 0.3, 1)
        for key, value in (("false_reject_rate", frr), ("false_accept_rate", far)):
            row = population[(key, name)]
            held.append(row["lower"] <= value <= row["upper"])
    assert sum(held) >= 7, held
    assert ("false_accept_rate", None) in population
    # production: one call on a line part of a status is the population-scope rate
    production = {(r["key"], r["appraiser"]): r for r in summary["estimands"]
                  if r["scope"] == "production"}  # fmt: skip
    for key in ("false_reject_rate", "false_accept_rate"):
        for name in summary["design"]["appraiser_names"]:
            assert production[(key, name)]["mean"] == pytest.approx(
                population[(key, name)]["mean"], rel=1e-9
            )
    assert production[("escaped_per_million", None)]["mean"] > 0
    report = runner.invoke(app, ["report", str(out)])  # reads the fit folder back
    assert report.exit_code == 0, report.output
    assert "false reject rate" in (out / "report.html").read_text()


def _draws(**values):
    """One posterior draw as a Dataset (arrays get an appraiser dim)."""
    import xarray as xr

    def dims(value) -> tuple[str, ...]:
        return ("chain", "draw") + (("appraiser",) if np.ndim(value) else ())

    return xr.Dataset({k: (dims(v), np.reshape(v, (1, 1, *np.shape(v))))
                       for k, v in values.items()})  # fmt: skip


def _side_mean(f, limit: float, side: int) -> float:
    """E[f(z) | z on that side of the limit], z ~ N(0, 1): scipy.integrate.quad."""
    lo, hi = (-12.0, limit) if side == 0 else (limit, 12.0)
    mass = stats.norm.cdf(limit) if side == 0 else stats.norm.sf(limit)
    return integrate.quad(lambda z: f(z) * stats.norm.pdf(z), lo, hi, limit=200,
                          epsabs=1e-12)[0] / mass  # fmt: skip


@pytest.mark.parametrize("link", ["probit", "logistic"])
@pytest.mark.parametrize("width", [0.03, 0.2, 1.0])
def test_population_rates_of_the_study_appraisers_match_quadrature(link, width):
    """Each appraiser's population-scope rate is E[F((z - t)/w) | z below the limit]
    (false reject) and E[1 - F | z above] (false accept), z ~ N(0, 1): against
    scipy.integrate.quad to 5e-5 for curve scales from 0.03 to 1."""
    from scipy.special import expit, ndtr

    curve = ndtr if link == "probit" else expit
    limit, t = 0.4, np.array([0.1, 0.5])
    w = np.array([width, 2 * width])
    rates = latent_trait.population_rates(
        _draws(latent_limit=limit, threshold=t, curve_scale=w, threshold_mean=0.3,
               log_width_mean=np.log(width)), link)["appraiser"]  # fmt: skip
    for j in range(2):
        frr = _side_mean(lambda z, j=j: curve((z - t[j]) / w[j]), limit, 0)
        far = _side_mean(lambda z, j=j: 1 - curve((z - t[j]) / w[j]), limit, 1)
        assert rates["false_reject_rate"][0, j] == pytest.approx(frr, abs=5e-5)
        assert rates["false_accept_rate"][0, j] == pytest.approx(far, abs=5e-5)
    share = stats.norm.sf(limit)
    assert rates["reference_agreement"][0, 0] == pytest.approx(
        (1 - share) * (1 - rates["false_reject_rate"][0, 0])
        + share * (1 - rates["false_accept_rate"][0, 0])
    )


@pytest.mark.parametrize("link", ["probit", "logistic"])
def test_a_new_appraisers_rates_match_nested_quadrature(link):
    """The system's population rate: a new appraiser (threshold ~ N(beta, sigma_t),
    log width ~ N(omega, sigma_w)) on a new part of the status. Against nested
    scipy.integrate.quad over position, threshold and log width (to 2e-5)."""
    from scipy.special import expit, ndtr

    curve = ndtr if link == "probit" else expit
    limit, beta, sigma_t, omega, sigma_w = -0.2, 0.1, 0.3, np.log(0.2), 0.4
    rates = latent_trait.population_rates(
        _draws(latent_limit=limit, threshold=np.array([0.0, 0.2]),
               curve_scale=np.array([0.2, 0.2]), threshold_mean=beta, log_width_mean=omega,
               sigma_threshold=sigma_t, sigma_width=sigma_w), link)["system"]  # fmt: skip

    z = np.linspace(-7, 7, 281)  # a new appraiser's curve is smooth in z: a spline on it

    def over_threshold(v: float) -> np.ndarray:
        w = np.exp(omega + sigma_w * v)
        return integrate.quad_vec(lambda u: curve((z - beta - sigma_t * u) / w)
                                  * stats.norm.pdf(u), -9, 9, epsabs=1e-11)[0]  # fmt: skip

    curve_of_new = integrate.quad_vec(lambda v: over_threshold(v) * stats.norm.pdf(v), -8, 8,
                                      epsabs=1e-10)[0]  # fmt: skip
    from scipy.interpolate import CubicSpline

    spline = CubicSpline(z, curve_of_new)
    frr = _side_mean(spline, limit, 0)
    far = _side_mean(lambda x: 1 - spline(x), limit, 1)
    assert rates["false_reject_rate"][0] == pytest.approx(frr, abs=2e-5)
    assert rates["false_accept_rate"][0] == pytest.approx(far, abs=2e-5)


def test_side_nodes_reproduce_the_truncated_normal():
    """The equal-probability nodes on each side of a limit have the mean and variance of
    N(0, 1) truncated there (scipy.stats.truncnorm), far into the tails too."""
    for limit in (-3.0, 0.0, 1.2, 4.0):
        good, bad = latent_trait.side_positions(np.array([limit]))
        below = stats.truncnorm(-np.inf, limit)
        above = stats.truncnorm(limit, np.inf)
        assert good.mean() == pytest.approx(below.mean(), abs=2e-3 * below.std())
        assert bad.mean() == pytest.approx(above.mean(), abs=2e-3 * above.std())
        assert good.std() == pytest.approx(below.std(), rel=5e-3)
        assert np.all(good < limit) and np.all(bad > limit)


def test_production_needs_a_reference_status(tmp_path):
    """Without any reference the latent scale has no limit: a production file is refused
    before sampling, one clean line and exit 2; planning with production is refused."""
    study = tmp_path / "s.csv"
    simulate_latent_trait(30, 3, 2, seed=4).study.calls.to_csv(study, index=False)
    production = tmp_path / "line.toml"
    production.write_text("bad_share = 0.02\n")
    args = ["fit", str(study), "--model", "latent-trait", "--production", str(production),
            "--out", str(tmp_path / "f"), "--quiet"]  # fmt: skip
    result = runner.invoke(app, args)
    assert result.exit_code == 2, result.output
    assert "reference status" in result.output and "Traceback" not in result.output
    assert not (tmp_path / "f").exists()


def test_production_calls_use_the_population_side_integrals():
    """On the line, one call by study appraiser j on a good part is the population-scope
    rate of j (the same side distribution), and the single-call system rate is the
    line's share-weighted mean of them; a second call by the same appraiser on a bad
    part accepted the first time is E[(1 - p)^2 | bad], by scipy.integrate.quad."""
    from scipy.special import expit, ndtr

    from bayes_rr.results.production import line_draws
    from bayes_rr.study.production import ProductionMix, Strategy

    t, w, limit = np.array([-0.1, 0.4]), np.array([0.15, 0.3]), 0.2
    draws = _draws(latent_limit=limit, threshold=t, curve_scale=w, threshold_mean=0.1,
                   log_width_mean=np.log(0.2))  # fmt: skip
    spec = load_spec("latent-trait")
    mix = ProductionMix(source="line.toml", bad_share=0.03)
    nodes = latent_trait.production_calls(draws, spec, None, mix)
    shares = np.array([0.7, 0.3])
    strategies = (Strategy("single"), Strategy("confirm_same", k=1))
    line = line_draws(nodes, np.array([0.03]), shares, strategies)
    population = latent_trait.population_rates(draws, spec.link)["appraiser"]
    for key in ("false_reject_rate", "false_accept_rate"):
        assert line.appraiser[key][0] == pytest.approx(population[key][0], abs=1e-12)
        assert line.strategies["single"][key][0] == pytest.approx(population[key][0] @ shares)
    # confirm_same k=1: rejected only when both calls reject; a bad part escapes
    # unless both reject
    curve = ndtr if spec.link == "probit" else expit
    both = sum(share * _side_mean(lambda z, j=j: curve((z - t[j]) / w[j]) ** 2, limit, 1)
               for j, share in enumerate(shares))  # fmt: skip
    assert line.strategies["confirm_same_1"]["false_accept_rate"][0] == pytest.approx(
        1 - both, abs=5e-5
    )


def test_the_latent_limit_prior_is_power_scaled_with_the_others():
    """The log prior that power-scaling raises holds every stated prior of a latent trait
    fit with a reference, the latent limit's N(0, 1.5) included: at made-up draws it
    equals the sum of scipy.stats log densities; without a latent limit (no reference)
    that term is absent."""
    import xarray as xr

    from bayes_rr.priors.hyperpriors import log_prior

    spec = load_spec("latent-trait")
    rng = np.random.default_rng(3)
    values = {
        "threshold_mean": rng.normal(0, 1, (2, 5)),
        "log_width_mean": rng.normal(-1.5, 1, (2, 5)),
        "sigma_threshold": np.abs(rng.normal(0, 0.5, (2, 5))),
        "sigma_width": np.abs(rng.normal(0, 0.5, (2, 5))),
        "latent_limit": rng.normal(0, 1.5, (2, 5)),
    }
    posterior = xr.Dataset({k: (("chain", "draw"), v) for k, v in values.items()})
    expected = (stats.norm.logpdf(values["threshold_mean"], 0, 1)
                + stats.norm.logpdf(values["log_width_mean"], -1.5, 1)
                + stats.halfnorm.logpdf(values["sigma_threshold"], scale=0.5)
                + stats.halfnorm.logpdf(values["sigma_width"], scale=0.5))  # fmt: skip
    limit = stats.norm.logpdf(values["latent_limit"], 0, 1.5)
    np.testing.assert_allclose(log_prior(posterior, spec), expected + limit, atol=1e-12)
    without = posterior.drop_vars("latent_limit")
    np.testing.assert_allclose(log_prior(without, spec), expected, atol=1e-12)
