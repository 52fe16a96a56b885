"""Production scope, inspection strategies, costs and the decision
(docs/statistics.md, "Production scope").

Outside references, named beside each check:
- closed binomial sums: ``scipy.stats.binom`` (repeat calls of one appraiser on one part
  are independent given its call probability);
- logistic-normal integrals: ``scipy.integrate.quad``;
- the Beta prior matched to a 95% range: ``scipy.stats.beta.ppf``;
- the figures of whole strategies: a brute-force simulation of production parts, calls
  and decisions in plain numpy, written independently of the quadrature code.
"""

from __future__ import annotations

import itertools
import json
from types import SimpleNamespace

import numpy as np
import pytest
import xarray as xr
from scipy import integrate, stats
from scipy.special import expit
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.core.errors import SpecError
from bayes_rr.families.base import CallNodes
from bayes_rr.families.status import production_calls
from bayes_rr.results.production import (
    add_costs,
    decision,
    line_draws,
    probability_cheapest,
)
from bayes_rr.study.production import (
    Costs,
    Strategy,
    beta_matching,
    default_strategies,
    parse_production,
)

runner = CliRunner()
STRATEGIES = (
    Strategy("single"),
    Strategy("confirm_same", k=1),
    Strategy("confirm_same", k=3),
    Strategy("confirm_same", k=2, rule="majority"),
    Strategy("confirm_other"),
    Strategy("k_of_n", k=1, n=3),
    Strategy("k_of_n", k=2, n=3),
    Strategy("k_of_n", k=3, n=3),
)


def fixed_nodes(p_good: np.ndarray, p_bad: np.ndarray) -> CallNodes:
    """Every part of a status alike, no appraiser-by-part variation: each p_ij known."""
    p = np.stack([p_good, p_bad])[:, None, None, :, None]  # (status, 1 draw, 1, J, 1)
    return CallNodes(1, (np.ones(1), np.ones(1)), np.ones(1), lambda block, status: p[status])


def figures(nodes, strategies=STRATEGIES, bad_share=0.1, shares=None):
    j = nodes.probabilities(slice(0, 1), 0).shape[2]
    shares = np.full(j, 1 / j) if shares is None else shares
    return line_draws(nodes, np.array([bad_share]), shares, strategies).strategies


# ---------------------------------------------------------------------------
# exact: every p_ij known, each strategy a closed binomial sum


def test_strategies_equal_closed_binomial_sums():
    p_good, p_bad = np.array([0.05, 0.10, 0.20]), np.array([0.90, 0.70, 0.95])
    got = figures(fixed_nodes(p_good, p_bad))
    for status, p in ((0, p_good), (1, p_bad)):

        def rejected(name, status=status):
            frr = got[name]["false_reject_rate"][0]
            return frr if status == 0 else 1 - got[name]["false_accept_rate"][0]

        # scipy.stats.binom: the part ends rejected when all k + 1 calls reject
        assert rejected("single") == pytest.approx(p.mean(), rel=1e-12)
        assert rejected("confirm_same_1") == pytest.approx(stats.binom.pmf(2, 2, p).mean())
        assert rejected("confirm_same_3") == pytest.approx(stats.binom.pmf(4, 4, p).mean())
        # majority of 3 calls, the first a reject: first reject and >= 1 of the 2 others
        assert rejected("confirm_same_2_majority") == pytest.approx(
            (p * stats.binom.sf(0, 2, p)).mean()
        )
        # k of 3 with all three appraisers: the Poisson-binomial tail, enumerated
        for k in (1, 2, 3):
            tail = sum(
                np.prod([p[j] if hit else 1 - p[j] for j, hit in enumerate(calls)])
                for calls in itertools.product((0, 1), repeat=3)
                if sum(calls) >= k
            )
            assert rejected(f"{k}_of_3") == pytest.approx(tail, rel=1e-12)
        # confirmed by one of the two others, chosen equally
        other = np.mean([p[j] * np.delete(p, j).mean() for j in range(3)])
        assert rejected("confirm_other") == pytest.approx(other, rel=1e-12)
    # equal appraisers: k of n is scipy.stats.binom.sf
    same = figures(fixed_nodes(np.full(3, 0.3), np.full(3, 0.8)))
    for k in (1, 2, 3):
        assert same[f"{k}_of_3"]["false_reject_rate"][0] == pytest.approx(
            stats.binom.sf(k - 1, 3, 0.3)
        )
        assert same[f"{k}_of_3"]["false_accept_rate"][0] == pytest.approx(
            stats.binom.cdf(k - 1, 3, 0.8)
        )


