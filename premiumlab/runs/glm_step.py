"""GLM baselines inside a run: inputs from the book, the period as a control factor, the three fits.

With a period control, the period is fitted as a factor of every GLM but never tabled: every row is
predicted at the control's training-exposure-weighted mean relativity.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from premiumlab._core.cluster import IN_PROCESS, TaskRunner
from premiumlab._core.jsonio import write_json
from premiumlab._core.progress import Progress, Silent
from premiumlab.book.levels import Levels
from premiumlab.book.rows import Book
from premiumlab.book.spec import Spec
from premiumlab.experience.adjustments import Adjustment, period_order
from premiumlab.models.glm.fit import GlmInputs, GlmResult, fit_frequency, fit_pure_premium, fit_severity
from premiumlab.runs.rundir import RunDir, model_name


@dataclass(frozen=True)
class PeriodControl:
    """The period as a control factor: its name, level of every row, base and training exposure."""

    name: str
    values: pd.Categorical
    base: str
    exposure: np.ndarray


def period_control(periods: np.ndarray, exposure: np.ndarray, train: np.ndarray, name: str) -> PeriodControl:
    """The period column as a control factor, its base the period with the largest training exposure.

    Parameters
    ----------
    periods : np.ndarray
        Period label of every book row.
    exposure : np.ndarray
        Exposure of every book row, in the book's exposure unit (e.g. policy-years).
    train : np.ndarray
        Boolean mask of the training rows.
    name : str
        The period column's name, which the control factor takes.

    Returns
    -------
    PeriodControl
        The periods as an ordered categorical (levels: the training rows' periods in period order),
        the base, and the training exposure per period.
    """
    order = period_order(periods[train].tolist())
    values = pd.Categorical(periods, categories=order, ordered=True)
    expo = np.bincount(values.codes[train], weights=exposure[train], minlength=len(order))
    return PeriodControl(name, values, order[int(np.argmax(expo))], expo)


def _glm_inputs(
    book: Book,
    cats: pd.DataFrame,
    levels: dict[str, Levels],
    rows: np.ndarray,
    count_multiplier: np.ndarray | None = None,
    control: Sequence[str] = (),
) -> GlmInputs:
    """GLM inputs on the selected rows.

    `count_multiplier` m (adjusted counts are the book's integer counts x m) enters as exposure / m
    with the amount / m: the frequency count / (exposure / m) and the severity (amount / m) / count
    are then the adjusted ones (the Poisson weight of a row becomes exposure / m). For the pure
    premium, pass no multiplier. `control` names factors in `cats` fitted but never tabled.
    """
    m = 1.0 if count_multiplier is None else count_multiplier[rows]
    return GlmInputs(
        factors=cats.loc[rows].reset_index(drop=True),
        base_levels={k: v.base for k, v in levels.items()},
        exposure=book.exposure[rows] / m,
        claim_count=book.claim_count[rows],
        claim_amount=None if book.claim_amount is None else book.claim_amount[rows] / m,
        control=list(control),
    )


def fit_glms(
    book: Book,
    cats: pd.DataFrame,
    levels: dict[str, Levels],
    train: np.ndarray,
    spec: Spec,
    run: RunDir,
    preds: pd.DataFrame,
    has_amount: bool,
    adjustment: Adjustment | None = None,
    control: PeriodControl | None = None,
    runner: TaskRunner = IN_PROCESS,
    progress: Progress | None = None,
) -> float | None:
    """Fit the three GLMs on the training rows, write them to the run's models/ and add their
    predictions of every row to `preds`; with a period control, predict at the control's
    training-exposure-weighted mean relativity (the period is never tabled). Returns the pure-premium
    model's Tweedie power (None without claim amounts).

    Parameters
    ----------
    book : Book
        The book with the figures the models are fitted to (adjusted when the run adjusts them).
    cats : pd.DataFrame
        The factors of every book row as categoricals on the run's levels.
    levels : dict[str, Levels]
        Labels, base and band edges of each factor, fixed on the training rows.
    train : np.ndarray
        Boolean mask of the training rows.
    spec : Spec
        The pricing spec: [glm] engine, Tweedie power and penalty.
    run : RunDir
        The run directory being written: models/glm_TARGET.json go there.
    preds : pd.DataFrame
        The predictions frame, one row per book row, changed in place: it gains glm_frequency and,
        with amounts, glm_severity, glm_pure_premium and glm_freq_x_sev (per exposure unit).
    has_amount : bool
        The book has claim amounts: fit the severity and pure-premium GLMs too.
    adjustment : Adjustment or None
        The experience step's result: frequency and severity are fitted on count_base with exposure
        and amount divided by count_multiplier, the pure premium on the adjusted amounts (None: the
        book as it is).
    control : PeriodControl or None
        The period as a control factor (None: no control).
    runner : TaskRunner
        Where the passes over the training rows run (cells' sums, row statistics): this process or
        the workers of a Dask cluster (`premiumlab._core.cluster`); the Newton steps run here.
    progress : Progress or None
        Told as each GLM is fitted (None: nothing is said).

    Returns
    -------
    float or None
        The Tweedie power of the pure-premium GLM (None without claim amounts).
    """
    names: list[str] = []
    if control is not None:
        cats = cats.assign(**{control.name: control.values})
        levels = {**levels, control.name: Levels(control.name, tuple(control.values.categories), control.base)}
        names = [control.name]
    multiplier = None if adjustment is None else adjustment.count_multiplier
    counts = book if adjustment is None else replace(book, claim_count=adjustment.count_base)
    inputs = _glm_inputs(counts, cats, levels, train, multiplier, names)
    whole = _glm_inputs(counts, cats, levels, train, None, names) if multiplier is not None else inputs
    engine, penalty = spec.glm.engine, spec.glm.penalty
    report = progress if progress is not None else Silent()
    results = {"frequency": fit_frequency(inputs, engine=engine, penalty=penalty, runner=runner)}
    report.step("fit: GLM frequency fitted")
    if has_amount:
        results["severity"] = fit_severity(inputs, engine=engine, penalty=penalty, runner=runner)
        report.step("fit: GLM severity fitted")
        results["pure_premium"] = fit_pure_premium(
            whole, power=spec.glm.tweedie_power, engine=engine, penalty=penalty, runner=runner
        )
        report.step(f"fit: GLM pure premium fitted, Tweedie power {results['pure_premium'].power:.2f}")
    for target, res in results.items():
        name = model_name("glm", target)
        preds[name] = res.predict(cats) if control is None else _at_mean_control(res, cats, control)
        write_json(run.model_json("glm", target), res.to_json_dict())
    if has_amount:
        preds["glm_freq_x_sev"] = preds["glm_frequency"] * preds["glm_severity"]
        return results["pure_premium"].power
    return None


def _at_mean_control(res: GlmResult, cats: pd.DataFrame, control: PeriodControl) -> np.ndarray:
    """Predictions with the control factor at its base, times the training-exposure-weighted mean of
    its relativities."""
    rel = res.relativities[control.name]
    mean = sum(rel[level] * e for level, e in zip(control.values.categories, control.exposure)) / control.exposure.sum()
    at_base = cats.assign(
        **{control.name: pd.Categorical(np.full(len(cats), control.base), categories=control.values.categories)}
    )
    return res.predict(at_base) * mean
