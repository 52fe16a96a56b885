"""A fit from Python: :func:`fit` a study, :func:`load` a fit folder, and the
:class:`Fit` both return, with tidy data frames and a notebook display."""

from __future__ import annotations

import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from bayes_rr.core import DEFAULT_PROB
from bayes_rr.core.errors import DataError, OutputError, SpecError
from bayes_rr.study.data import StudyData

SUMMARY_COLUMNS = (
    "key", "level", "scope", "appraiser", "part",
    "mean", "median", "sd", "lower", "upper", "r_hat", "ess_bulk", "ess_tail", "rests_on", "note",
)  # fmt: skip
NUMBER_COLUMNS = ("mean", "median", "sd", "lower", "upper", "r_hat", "ess_bulk", "ess_tail")
RATE_KEYS = ("false_reject_rate", "false_accept_rate", "reference_agreement")
ANSWER_KEYS = (
    "repeat_disagreement",
    "reproducibility_share",
    "repeatability_share",
    "cross_disagreement",
    "limit_spread",
    "transition_width",
)
"""Study-level results the notebook display shows (with the wrong-call rates)."""


@dataclass(frozen=True)
class Fit:
    """A fitted study: results as data frames, draws as ArviZ ``InferenceData``.

    Made by :func:`fit` (in memory until :meth:`save`) or :func:`load` (from a folder).
    """

    study: StudyData
    spec: object
    document: dict
    """The content of the fit folder's summary.json."""
    classical: dict
    run: dict
    posterior: object
    """ArviZ ``InferenceData``: the draws, the cell log likelihood, the observed data and
    every estimand (group ``estimands``)."""
    folder: Path | None = None
    result: object | None = None

    @property
    def converged(self) -> bool:
        """Whether the sampler passed the convergence gate (else no result is to be used)."""
        return bool(self.document["diagnostics"]["ok"])

    @property
    def limitations(self) -> list[str]:
        """What the design cannot answer, one sentence each."""
        return [lim["sentence"] for lim in self.document.get("limitations", [])]

    def summary(self) -> pd.DataFrame:
        """Every result, one row each: ``key``, ``level`` (study, system, appraiser, part),
        ``scope`` (study, population or production), ``appraiser``, ``part``, the
        posterior ``mean``, ``median``, ``sd``, the interval (``lower``, ``upper``),
        ``r_hat``, ``ess_bulk``, ``ess_tail``, ``rests_on`` ("data"; "prior only" or
        "design" where the study's design cannot inform the row: read its numbers as the
        prior's or as fixed, not as measured) and ``note`` (why)."""
        frame = pd.DataFrame(self.document["estimands"])
        for column in SUMMARY_COLUMNS:
            if column not in frame:
                frame[column] = None
        notes = frame["note"].fillna("").astype(str)
        frame["rests_on"] = np.select(
            [
                notes.str.startswith("set by the prior"),
                notes.str.startswith("fixed by construction"),
            ],
            ["prior only", "design"],
            "data",
        )
        frame = frame.loc[:, list(SUMMARY_COLUMNS)]
        for column in NUMBER_COLUMNS:
            frame[column] = pd.to_numeric(frame[column], errors="coerce").astype("float64")
        for column in ("key", "level", "scope", "appraiser", "part", "note"):
            frame[column] = frame[column].astype("object").where(frame[column].notna(), None)
        return frame

    def rates(self) -> pd.DataFrame:
        """The false reject and false accept rates (and agreement with the reference),
        per appraiser and for the system, in both scopes."""
        frame = self.summary()
        frame = frame[frame["key"].isin(RATE_KEYS)].reset_index(drop=True)
        if frame.empty:
            raise SpecError(
                f"the model {self.spec.name!r} gives no false reject or false accept rates; "
                "fit a model that does: reference-logit (a reference status per part), "
                "latent-class (none) or call-curve (a measured value and a limit)"
            )
        return frame

    def strategies(self) -> pd.DataFrame:
        """The inspection strategies compared on the line, one row each: ``strategy``,
        ``description``, and for each figure (``calls_per_part``, ``escaped_per_million``,
        ``rejected_good_per_million``, ``false_reject_rate``, ``false_accept_rate``,
        ``shipped_bad_share``, ``cost_per_1000`` with costs) its posterior mean and
        interval (``<figure>``, ``<figure>_lower``, ``<figure>_upper``), then
        ``probability_cheapest`` and ``meets_criteria``."""
        rows = self.document.get("strategies")
        if not rows:
            raise SpecError(
                "this fit has no production figures; fit with production= (a production "
                "file: bad_share, costs, strategies) and a model with wrong-call rates"
            )
        records = []
        for row in rows:
            record = {"strategy": row["name"], "description": row["description"]}
            for key, figure in row["figures"].items():
                record[key] = figure["mean"]
                record[f"{key}_lower"] = figure["lower"]
                record[f"{key}_upper"] = figure["upper"]
            record["probability_cheapest"] = row["probability_cheapest"]
            record["meets_criteria"] = row["meets_criteria"]
            records.append(record)
        return pd.DataFrame(records)

    @property
    def decision(self) -> dict | None:
        """The strategy the costs and production criteria point to (``chosen``, or
        ``closest`` when none meets them, and a ``sentence``); None when neither was
        given."""
        return self.document.get("decision")

    def check(self, draws: int = 500, seed: int = 0) -> dict:
        """Posterior and prior predictive checks (what ``bayes-rr check`` computes); writes
        nothing."""
        from bayes_rr.checks.predictive import (
            dependence_sentence,
            posterior_predictive_check,
            prior_predictive,
        )

        ppc = posterior_predictive_check(
            self.posterior.posterior, self.spec, self.study, draws=draws, seed=seed
        )
        return {
            "posterior_predictive": ppc.as_dict(),
            "prior_predictive": prior_predictive(self.spec, self.study, draws=draws, seed=seed),
            "dependence": dependence_sentence(ppc, self.spec),
            "converged": self.converged,
        }

    def save(self, folder: str | Path, *, overwrite: bool = False, keep_all_draws: bool = False):
        """Write the fit folder (as ``bayes-rr fit --out``); returns its path."""
        from bayes_rr.io.fit_folder import write_fit

        if self.result is None:
            raise OutputError(
                f"this fit was read from {self.folder}; it is saved there already (copy that "
                "folder to keep another copy)"
            )
        return write_fit(self.result, Path(folder), overwrite=overwrite, classical=self.classical,
                         keep_all_draws=keep_all_draws)  # fmt: skip

    def report(self, path: str | Path, *, title: str | None = None, site: str | None = None,
               notes: str | None = None, overwrite: bool = False) -> Path:  # fmt: skip
        """Write the self-contained HTML report (``path`` ends in .html). A fit not yet
        saved is written to a temporary folder for it, removed afterwards."""
        from bayes_rr.workflow.steps import report_fit

        if self.folder is not None:
            return report_fit(self.folder, path, title=title, site=site, notes=notes,
                              overwrite=overwrite)  # fmt: skip
        with tempfile.TemporaryDirectory(prefix="bayes-rr-") as tmp:
            folder = self.save(Path(tmp) / "fit")
            return report_fit(folder, path, title=title, site=site, notes=notes,
                              overwrite=overwrite, folder_label="(not saved)")  # fmt: skip

    def __repr__(self) -> str:
        state = "converged" if self.converged else "NOT CONVERGED"
        where = f", folder {self.folder}" if self.folder else ""
        return (f"<bayes_rr.Fit: model {self.spec.name}, {len(self.study.parts)} parts x "
                f"{len(self.study.appraisers)} appraisers, {state}{where}>")  # fmt: skip

    def _repr_html_(self) -> str:
        from bayes_rr.api.display import answer_table

        return answer_table(self)