def test_calls_per_part_and_line_figures():
    p_good, p_bad = np.array([0.2, 0.2, 0.2]), np.array([0.9, 0.9, 0.9])
    got = figures(fixed_nodes(p_good, p_bad), bad_share=0.25)
    # confirm up to 3 times: 1 + p + p^2 + p^3 calls (the geometric sum, closed form)
    expected = 0.75 * (1 - 0.2**4) / 0.8 + 0.25 * (1 - 0.9**4) / 0.1
    assert got["confirm_same_3"]["calls_per_part"][0] == pytest.approx(expected)
    assert got["2_of_3"]["calls_per_part"][0] == 3
    single = got["single"]
    assert single["escaped_per_million"][0] == pytest.approx(1e6 * 0.25 * 0.1)
    assert single["rejected_good_per_million"][0] == pytest.approx(1e6 * 0.75 * 0.2)
    # Bayes' rule for the shipped parts (docs/statistics.md table)
    assert single["shipped_bad_share"][0] == pytest.approx(0.25 * 0.1 / (0.25 * 0.1 + 0.75 * 0.8))


# ---------------------------------------------------------------------------
# limits


def test_no_bad_parts_no_escapes_and_perfect_appraisers_make_strategies_equal():
    rng = np.random.default_rng(0)
    got = figures(fixed_nodes(rng.uniform(0, 0.3, 3), rng.uniform(0.6, 1, 3)), bad_share=0.0)
    assert all(f["escaped_per_million"][0] == 0 for f in got.values())
    perfect = figures(fixed_nodes(np.zeros(3), np.ones(3)))
    for f in perfect.values():
        assert f["false_reject_rate"][0] == 0 and f["false_accept_rate"][0] == 0


@pytest.mark.parametrize("seed", range(5))
def test_confirming_never_raises_good_rejected_and_k_of_n_is_monotone(seed):
    rng = np.random.default_rng(seed)
    p = rng.uniform(0.01, 0.99, (2, 1, 6, 3, 4))
    inner = rng.dirichlet(np.ones(4))
    weights = tuple(rng.dirichlet(np.ones(6), 2))
    nodes = CallNodes(1, weights, inner, lambda block, status: p[status])
    got = figures(nodes)
    single = got["single"]["rejected_good_per_million"][0]
    for k in (1, 3):
        assert got[f"confirm_same_{k}"]["rejected_good_per_million"][0] <= single + 1e-9
    assert got["confirm_other"]["rejected_good_per_million"][0] <= single + 1e-9
    frr = [got[f"{k}_of_3"]["false_reject_rate"][0] for k in (1, 2, 3)]
    far = [got[f"{k}_of_3"]["false_accept_rate"][0] for k in (1, 2, 3)]
    assert frr[0] >= frr[1] >= frr[2] and far[0] <= far[1] <= far[2]


