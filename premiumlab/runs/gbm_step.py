"""Boosted models inside a run: options from the spec, the three targets, certificate and H statistic."""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from premiumlab._core.cluster import IN_PROCESS, TaskRunner
from premiumlab._core.jsonio import write_json
from premiumlab._core.progress import Progress, Silent
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.book.rows import Book
from premiumlab.book.spec import Spec
from premiumlab.models.gbm.features import features_from_spec
from premiumlab.models.targets import TARGETS
from premiumlab.runs.rundir import RunDir, model_name

if TYPE_CHECKING:
    from premiumlab.models.gbm.fit import GbmModel
    from premiumlab.models.gbm.training import GbmInputs

#: Held-out policies swept per promised factor by the empirical monotonicity check.
SWEEP_POLICIES = 1000


def _gbm_options(spec: Spec, glm_power: float | None) -> GbmOptions:
    """The spec's [gbm] options; a Tweedie power not fixed there is the GLM's (`glm_power`, if fitted)."""
    return spec.gbm if spec.gbm.tweedie_power is not None else replace(spec.gbm, tweedie_power=glm_power)


def fit_gbms(
    book: Book,
    spec: Spec,
    train: np.ndarray,
    glm_power: float | None,
    run: RunDir,
    preds: pd.DataFrame,
    runner: TaskRunner = IN_PROCESS,
    progress: Progress | None = None,
) -> None:
    """Fit frequency, severity and pure-premium models on the training rows (the search's fits on
    `runner`); write models, the monotonicity certificate and the interaction ranking; add
    predictions for every row.

    Parameters
    ----------
    book : Book
        The book with the figures the models are fitted to (adjusted when the run adjusts them);
        without claim amounts only the frequency model is fitted.
    spec : Spec
        The pricing spec: factors and their monotone promises, [gbm] options, the split's seed.
    train : np.ndarray
        Boolean mask of the training rows.
    glm_power : float or None
        The Tweedie power of the GLM's pure-premium fit, used when [gbm] fixes none (None: no GLM).
    run : RunDir
        The run directory being written: models/gbm_TARGET.txt and .json, certificate.json and
        interactions.json go there.
    preds : pd.DataFrame
        The predictions frame, one row per book row, changed in place: it gains gbm_TARGET per
        fitted target (per exposure unit) and, with a severity model, gbm_freq_x_sev.
    runner : TaskRunner
        Where the cross-validation search's (setting, fold) fits run (default: this process).
    progress : Progress or None
        Told as each boosted model is fitted and when the checks of the models are written (None:
        nothing is said).
    """
    from premiumlab.models.gbm.fit import fit_target
    from premiumlab.models.gbm.training import GbmInputs

    features = features_from_spec(book.frame, spec)
    monotone = {f.name: f.direction for f in spec.factors if f.direction != 0}
    groups = pd.factorize(book.policy[train])[0]
    inputs = GbmInputs(
        features=features.loc[train].reset_index(drop=True),
        monotone=monotone,
        exposure=book.exposure[train],
        claim_count=book.claim_count[train],
        claim_amount=None if book.claim_amount is None else book.claim_amount[train],
        groups=groups,
    )
    options = _gbm_options(spec, glm_power)
    targets = [name for name, t in TARGETS.items() if book.claim_amount is not None or not t.needs_amount]
    report = progress if progress is not None else Silent()
    models = {}
    for target in targets:
        model = fit_target(inputs, target, options, runner)
        run.model_text("gbm", target).write_text(model.model_text(), encoding="utf-8")
        write_json(run.model_json("gbm", target), model.to_json_dict())
        preds[model_name("gbm", target)] = model.predict(features)
        models[target] = model
        report.step(f"fit: boosted {target.replace('_', ' ')} model searched and fitted")
    if "severity" in models:
        preds["gbm_freq_x_sev"] = preds["gbm_frequency"] * preds["gbm_severity"]
    main = models.get("pure_premium", models["frequency"])
    write_json(run.certificate, _certify_run(models, features, book.holdout, spec))
    write_json(run.interactions, _rank_interactions(main, inputs, options, spec))
    report.step("fit: monotonicity certified and interactions ranked")


def _certify_run(models: dict[str, GbmModel], features: pd.DataFrame, holdout: np.ndarray, spec: Spec) -> dict:
    """Structural certificate and empirical sweep for every promised factor of each constrained model."""
    from premiumlab.models.trees.certificate import certify, sweep

    rng = np.random.default_rng(spec.split.seed)
    pool = np.flatnonzero(holdout) if holdout.any() else np.arange(len(features))
    take = rng.choice(pool, size=min(SWEEP_POLICIES, len(pool)), replace=False)
    sample = features.iloc[np.sort(take)].reset_index(drop=True)
    out = {}
    for target, model in models.items():
        if not model.monotone:
            continue
        text = model.model_text()
        out[target] = {
            name: {"certificate": certify(text, name, d), "sweep": sweep(model, sample, name, d)}
            for name, d in model.monotone.items()
        }
    return {
        "models": out,
        "sweep_policies": len(sample),
        "sweep_rows": "held-out policies" if holdout.any() else "training policies (no holdout)",
    }


def _rank_interactions(model: GbmModel, inputs: GbmInputs, options: GbmOptions, spec: Spec) -> dict:
    """interactions.json: the main model's pairs of factors ranked by interaction strength, each with
    its bootstrap interval and its test against refits to books without interaction, seeded by the
    split's seed (`premiumlab.models.trees.interactions.rank_interactions`)."""
    from premiumlab.models.gbm.training import prepare_training
    from premiumlab.models.trees.interactions import rank_interactions

    rows = TARGETS[model.target].rows(inputs.claim_count, inputs.claim_amount)
    data = prepare_training(inputs, model.target, options)
    return rank_interactions(model, data, inputs.claim_count[rows], seed=spec.split.seed)