def fit(
    study: StudyData | str | Path | pd.DataFrame,
    model: str | Path | None = None,
    *,
    seed: int | None = None,
    draws: int | None = None,
    tune: int | None = None,
    chains: int | None = None,
    prior_from: str | Path | Fit | None = None,
    prior_weight: float = 1.0,
    criteria: str | Path | Sequence | None = None,
    prob: float = DEFAULT_PROB,
    interval: str = "eti",
    production=None,
    progress: bool = False,
) -> Fit:
    """Fit a Bayesian model to a study (nothing is written; :meth:`Fit.save` writes).

    Parameters
    ----------
    study
        A study from :func:`read_study`, or a path or DataFrame it can read.
    model
        A bundled model name (``"crossed-logit"``, ...) or a spec file; default: the
        model the data suit (reference-logit with a reference status, call-curve with a
        measured value and a limit, crossed-logit otherwise).
    seed, draws, tune, chains
        Sampler settings (default: the spec's; without ``draws``, a first stage of
        1,000 draws a chain and the full number only when the convergence gate asks).
    prior_from, prior_weight
        An earlier fit (folder or :class:`Fit` loaded from one) as prior, discounted
        by the weight in (0, 1].
    criteria
        A criteria file (TOML), or criteria from ``bayes_rr.results.decisions``.
    prob, interval
        Interval probability and kind (``"eti"`` equal-tailed or ``"hdi"``).
    production
        What is known of the line: a production file (TOML path), or a
        :class:`bayes_rr.study.production.ProductionMix` (models with wrong-call rates).
        Adds the production-scope rows, the strategies compared and the decision
        (``Fit.strategies``, ``Fit.decision``).
    """
    from bayes_rr.api.reading import read_study
    from bayes_rr.families import default_model
    from bayes_rr.inference.sampling import SamplerSettings
    from bayes_rr.io.fit_folder import summary_document
    from bayes_rr.priors.spec import load_spec
    from bayes_rr.results.decisions import check_keys, criteria_from_rows, load_criteria
    from bayes_rr.study.classical import classical_statistics
    from bayes_rr.workflow.fit import fit_study

    if interval not in ("hdi", "eti"):
        raise DataError(f"interval={interval!r}: expected 'hdi' or 'eti'")
    wanted = load_criteria(criteria) if isinstance(criteria, (str, Path)) else tuple(criteria or ())
    check_keys(wanted)
    if isinstance(production, (str, Path)):
        from bayes_rr.study.production import read_production

        production = read_production(production)
    spec = load_spec(model) if model is not None else None
    if not isinstance(study, StudyData):
        study = read_study(study)
    earlier = None
    if prior_from is not None:
        from bayes_rr.io.fit_folder import load_fit
        from bayes_rr.priors.earlier import as_dict, prior_from_fit

        folder = prior_from.folder if isinstance(prior_from, Fit) else prior_from
        if folder is None:
            raise OutputError("prior_from: save the earlier fit first and give its folder")
        loaded = load_fit(folder)
        spec, approximations = prior_from_fit(loaded, prior_weight, spec)
        earlier = as_dict(spec.earlier, approximations)
        if criteria is None and loaded.summary.get("criteria"):
            wanted = criteria_from_rows(loaded.summary["criteria"], str(folder))
    if spec is None:
        spec = load_spec(default_model(study)[0])
    settings = SamplerSettings.from_spec(spec, draws=draws, tune=tune, chains=chains, seed=seed,
                                         progress=progress)  # fmt: skip
    result = fit_study(study, spec, settings, prob=prob, interval=interval,
                       production=production, criteria=wanted, prior_from=earlier,
                       two_stage=draws is None)  # fmt: skip
    return Fit(
        study=study,
        spec=spec,
        document=summary_document(result),
        classical=classical_statistics(study, prob).as_dict(),
        run=result.provenance,
        posterior=_with_estimands(result),
        result=result,
    )


def _with_estimands(result):
    """The fit's InferenceData with the estimand draws as group ``estimands``, as a fit
    folder's posterior.nc holds them (the groups are shared, not copied)."""
    import arviz as az

    groups = {name: result.idata[name] for name in result.idata.groups()}
    return az.InferenceData(**groups, estimands=result.estimands)


def load(folder: str | Path) -> Fit:
    """Read a fit folder written by ``bayes-rr fit`` or :meth:`Fit.save`."""
    from bayes_rr.io.fit_folder import load_fit

    loaded = load_fit(folder)
    return Fit(
        study=loaded.study,
        spec=loaded.spec,
        document=loaded.summary,
        classical=loaded.classical,
        run=loaded.run,
        posterior=loaded.idata,
        folder=loaded.folder,
    )