def test_probability_cheapest_sums_to_one_and_the_decision_follows_the_costs():
    rng = np.random.default_rng(1)
    draws = 40
    p = rng.uniform(0.02, 0.98, (2, draws, 3, 3, 1))
    thirds = np.full(3, 1 / 3)
    nodes = CallNodes(draws, (thirds, thirds), np.ones(1), lambda block, status: p[status, block])
    line = line_draws(nodes, rng.uniform(0.01, 0.05, draws), np.full(3, 1 / 3),
                      default_strategies(3))  # fmt: skip
    add_costs(line, Costs(false_reject=5.0, escape=500.0, call=0.1))
    cheapest = probability_cheapest(line)
    assert sum(cheapest.values()) == pytest.approx(1.0)
    rows = [
        {"name": n, "description": n, "criteria": [], "meets_criteria": None,
         "figures": {"cost_per_1000": {"mean": float(f["cost_per_1000"].mean())},
                     "calls_per_part": {"mean": float(f["calls_per_part"].mean())}}}
        for n, f in line.strategies.items()
    ]  # fmt: skip
    chosen = decision(rows, has_costs=True)["chosen"]
    assert chosen == min(rows, key=lambda r: r["figures"]["cost_per_1000"]["mean"])["name"]
    assert decision(rows, has_costs=False) is None  # figures only, no verdict unasked


# ---------------------------------------------------------------------------
# the status families' production calls against numerical integration and simulation


def status_posterior(mu, b, sigma_part, sigma_interaction):
    """One posterior draw of a status model with known parameters."""
    return xr.Dataset({
        "intercept": (("chain", "draw", "status"), np.array(mu, float)[None, None]),
        "appraiser_effect": (("chain", "draw", "appraiser", "status"), np.array(b)[None, None]),
        "sigma_part": (("chain", "draw"), np.array([[sigma_part]])),
        "sigma_interaction": (("chain", "draw"), np.array([[sigma_interaction]])),
    })  # fmt: skip


STUDY = SimpleNamespace(parts=["P1"], appraisers=["A", "B", "C"])


@pytest.mark.parametrize("sigma", [0.3, 1.5, 3.0])
def test_production_calls_integrate_like_quad(sigma):
    mu, b = (-2.0, 1.5), [[0.3, -0.4], [0.0, 0.2], [-0.5, 0.6]]
    nodes = production_calls(status_posterior(mu, b, sigma, sigma / 2), None, STUDY, None)
    got = figures(nodes, (Strategy("single"), Strategy("confirm_same", k=1)))

    total = np.hypot(sigma, sigma / 2)

    def mean_over_appraisers(status, power):
        # One appraiser's repeat calls share both the part and the appraiser-by-part
        # effect, so only their sum z ~ N(0, total) matters: scipy.integrate.quad over z.
        return np.mean([
            integrate.quad(lambda z, j=j: expit(mu[status] + b[j][status] + z) ** power
                           * stats.norm.pdf(z, 0, total), -np.inf, np.inf)[0]
            for j in range(3)
        ])  # fmt: skip

    assert got["single"]["false_reject_rate"][0] == pytest.approx(
        mean_over_appraisers(0, 1), abs=1e-6)  # fmt: skip
    assert got["confirm_same_1"]["false_accept_rate"][0] == pytest.approx(
        1 - mean_over_appraisers(1, 2), abs=1e-6)  # fmt: skip


def simulate_line(mu, b, sigma_part, sigma_interaction, bad_share, parts, seed):
    """Brute force: production parts, every call drawn, every strategy decided."""
    rng = np.random.default_rng(seed)
    b = np.asarray(b)
    bad = rng.random(parts) < bad_share
    u = rng.normal(0, sigma_part, parts)
    v = rng.normal(0, sigma_interaction, (parts, 3))
    eta = np.where(bad, mu[1], mu[0])[:, None] + b[:, bad.astype(int)].T + u[:, None] + v
    p = expit(eta)
    first = rng.integers(0, 3, parts)  # the line's appraiser of each part, equal shares
    rows = np.arange(parts)
    call = rng.random((parts, 3, 3)) < p[:, :, None]  # 3 repeat calls per appraiser
    single = call[rows, first, 0]
    again = single & call[rows, first, 1]
    other = (first + rng.integers(1, 3, parts)) % 3
    confirm_other = single & call[rows, other, 0]
    two_of_three = call[:, :, 0].sum(axis=1) >= 2
    out = {}
    for name, rejected in (
        ("single", single),
        ("confirm_same_1", again),
        ("confirm_other", confirm_other),
        ("2_of_3", two_of_three),
    ):
        out[name] = {
            "escaped_per_million": 1e6 * np.mean(bad & ~rejected),
            "rejected_good_per_million": 1e6 * np.mean(~bad & rejected),
        }  # fmt: skip
    return out


