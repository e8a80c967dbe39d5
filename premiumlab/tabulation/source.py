"""Which of a run's pure-premium models a table is made from, and why.

Candidates (docs/commands.md, `tabulate --model`), each a prediction column of predictions.parquet:
`gbm` (the direct boosted Tweedie model, gbm_pure_premium), `gbm_freq_sev` (the boosted frequency
times the boosted severity, gbm_freq_x_sev), `glm` (the Tweedie GLM, glm_pure_premium) and
`glm_freq_sev` (the Poisson frequency GLM times the gamma severity GLM, glm_freq_x_sev).

Criterion: the mean Tweedie deviance of the pure premium per exposure unit on the holdout rows,
sum_i w_i d(y_i, mu_i) / sum_i w_i with y = claim amount / exposure and w = exposure, at the run's
Tweedie power: exactly the figure `fit` writes to metrics.json and `compare` reports
(`premiumlab.evaluation.holdout.holdout_metrics`). Lower is better; `auto` takes the lowest (the
first in the order above on a tie). A run without a holdout is scored on its training rows, which
favours the boosted models; the criterion says so.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError

#: Candidate -> its prediction column in predictions.parquet, in the order ties are broken.
SOURCES: dict[str, str] = {
    "gbm": "gbm_pure_premium",
    "gbm_freq_sev": "gbm_freq_x_sev",
    "glm": "glm_pure_premium",
    "glm_freq_sev": "glm_freq_x_sev",
}
#: The boosted candidates and the boosters whose raw scores add up to the source's log score.
BOOSTED_SOURCES: dict[str, tuple[str, ...]] = {"gbm": ("pure_premium",), "gbm_freq_sev": ("frequency", "severity")}
#: The GLM candidates and the GLM targets whose relativities multiply into the table's.
GLM_SOURCES: dict[str, tuple[str, ...]] = {"glm": ("pure_premium",), "glm_freq_sev": ("frequency", "severity")}
AUTO = "auto"
#: `--model` values: the automatic choice, then the candidates.
MODEL_CHOICES = (AUTO, *SOURCES)


@dataclass(frozen=True)
class SourceChoice:
    """The table's source model and the figures it was chosen on.

    model: the candidate used (a key of SOURCES); requested: `--model` as given; criterion: the
    sentence stating the rule and the rows; candidates: per candidate present, holdout
    `mean_deviance` and `gini`; best: the candidate with the lowest deviance; diagnostics: a
    `weak_source` warning when the requested model is not the best.
    """

    model: str
    requested: str
    criterion: str
    rows: str
    power: float
    candidates: dict[str, dict[str, float]]
    best: str
    diagnostics: list[Diagnostic] = field(default_factory=list)

    @property
    def column(self) -> str:
        """The source's prediction column in predictions.parquet."""
        return SOURCES[self.model]

    def to_dict(self) -> dict:
        """The choice as stored in fidelity.json's `source` (docs/rating-table.md)."""
        return {
            "model": self.model,
            "requested": self.requested,
            "best": self.best,
            "criterion": self.criterion,
            "rows": self.rows,
            "tweedie_power": self.power,
            "candidates": self.candidates,
        }


def candidate_scores(preds: pd.DataFrame, power: float) -> tuple[dict[str, dict[str, float]], str]:
    """Holdout mean deviance and Gini of the pure premium of every candidate present in `preds`.

    Parameters
    ----------
    preds : pd.DataFrame
        predictions.parquet on the fitted basis (`premiumlab.runs.experience_step.fitted_basis`):
        `holdout`, exposure, claim count, claim amount and the candidates' columns.
    power : float
        The run's Tweedie power (the GLM's; `FALLBACK_TWEEDIE_POWER` without a GLM), as `fit` and
        `compare` use it.

    Returns
    -------
    tuple of (dict, str)
        Per candidate: `mean_deviance` (sum w d(y, mu) / sum w, y in money per exposure unit, w
        exposure) and `gini`, as `holdout_metrics` computes them; and the rows measured ("holdout",
        or the training rows when the run has none).
    """
    from premiumlab.evaluation.holdout import holdout_metrics

    rows = "holdout"
    if not preds["holdout"].any():
        preds, rows = preds.assign(holdout=True), "training (the run has no holdout)"
    metrics = holdout_metrics(preds, power)["pure_premium"]["models"]
    scores = {
        name: {"mean_deviance": metrics[column]["mean_deviance"], "gini": metrics[column]["gini"]}
        for name, column in SOURCES.items()
        if column in metrics
    }
    return scores, rows


def choose_source(
    scores: dict[str, dict[str, float]], requested: str, rows: str, power: float, where: str
) -> SourceChoice:
    """The source of the table: the requested candidate, or with `auto` the lowest mean deviance.

    Parameters
    ----------
    scores : dict
        Per candidate present: `mean_deviance` and `gini` (`candidate_scores`).
    requested : str
        `auto` or one of SOURCES.
    rows : str
        The rows the scores were measured on.
    power : float
        The Tweedie power of the deviance.
    where : str
        The file named in a refusal (predictions.parquet).

    Returns
    -------
    SourceChoice
        The model, the criterion, every candidate's figures, the best candidate and, when the
        requested model is not the best, a `weak_source` diagnostic naming both deviances.

    Raises
    ------
    InputError
        An unknown `requested`, no candidate at all, or a requested candidate without predictions.
    """
    if requested not in MODEL_CHOICES:
        raise InputError(f"--model: unknown model '{requested}'; use {', '.join(MODEL_CHOICES)}")
    if not scores:
        raise InputError(f"{where}: no pure-premium predictions ({', '.join(SOURCES.values())}); fit the run first")
    best = min(scores, key=lambda name: (scores[name]["mean_deviance"], list(SOURCES).index(name)))
    model = best if requested == AUTO else requested
    if model not in scores:
        raise InputError(f"{where}: no column '{SOURCES[model]}'; fit the run with that model first")
    criterion = (
        f"lowest mean Tweedie deviance (power {power:.4g}) of the pure premium per exposure unit on the {rows} rows"
    )
    diagnostics = []
    if model != best:
        diagnostics.append(
            Diagnostic(
                kind="weak_source",
                model=SOURCES[model],
                message=(
                    f"--model {model} is not the best source on the {rows} rows: its mean deviance "
                    f"{scores[model]['mean_deviance']:.6g} against {scores[best]['mean_deviance']:.6g} for {best}"
                ),
            )
        )
    return SourceChoice(model, requested, criterion, rows, power, scores, best, diagnostics)