def test_strategies_match_a_brute_force_simulation_of_the_line():
    mu, b = (-2.5, 2.0), [[0.8, -0.5], [0.0, 0.3], [-0.6, 0.9]]
    nodes = production_calls(status_posterior(mu, b, 1.2, 0.7), None, STUDY, None)
    strategies = (Strategy("single"), Strategy("confirm_same", k=1), Strategy("confirm_other"),
                  Strategy("k_of_n", k=2, n=3))  # fmt: skip
    got = figures(nodes, strategies, bad_share=0.2)
    parts = 400_000
    sim = simulate_line(mu, b, 1.2, 0.7, 0.2, parts, seed=11)
    for name, values in sim.items():
        for key, simulated in values.items():
            share = simulated / 1e6
            se = 1e6 * np.sqrt(share * (1 - share) / parts)
            assert abs(got[name][key][0] - simulated) < 4 * se, (name, key)
    # the wrong way (multiplying system rates) is measurably off: the check can fail
    product = got["single"]["false_reject_rate"][0] ** 2 * 0.8 * 1e6
    assert abs(product - sim["confirm_same_1"]["rejected_good_per_million"]) > 10 * se


# ---------------------------------------------------------------------------
# the production file


def test_a_range_becomes_the_matching_beta():
    a, b = beta_matching(0.01, 0.04)
    # scipy.stats.beta.ppf at the 2.5% and 97.5% points
    assert stats.beta.ppf([0.025, 0.975], a, b) == pytest.approx([0.01, 0.04], rel=1e-4)
    mix = parse_production("bad_share = [0.01, 0.04]\n")
    draws = mix.bad_share_draws(20_000, seed=1)
    assert np.quantile(draws, [0.025, 0.975]) == pytest.approx([0.01, 0.04], rel=0.05)


@pytest.mark.parametrize(
    ("text", "quoted"),
    [
        ("bad_share = 1.5", "1.5"),
        ("bad_share = [0.04, 0.01]", "[0.04, 0.01]"),
        ("bad_share = 0.02\n[costs]\nfalse_reject = -1\nescape = 2", "-1"),
        ("bad_share = 0.02\n[costs]\nescape = 2", "false_reject"),
        ("bad_share = 0.02\n[[strategy]]\nkind = 'k_of_n'\nk = 3\nn = 2", "k = 3"),
        ("bad_share = 0.02\n[[strategy]]\nkind = 'guess'", "'guess'"),
        ("bad_share = 0.02\nappraiser_shares = {A = 0.7, B = 0.7}", "1.4"),
        ("bad_share = 0.02\nmean = 10\nsd = 1", "both given"),
        ("costs = 3", "no bad_share"),
        ("bad_share = 0.02\nstratum = 1", "unknown key"),
        ("bad_share = 0.02\nstrata = { a = 1.0 }", "both given"),
        ("strata = { a = 0.5, b = 0.2 }", "0.7"),
    ],
)
def test_bad_production_files_are_refused_quoting_the_value(text, quoted):
    with pytest.raises(SpecError) as err:
        parse_production(text, "line.toml")
    assert quoted in str(err.value) and "line.toml" in str(err.value)


def test_cli_refuses_a_production_file_for_a_model_without_wrong_calls(demo_csv, tmp_path):
    line = tmp_path / "line.toml"
    line.write_text("bad_share = 0.02\n")
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(demo_csv), "--model", "crossed-logit", "--out",
                                 str(out), "--production", str(line), "--quiet"])  # fmt: skip
    assert result.exit_code == 2, result.output
    assert "wrong-call rates" in result.stderr and len(result.stderr.strip().splitlines()) == 1
    assert not out.exists()


def test_cli_refuses_production_criteria_without_a_production_file(demo_csv, tmp_path):
    criteria = tmp_path / "c.toml"
    criteria.write_text("[[criterion]]\nkey = 'escaped_per_million'\nscope = 'production'\n"
                        "below = 500\nrequired_probability = 0.95\n")  # fmt: skip
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(demo_csv), "--out", str(out), "--criteria",
                                 str(criteria), "--quiet"])  # fmt: skip
    assert result.exit_code == 2 and "--production" in result.stderr
    assert not out.exists()


def test_cli_refuses_shares_of_appraisers_the_study_lacks(demo_csv, tmp_path):
    line = tmp_path / "line.toml"
    line.write_text("bad_share = 0.02\nappraiser_shares = {Ayla = 0.5, Zed = 0.5}\n")
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(demo_csv), "--out", str(out), "--production",
                                 str(line), "--quiet"])  # fmt: skip
    assert result.exit_code == 2 and "Zed" in result.stderr
    assert not out.exists()


# ---------------------------------------------------------------------------
# end to end (one fit of the demo, shared)


@pytest.fixture(scope="module")
def demo_line(demo_csv, tmp_path_factory):
    root = tmp_path_factory.mktemp("line")
    line = root / "line.toml"
    line.write_text(
        "bad_share = [0.01, 0.04]\n[costs]\nfalse_reject = 12\nescape = 400\ncall = 0.5\n"
    )
    criteria = root / "criteria.toml"
    criteria.write_text("[[criterion]]\nkey = 'escaped_per_million'\nscope = 'production'\n"
                        "below = 20000\nrequired_probability = 0.9\n")  # fmt: skip
    out = root / "fit"
    result = runner.invoke(app, ["fit", str(demo_csv), "--out", str(out), "--production",
                                 str(line), "--criteria", str(criteria), "--seed", "2",
                                 "--quiet"])  # fmt: skip
    assert result.exit_code == 0, result.output
    return out, result.stdout


def test_fit_with_production_writes_rows_strategies_and_decision(demo_line):
    out, stdout = demo_line
    summary = json.loads((out / "summary.json").read_text())
    rows = [r for r in summary["estimands"] if r["scope"] == "production"]
    keys = {(r["key"], r["level"]) for r in rows}
    for key in ("escaped_per_million", "rejected_good_per_million", "shipped_bad_share"):
        assert (key, "system") in keys
    assert {r["appraiser"] for r in rows if r["level"] == "appraiser"} == {"Ayla", "Bruno", "Chen"}
    names = [s["name"] for s in summary["strategies"]]
    assert names[0] == "single" and "2_of_3" in names
    cheapest = [s["probability_cheapest"] for s in summary["strategies"]]
    assert sum(cheapest) == pytest.approx(1.0)
    assert summary["production"]["bad_share_range"] == [0.01, 0.04]
    assert summary["decision"]["chosen"] in names
    # the system row is the single strategy's figure
    system = {r["key"]: r for r in rows if r["level"] == "system"}
    single = summary["strategies"][0]["figures"]
    assert system["escaped_per_million"]["mean"] == pytest.approx(
        single["escaped_per_million"]["mean"])  # fmt: skip
    flat = " ".join(stdout.split())
    assert flat.index("escaped bad parts per million") < flat.index("study's parts")


# ---------------------------------------------------------------------------
# guard band of a call curve (docs/statistics.md, "Guard band")


def curve_case(t=10.1, w=0.15):
    import dataclasses

    from bayes_rr.priors.spec import load_spec
    from bayes_rr.simulation.known_truth import simulate_call_curve

    sim = simulate_call_curve(30, 1, 2, effective_limits=(10.0,), widths=(0.2,), seed=1)
    spec = dataclasses.replace(load_spec("call-curve"), link="probit")
    posterior = xr.Dataset({
        "effective_limit": (("chain", "draw", "appraiser", "side"), np.full((1, 1, 1, 1), t)),
        "curve_scale": (("chain", "draw", "appraiser"), np.full((1, 1, 1), w)),
    })  # fmt: skip
    return sim.study, spec, posterior


def probit_escaped(g, t, w, limit, mean, sd):
    """Bad parts accepted per million with the gauge moved in by g, probit curve, normal
    production: with V = X - w Z, accept is V < t - g, and P(accept, X > L) =
    P(V < t - g) - P(X <= L, V < t - g) (scipy.stats.multivariate_normal)."""
    cov = [[sd**2, sd**2], [sd**2, sd**2 + w**2]]
    both = stats.multivariate_normal([mean, mean], cov).cdf([limit, t - g])
    return 1e6 * (stats.norm.cdf(t - g, mean, np.sqrt(sd**2 + w**2)) - both)


@pytest.mark.parametrize("target", [200.0, 2000.0])
def test_guard_band_of_a_probit_curve_matches_the_bivariate_normal(target):
    from scipy import optimize

    from bayes_rr.results.decisions import Criterion
    from bayes_rr.results.production import GUARD_RESOLUTION, guard_band, line_result
    from bayes_rr.study.production import ProductionMix

    t, w, mean, sd = 10.1, 0.15, 9.5, 0.3
    study, spec, posterior = curve_case(t, w)
    line = line_result(posterior, spec, study, ProductionMix(mean=mean, sd=sd), seed=0)
    assert line.draws.strategies["single"]["escaped_per_million"][0] == pytest.approx(
        probit_escaped(0.0, t, w, 10.0, mean, sd), rel=1e-3)  # fmt: skip
    exact = optimize.brentq(lambda g: probit_escaped(g, t, w, 10.0, mean, sd) - target, 0, 3)
    criterion = Criterion("escaped_per_million", "production", target, "below", 0.95)
    found = guard_band(posterior, spec, study, line, criterion, 0.95)
    scale = float(study.reference_value.std())
    assert found["reachable"] and found["probability"] >= 0.95
    assert found["shift"] == pytest.approx(exact, abs=2 * GUARD_RESOLUTION * scale)
    assert found["rejected_good_added_per_million"]["mean"] > 0
    # a threshold the limit already meets needs no band
    easy = Criterion("escaped_per_million", "production", 1e6, "below", 0.95)
    assert guard_band(posterior, spec, study, line, easy, 0.95)["shift"] == 0.0


# ---------------------------------------------------------------------------
# strata (docs/statistics.md, "Strata")

STRATIFIED = (
    "part,appraiser,call,reference,stratum\n"
    + "".join(
        f"{part},{app},{call},{ref},{stratum}\n"
        for part, ref, stratum in (("P1", "pass", "clear"), ("P2", "pass", "clear"),
                                   ("P3", "pass", "edge"), ("P4", "fail", "edge"),
                                   ("P5", "fail", "edge"), ("P6", "fail", "clear"))
        for app, call in (("A", "pass"), ("B", "fail"))
    )
)  # fmt: skip


def test_strata_reweight_the_study_parts_to_production(tmp_path):
    from bayes_rr.families.reference_logit import stratified_calls
    from bayes_rr.study.data import read_study

    data = tmp_path / "s.csv"
    data.write_text(STRATIFIED)
    study = read_study(data)
    assert study.design()["strata"] == {"clear": 3, "edge": 3}
    mix = parse_production("strata = { clear = 0.9, edge = 0.1 }\n")
    mu, a = np.array([-2.0, 1.5]), np.array([0.3, -0.2, 0.5, 0.1, -0.4, 0.8])
    b = np.array([[0.2, -0.3], [-0.1, 0.4]])
    posterior = xr.Dataset({
        "intercept": (("chain", "draw", "status"), mu[None, None]),
        "part_effect": (("chain", "draw", "part"), a[None, None]),
        "appraiser_effect": (("chain", "draw", "appraiser", "status"), b[None, None]),
    })  # fmt: skip
    nodes = stratified_calls(posterior, None, study, mix, np.random.default_rng(0))
    got = figures(nodes, (Strategy("single"),), bad_share=nodes.bad_share)["single"]
    # by hand: part weight = stratum share / parts of that stratum in the study
    status = np.array([0, 0, 0, 1, 1, 1])
    weight = np.array([0.3, 0.3, 0.1 / 3, 0.1 / 3, 0.1 / 3, 0.3])
    p = expit(mu[status][:, None] + a[:, None] + b[:, status].T).mean(axis=1)
    good, bad = status == 0, status == 1
    assert nodes.bad_share == pytest.approx(weight[bad].sum())
    frr = (weight[good] * p[good]).sum() / weight[good].sum()
    accepted_bad = (weight[bad] * (1 - p[bad])).sum()
    assert got["false_reject_rate"][0] == pytest.approx(frr)
    assert got["escaped_per_million"][0] == pytest.approx(1e6 * accepted_bad)


@pytest.mark.parametrize(
    ("text", "quoted"),
    [
        ("strata = { clear = 0.9, rework = 0.1 }", "['rework']"),
        ("strata = { clear = 1.0 }", "['edge']"),
    ],
)
def test_strata_must_match_the_data(tmp_path, text, quoted):
    data = tmp_path / "s.csv"
    data.write_text(STRATIFIED)
    line = tmp_path / "line.toml"
    line.write_text(text + "\n")
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(data), "--out", str(out), "--production", str(line),
                                 "--quiet"])  # fmt: skip
    assert result.exit_code == 2, result.output
    assert quoted in result.stderr and not out.exists()


# ---------------------------------------------------------------------------
# planning against production figures


def test_plan_refuses_production_it_cannot_use(tmp_path):
    from bayes_rr.api.planning import plan_request
    from bayes_rr.simulation.plan import check_request

    line = tmp_path / "line.toml"
    line.write_text("bad_share = 0.02\n")
    with pytest.raises(SpecError, match="wrong-call"):
        check_request(plan_request("crossed-logit", production=line))
    with pytest.raises(SpecError, match="--production"):
        check_request(plan_request("reference-logit", target_key="escaped_per_million"))
    strata = tmp_path / "strata.toml"
    strata.write_text("strata = { a = 1.0 }\n")
    with pytest.raises(SpecError, match="no strata"):
        check_request(plan_request("reference-logit", production=strata))


@pytest.mark.slow
def test_plan_gives_the_assurance_of_a_production_criterion(tmp_path):
    from bayes_rr.api.planning import plan

    line = tmp_path / "line.toml"
    line.write_text("bad_share = 0.02\n")
    criteria = tmp_path / "c.toml"
    criteria.write_text("[[criterion]]\nkey = 'escaped_per_million'\nscope = 'production'\n"
                        "below = 1000000\nrequired_probability = 0.5\n")  # fmt: skip
    document = plan(tmp_path / "plan", "reference-logit", parts=20, appraisers=3, trials=2,
                    sims=3, production=line, criteria=criteria, workers=1)  # fmt: skip
    row = document["designs"][0]
    # a threshold of a million per million is met by every converged fit
    assert row["assurance"] == pytest.approx(row["fits_converged"] / 3)
    assert row["expected_width"]["production__system__escaped_per_million"] > 0
    assert document["production"]["bad_share"] == 0.02
