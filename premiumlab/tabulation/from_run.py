"""`tabulate`: a run directory -> a banded multiplicative rating table (docs/rating-table.md, docs/commands.md).

Source (`premiumlab.tabulation.source`): `model="auto"` takes the candidate with the lowest holdout
mean Tweedie deviance of the pure premium (the figure of metrics.json and `compare`); "gbm" and
"gbm_freq_sev" distil the direct boosted model or the product of the boosted frequency and severity
(`premiumlab.tabulation.distill`; the boosters must reproduce their predictions columns); "glm"
and "glm_freq_sev" export the Tweedie GLM's own relativities, or the product of the frequency and
severity GLMs', on the run's bands, with the spec's two-way tables fitted on the observed losses
with the GLM as offset (`_glm_two_way`). Either way:

Rate level. Relativities are rounded half to even to `relativity_decimals` (base bands stay at
exactly 1); the base rate is then solved so that the table's total pure premium on the training
rows equals the target:
- `experience` (default): the observed claim amounts of the training rows;
- `current_premium`: P = sum(current premium) x (1 + overall_change) on the training rows, turned
  into a pure-premium target with the loadings, since gross = (pure (1 + lae) + fixed x exposure) /
  (1 - variable - profit) gives sum(pure) = (P (1 - variable - profit) - fixed x sum(exposure)) /
  (1 + lae); the permissible loss ratio sum(pure) / P is stated.
Stated off-balances: of rounding, total pure premium with rounded relativities at the base rate
solved for the unrounded ones over the target, minus 1; of the minimum premium, gross total with
the minimum over gross total without it, minus 1. With a current premium the indicated overall change
(table gross total / current total - 1, training rows) is reported.

Fidelity on the holdout rows (the training rows when the run has no holdout): mean Tweedie deviance
at the run's power (`run_power`) and the Gini of the table's pure premium per exposure unit, beside
every candidate's; retention G_table / G_source and, when G_source - G_GLM > 0,
(G_table - G_GLM) / (G_source - G_GLM), else for a boosted source a `retention_undefined` diagnostic. Attenuation on the
training rows (`premiumlab.tabulation.attenuation`); the level -> group map of every categorical.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import write_json
from premiumlab._core.outputs import atomic_output, check_target
from premiumlab.book.rows import Book
from premiumlab.book.spec import Spec
from premiumlab.experience.cautions import cautions_for
from premiumlab.runs.rundir import Run, model_name, open_run
from premiumlab.tabulation.banding import Banding
from premiumlab.tabulation.distill import distil
from premiumlab.tabulation.effects import Curve, FactorValues, exposure_sample, grid_sample
from premiumlab.tabulation.refit import band_exposure, credible_two_way, refit, round_relativity
from premiumlab.tabulation.source import (
    AUTO,
    BOOSTED_SOURCES,
    GLM_SOURCES,
    MODEL_CHOICES,
    SourceChoice,
    candidate_scores,
    choose_source,
)
from rating_tables import MISSING_LABEL

if TYPE_CHECKING:
    from premiumlab.models.gbm.fit import GbmModel
    from rating_tables.table import Cells, Factor, RatingTable

#: fidelity.json's version (docs/rating-table.md, Files beside the format).
FIDELITY_VERSION = 3
#: Training rows on which the rebuilt features must reproduce the run's boosted predictions.
CHECK_ROWS = 2000
CHECK_TOLERANCE = 1e-9


# ---------------------------------------------------------------------------------------------
# the run's inputs, re-read and checked


def reread_book(run: Run, book: str | Path | None = None) -> Book:
    """The run's book (or `book`, e.g. after a move), refused unless its sha256 is the run's.

    Parameters
    ----------
    run : Run
        The run directory read back (`open_run`).
    book : str or Path or None
        Where the book is now (None: the path recorded in run.json, relative to the run).

    Returns
    -------
    Book
        The book, typed and checked, with the run's split.

    Raises
    ------
    InputError
        When the book differs from the run's (sha256), or the spec names no claim amounts.
    """
    loaded = run.load_book(book)
    _claim_amount(loaded)
    return loaded


def _claim_amount(book: Book) -> np.ndarray:
    """The claim amount (money) of every book row, refused when the book has none."""
    if book.claim_amount is None:
        raise InputError(
            f"{book.path}: a pure-premium table needs claim amounts; the spec names no columns.claim_amount"
        )
    return book.claim_amount


def _checked_predictions(run: Run, book: Book) -> pd.DataFrame:
    """predictions.parquet, checked row by row against the book."""
    preds = run.predictions()
    where = run.files.predictions
    if len(preds) != book.n_rows or not np.array_equal(preds["row"].to_numpy(), np.arange(book.n_rows)):
        raise InputError(f"{where}: its rows do not match the book's {book.n_rows} rows (column 'row')")
    if not np.array_equal(preds["holdout"].to_numpy(dtype=bool), book.holdout):
        raise InputError(f"{where}: column 'holdout' differs from the book's split")
    return preds


def _fitted_amounts(book: Book, preds: pd.DataFrame) -> Book:
    """The book with the claim amounts the models were fitted to: after [experience] adjustments
    (developed, trended, capped plus loads) when the run made them, else as observed."""
    if "claim_amount_adjusted" not in preds.columns:
        return book
    return replace(book, claim_amount=preds["claim_amount_adjusted"].to_numpy(dtype=float))


def _level_indices(book: Book, run: Run, name: str, rows: np.ndarray) -> tuple[tuple[str, ...], np.ndarray]:
    """(levels of a categorical factor as the run fixed them, the missing label last when it has one;
    index of the level of each of the book `rows`, training rows, which hold no other level)."""
    levels = run.levels[name]
    codes = levels.codes(book.frame[name].to_numpy()[rows])
    if (codes < 0).any():
        row = int(rows[np.flatnonzero(codes < 0)[0]])
        raise InputError(
            f"{book.path}: column '{name}', row {row}: level {book.frame[name].iloc[row]!r} is not "
            f"one of the run's levels ({run.files.levels})"
        )
    return levels.labels, codes


# ---------------------------------------------------------------------------------------------
# bands and relativities from either model


@dataclass(frozen=True)
class Made:
    """The table's bands and relativities from its source, with what tabulate reports about them.

    bandings, relativities (per band), two_way (per table, bands x bands), bases (base band) and
    notes (fidelity.json's `distillation`); curves: the source's effect curves (boosted sources);
    credibility: the Z applied to each level of a factor (unordered categoricals of a distilled
    table); two_way_credibility: the Z applied to each cell of a two-way table.
    """

    bandings: dict[str, Banding]
    relativities: dict[str, np.ndarray]
    two_way: dict[tuple[str, str], np.ndarray]
    bases: dict[str, int]
    notes: dict
    curves: dict[str, Curve] = field(default_factory=dict)
    credibility: dict[str, np.ndarray] = field(default_factory=dict)
    two_way_credibility: dict[tuple[str, str], np.ndarray] = field(default_factory=dict)


def _checked_booster(run: Run, target: str, features: pd.DataFrame, preds: pd.DataFrame, check: np.ndarray) -> GbmModel:
    """The run's boosted model of `target`, refused unless it reproduces its predictions column on the
    `check` rows (relative tolerance CHECK_TOLERANCE)."""
    from premiumlab.models.gbm.fit import load_model

    model_text = run.files.model_text("gbm", target)
    model = load_model(model_text, run.files.model_json("gbm", target))
    column = model_name("gbm", target)
    if column not in preds.columns:
        raise InputError(f"{run.files.predictions}: no column '{column}'; fit the run with that model first")
    stored = preds[column].to_numpy()
    if not np.allclose(model.predict(features.iloc[check]), stored[check], rtol=CHECK_TOLERANCE, atol=0):
        raise InputError(
            f"{model_text}: the model does not reproduce column '{column}' of predictions.parquet on the book"
        )
    return model


def _gbm_bands(run: Run, book: Book, preds: pd.DataFrame, train: np.ndarray, source: SourceChoice) -> Made:
    """Distil a boosted source (`gbm`, or `gbm_freq_sev` whose log score is the sum of the frequency and
    severity boosters' raw scores) into bands, relativities and two-way tables."""
    from premiumlab.models.gbm.features import features_from_spec
    from premiumlab.models.trees.parser import Trees
    from premiumlab.tabulation.distill import ScoreBooster

    spec, opts = run.spec, run.spec.table
    features = features_from_spec(book.frame, spec)
    rows = np.flatnonzero(train)
    models = [
        _checked_booster(run, target, features, preds, rows[:CHECK_ROWS]) for target in BOOSTED_SOURCES[source.model]
    ]
    stored = preds[source.column].to_numpy()
    factors = []
    for f in spec.factors:
        if f.type == "numeric":
            factors.append(FactorValues(f.name, f.monotone, book.frame[f.name].to_numpy(dtype=float)[rows]))
            continue
        levels, codes = _level_indices(book, run, f.name, rows)
        factors.append(
            FactorValues(
                f.name,
                f.monotone,
                codes,
                levels=levels,
                ordered=f.levels is not None,
                base_level=f.base,
            )
        )
    sampled = features.iloc[rows[exposure_sample(book.exposure[rows], opts.sample, spec.split.seed)]]
    boosters = [
        ScoreBooster(
            Trees.from_text(model.model_text()),
            model.encode(sampled),
            {f.name: _model_codes(model, f.name, f.levels) for f in factors if f.levels is not None},
        )
        for model in models
    ]
    glm_levels = _glm_level_effects(run, factors)
    grid_rows = grid_sample(rows.size, opts.grid_rows, spec.split.seed)
    exposure = book.exposure[rows]
    result = distil(boosters, factors, exposure, stored[rows], book.claim_count[rows], opts, glm_levels, grid_rows)
    fit = result.pooled.fit
    notes = {
        "method": "partial dependence on the raw score (summed over the boosters of a product), credibility "
        "of unordered levels towards the factor's mean effect, isotonic where promised, optimal segmentation, "
        "Poisson quasi-likelihood refit on the source's predictions with monotone pooling and credible "
        "two-way cells",
        "boosters": [model_name("gbm", model.target) for model in models],
        "credibility": {
            "levels": "each level's effect e of an unordered categorical factor, before grouping: "
            "e' = ebar + Z (e - ebar), complement ebar the factor's exposure-weighted mean effect (the overall level)",
            "levels_of": sorted(result.credibility),
            "two_way_cells": "each cell's relativity r: r' = r^Z, complement 1 (no interaction)",
            "z": "Buhlmann-Straub credibility of the level's or cell's own claim frequency (the tables' credibility column)",
        },
        "level_effects_from_glm": {
            name: "log relativities of glm_frequency x glm_severity (credibility-penalised) instead of the "
            "boosted partial dependence; the refit's response moved by their difference"
            for name in glm_levels
        },
        "sample_policies": int(opts.sample),
        "seed": spec.split.seed,
        "grid_points": {n: int(c.points.size) for n, c in result.curves.items()},
        "grid_rows": int(rows.size if grid_rows is None else opts.grid_rows),
        "bands_before_pooling": {n: b.n_bands for n, b in result.initial.items()},
        "bands": {n: b.n_bands for n, b in result.pooled.bandings.items()},
        "merges": result.pooled.merges,
        "aliased_terms": fit.aliased,
        "refit_iterations": fit.iterations,
    }
    return Made(
        result.pooled.bandings,
        fit.relativities,
        fit.two_way,
        fit.bases,
        notes,
        result.curves,
        result.credibility,
        fit.two_way_credibility,
    )


def _glm_models(run: Run, targets: tuple[str, ...]) -> dict[str, dict]:
    """The run's GLM model JSONs of `targets`, each read once."""
    return {t: run.model_json("glm", t) for t in targets}


def _glm_relativities(
    run: Run, models: dict[str, dict], name: str, labels: tuple[str, ...]
) -> tuple[np.ndarray, list[str]]:
    """Per label of factor `name`, the product over the GLM `models` (target -> model JSON,
    `_glm_models`) of its relativity (a GLM without an estimate for the label counts 1), and those
    labels as "glm_TARGET: name[label]".

    Raises
    ------
    InputError
        When a GLM's model JSON has no relativities for the factor.
    """
    values, defaulted = np.ones(len(labels)), []
    for target, model in models.items():
        rel = model.get("relativities", {}).get(name)
        if rel is None:
            raise InputError(f"{run.files.model_json('glm', target)}: key 'relativities.{name}' is missing")
        for k, label in enumerate(labels):
            value = rel.get(label)
            if value is None:
                defaulted.append(f"{model_name('glm', target)}: {name}[{label}]")
            else:
                values[k] *= float(value)
    return values, defaulted


def _glm_level_effects(run: Run, factors: list[FactorValues]) -> dict[str, np.ndarray]:
    """Per unordered categorical with more levels than `[table] max_bands` (one the table groups,
    such as a territory), the log relativity of each level in the run's frequency x severity GLMs,
    whose credibility penalty estimates thin levels better than a boosted model's splits
    (`distill`, step 2); none when the run has no GLMs. A level the GLMs did not estimate is 0."""
    targets = GLM_SOURCES["glm_freq_sev"]
    if not all(run.files.model_json("glm", t).is_file() for t in targets):
        return {}
    models = _glm_models(run, targets)
    return {
        f.name: np.log(_glm_relativities(run, models, f.name, f.levels)[0])
        for f in factors
        if f.levels is not None and not f.ordered and len(f.levels) > run.spec.table.max_bands
    }


def _model_codes(model: GbmModel, name: str, levels: tuple[str, ...]) -> np.ndarray:
    """The boosted model's code of each level: its stored category position, or the level's position
    for an ordered factor passed as codes (there the missing level, a missing number, is NaN)."""
    if name not in model.categories:
        return np.array([np.nan if level == MISSING_LABEL else i for i, level in enumerate(levels)], dtype=float)
    position = {level: i for i, level in enumerate(model.categories[name])}
    absent = [level for level in levels if level not in position]
    if absent:
        raise InputError(f"boosted model: factor '{name}' has no category '{absent[0]}'")
    return np.array([position[level] for level in levels], dtype=float)


def _glm_bands(run: Run, source: SourceChoice) -> Made:
    """A GLM source's relativities on the run's bands: the Tweedie GLM's (`glm`), or per level the
    product of the frequency and severity GLMs' (`glm_freq_sev`); their credibility penalty is
    already applied, and two-way tables are added by `_glm_two_way`."""
    targets = GLM_SOURCES[source.model]
    models = _glm_models(run, targets)
    bandings, relativities, bases, defaulted = {}, {}, {}, []
    for f in run.spec.factors:
        levels = run.levels[f.name]
        if levels.edges is not None:
            banding = Banding(f.name, f.monotone, edges=np.array(levels.edges, dtype=float), missing=levels.missing)
        else:
            banding = Banding(
                f.name,
                f.monotone,
                levels=levels.labels,
                band_of_level=np.arange(len(levels.labels)),
                ordered=f.levels is not None,
                base_level=levels.base,
                missing=levels.missing,
            )
        labels = banding.labels()
        values, missing_estimates = _glm_relativities(run, models, f.name, tuple(labels))
        defaulted += missing_estimates
        bandings[f.name], relativities[f.name] = banding, values
        bases[f.name] = labels.index(levels.base)
    notes = {
        "method": "relativities of the run's GLM ("
        + " x ".join(f"models/{model_name('glm', t)}.json" for t in targets)
        + ") on its bands",
        "power": models["pure_premium"].get("power") if "pure_premium" in models else None,
        "levels_without_estimate_set_to_1": defaulted,
    }
    return Made(bandings, relativities, {}, bases, notes)


def _glm_two_way(
    made: Made,
    run: Run,
    book: Book,
    preds: pd.DataFrame,
    rows: np.ndarray,
    cells: dict[str, np.ndarray],
    source: SourceChoice,
) -> Made:
    """The GLM table with the spec's two-way tables ([table] interactions), which the GLM has not.

    Per pair (a, b), a Poisson quasi-likelihood refit (`refit.refit`) of the observed pure premium y
    (money per exposure unit, on the fitted basis) on the bands of a and b and their non-base pairs,
    with the GLM's prediction mu as offset: response y / mu, weight exposure x mu, which is the
    offset model log E[y] = log mu + a_i + b_j + ab_ij. The main effects of a and b are multiplied
    by a refit's (they change where the GLM's mains had absorbed the interaction); each cell's
    relativity r becomes r^Z, Z the Buhlmann-Straub credibility of the cell's claim frequency
    (`refit.credible_two_way`, complement 1), and the two mains are then refitted with the weighted
    cells in the offset, so that what a thin cell gives up returns to its factors' mains. Every other
    factor keeps the GLM's relativities.
    """
    pairs = list(run.spec.table.interactions)
    if not pairs:
        return made
    names = [n for n in made.bandings if any(n in pair for pair in pairs)]
    bandings = {n: made.bandings[n] for n in names}
    codes = {n: _row_bands(b, cells[n]) for n, b in bandings.items()}
    mu = preds[source.column].to_numpy(dtype=float)[rows]
    exposure = book.exposure[rows]
    observed = _claim_amount(book)[rows] / exposure
    sizes = {n: b.n_bands for n, b in bandings.items()}
    bases = {n: made.bases[n] for n in names}
    missing = {n: b.n_bands - 1 for n, b in bandings.items() if b.missing}
    fit = refit(codes, sizes, bases, pairs, exposure * mu, observed / mu, missing)
    fit = credible_two_way(fit, codes, exposure, book.claim_count[rows])
    cell = np.ones(rows.size)
    for (a, b), matrix in fit.two_way.items():
        cell *= matrix[codes[a], codes[b]]
    mains = refit(codes, sizes, bases, [], exposure * mu * cell, observed / (mu * cell), missing)
    relativities = {**made.relativities, **{n: made.relativities[n] * mains.relativities[n] for n in names}}
    notes = {
        **made.notes,
        "two_way": "Poisson quasi-likelihood refit of the observed pure premium on the paired factors' bands "
        "and their cells, the GLM's prediction as offset; cells weighted towards 1 by credibility (r' = r^Z)",
        "two_way_aliased_terms": fit.aliased,
    }
    return replace(
        made, relativities=relativities, two_way=fit.two_way, notes=notes, two_way_credibility=fit.two_way_credibility
    )


# ---------------------------------------------------------------------------------------------
# the table


def _row_bands(banding: Banding, cells: np.ndarray) -> np.ndarray:
    """The band of each row from its `_row_cells` (a numeric factor's cells are its bands)."""
    return cells if banding.numeric else banding.codes(cells)


def _row_cells(banding: Banding, book: Book, run: Run, rows: np.ndarray) -> np.ndarray:
    """Per training row: its band (numeric) or its level index (categorical)."""
    if banding.numeric:
        return banding.codes(book.frame[banding.name].to_numpy(dtype=float)[rows])
    return _level_indices(book, run, banding.name, rows)[1]


def _table_factors(
    spec: Spec,
    bandings: dict[str, Banding],
    relativities: dict[str, np.ndarray],
    two_way: dict[tuple[str, str], np.ndarray],
    bases: dict[str, int],
    cells: dict[str, np.ndarray],
    exposure: np.ndarray,
    amount: np.ndarray,
    decimals: int | None,
    applied: dict[str, np.ndarray] | None = None,
    applied_cells: dict[tuple[str, str], np.ndarray] | None = None,
) -> tuple[Factor, ...]:
    """Rating-table factors in spec order, then the two-way tables; relativities rounded to `decimals`
    (None: unrounded), the unrounded refit kept as `indicated`, exposure of the training rows, and the
    credibility: the Z applied to each level (`applied`, per factor) or two-way cell (`applied_cells`)
    where the distillation applied one; elsewhere the Buhlmann-Straub credibility of each band's or
    level's own experience (amount per exposure) toward its complement (neighbouring bands, or the
    overall level for categoricals), shown for the reviewer. A factor's missing band or level (the
    last) becomes its `MissingRow`; a categorical factor's `fallback` is the spec's, else its base
    level."""
    from premiumlab.tabulation.credibility import credibility_by_level
    from rating_tables import Bands, CategoricalFactor, InteractionFactor, MissingRow, NumericFactor

    def selected(values: np.ndarray) -> np.ndarray:
        return values if decimals is None else round_relativity(values, decimals)

    def missing_row(rel: float, exposure: float, z: float) -> MissingRow:
        return MissingRow(float(selected(np.array([rel]))[0]), exposure, indicated=rel, credibility=z)

    out: list[Factor] = []
    sides: dict[str, tuple[Cells, np.ndarray]] = {}
    for f in spec.factors:
        banding, rel = bandings[f.name], relativities[f.name]
        if banding.edges is not None:
            k = banding.ordinary_bands
            lower = np.concatenate([[-np.inf], banding.edges])
            upper = np.concatenate([banding.edges, [np.inf]])
            z = credibility_by_level(amount, exposure, cells[f.name], banding.n_bands, numeric=True)["credibility"]
            z = z.to_numpy()
            expo = band_exposure(cells[f.name], banding.n_bands, exposure)
            out.append(
                NumericFactor(
                    f.name,
                    f.monotone,
                    lower,
                    upper,
                    selected(rel[:k]),
                    expo[:k],
                    indicated=rel[:k],
                    credibility=z[:k],
                    missing=missing_row(rel[k], expo[k], z[k]) if banding.missing else None,
                )
            )
            sides[f.name] = (Bands(lower, upper), np.arange(k))
            continue
        levels, band_of_level = banding.level_bands()
        k = len(levels) - int(banding.missing)
        level_rel = rel[band_of_level]
        level_exposure = np.bincount(cells[f.name], weights=exposure, minlength=len(levels))
        base = f.base
        if base is None:
            in_base = np.flatnonzero(band_of_level == bases[f.name])
            base = levels[in_base[np.argmax(level_exposure[in_base])]]
        z = (applied or {}).get(f.name)
        if z is None:
            z = credibility_by_level(amount, exposure, cells[f.name], len(levels))["credibility"].to_numpy()
        out.append(
            CategoricalFactor(
                f.name,
                f.monotone,
                levels[:k],
                selected(level_rel[:k]),
                level_exposure[:k],
                fallback=f.fallback if f.fallback is not None else base,
                base=base,
                indicated=level_rel[:k],
                credibility=z[:k],
                missing=missing_row(level_rel[k], level_exposure[k], z[k]) if banding.missing else None,
            )
        )
        sides[f.name] = (levels[:k], band_of_level[:k])
    for (a, b), matrix in two_way.items():
        (a_cells, a_band), (b_cells, b_band) = sides[a], sides[b]
        expanded = matrix[np.ix_(a_band, b_band)]
        cell_exposure = np.zeros(expanded.shape)
        valued = (cells[a] < a_band.size) & (cells[b] < b_band.size)  # the missing band or level is last
        np.add.at(cell_exposure, (cells[a][valued], cells[b][valued]), exposure[valued])
        z_cells = (applied_cells or {}).get((a, b))
        out.append(
            InteractionFactor(
                f"{a}__{b}",
                (a, b),
                a_cells,
                b_cells,
                selected(expanded),
                exposure=cell_exposure,
                indicated=expanded,
                credibility=None if z_cells is None else z_cells[np.ix_(a_band, b_band)],
            )
        )
    return tuple(out)


def rating_frame(book: Book, spec: Spec, rows: np.ndarray) -> pd.DataFrame:
    """The factor columns and the exposure column of the chosen rows, as the rater reads them.

    Parameters
    ----------
    book : Book
        The run's book.
    spec : Spec
        The run's spec; the exposure column takes its name from columns.exposure.
    rows : np.ndarray
        Indices of the book rows to keep, in the order wanted.

    Returns
    -------
    pd.DataFrame
        One row per index in `rows` (index 0 .. len(rows)-1): the spec's factors and the exposure.
    """
    frame = book.frame.iloc[rows].reset_index(drop=True).copy()
    frame[spec.columns.exposure] = book.exposure[rows]
    return frame


def _pure_premium_target(spec: Spec, book: Book, train: np.ndarray) -> dict:
    """The target of the rate level (see the module docstring), as stored in table.json."""
    opts, load = spec.table, spec.loadings
    if opts.target == "experience":
        return {"basis": "experience", "total_pure_premium": float(_claim_amount(book)[train].sum())}
    assert book.current_premium is not None, "the spec refuses table.target = current_premium without its column"
    current = float(book.current_premium[train].sum())
    premium = current * (1.0 + opts.overall_change)
    pure = (
        premium * (1.0 - load.variable_expense - load.profit) - load.fixed_expense * float(book.exposure[train].sum())
    ) / (1.0 + load.lae_ratio)
    if not pure > 0:
        raise InputError(
            f"{spec.source}: key 'table.overall_change': the target premium {premium:.2f} leaves no "
            f"pure premium after fixed expenses and loadings"
        )
    return {
        "basis": "current_premium",
        "current_premium_total": current,
        "overall_change": opts.overall_change,
        "target_premium_total": premium,
        "permissible_loss_ratio": pure / premium,
        "total_pure_premium": pure,
    }


def table_id(spec_id: str, source: str, stage: str) -> str:
    """A table's id, saying what it is: `SPEC_ID.SOURCE.STAGE` (docs/rating-table.md, `table_id`).

    Parameters
    ----------
    spec_id : str
        The spec's `table.table_id`.
    source : str
        The model the table was made from (`gbm`, `gbm_freq_sev`, `glm` or `glm_freq_sev`).
    stage : str
        `indicated` or `selected`.

    Returns
    -------
    str
        E.g. `motor-2027.gbm_freq_sev.indicated`: two tables of one run never share an id.
    """
    return f"{spec_id}.{source}.{stage}"


def book_columns(spec: Spec) -> dict[str, str]:
    """The spec's exposure, policy id and period column names, which the table remembers.

    Parameters
    ----------
    spec : Spec
        The spec the table is made from.

    Returns
    -------
    dict of str to str
        `exposure`, and `policy_id` and `period` when the spec names them.
    """
    named = {"exposure": spec.columns.exposure, "policy_id": spec.columns.policy_id, "period": spec.columns.period}
    return {key: name for key, name in named.items() if name is not None}


def _make_table(
    spec: Spec, factors: tuple[Factor, ...], base_rate: float, target: dict, provenance: dict
) -> RatingTable:
    """The indicated rating table of `factors` at `base_rate`, with the spec's loadings, rounding,
    book columns and cautions; its id names the source (`provenance["source"]`)."""
    from rating_tables import Loadings, RatingTable, Rounding

    opts, load = spec.table, spec.loadings
    return RatingTable(
        table_id=table_id(opts.table_id, provenance["source"], "indicated"),
        stage="indicated",
        book_columns=book_columns(spec),
        effective_date=opts.effective_date,
        base_rate=base_rate,
        exposure_unit=opts.exposure_unit,
        factors=factors,
        loadings=Loadings(load.lae_ratio, load.fixed_expense, load.variable_expense, load.profit, load.minimum_premium),
        rounding=Rounding(opts.relativity_decimals, opts.premium_decimals),
        target=target,
        provenance=provenance,
        cautions=tuple(cautions_for(spec)),
    )


def _rate_level(
    spec: Spec,
    unrounded: tuple[Factor, ...],
    rounded: tuple[Factor, ...],
    frame: pd.DataFrame,
    target: dict,
    provenance: dict,
    current_total: float | None,
) -> tuple[RatingTable, dict]:
    """Solve the base rate of the rounded table; state the off-balances (module docstring)."""
    from rating_tables import rate, solve_base_rate

    total = target["total_pure_premium"]
    expo = spec.columns.exposure
    _, exact = solve_base_rate(_make_table(spec, unrounded, 1.0, target, provenance), frame, expo, total)
    table, report = solve_base_rate(_make_table(spec, rounded, 1.0, target, provenance), frame, expo, total)
    rounded_at_exact = exact["base_rate"] * report["total_pure_premium_before"]
    gross = float(rate(table, frame, expo)["gross_premium"].sum())
    out = {
        "target": target,
        "base_rate": table.base_rate,
        "base_rate_unrounded_relativities": exact["base_rate"],
        "total_pure_premium": report["total_pure_premium"],
        "rounding_off_balance": rounded_at_exact / total - 1.0,
        "minimum_premium_off_balance": report.get("minimum_premium", {}).get("effect", 0.0),
        "rows_at_minimum": report.get("minimum_premium", {}).get("rows_at_minimum", 0),
        "gross_premium_total": gross,
    }
    if current_total is not None:
        out["current_premium_total"] = current_total
        out["indicated_overall_change"] = gross / current_total - 1.0
    return table, out


def table_scores(
    table: RatingTable, frame: pd.DataFrame, spec: Spec, book: Book, rows: np.ndarray, power: float
) -> dict[str, float]:
    """The table's mean Tweedie deviance and Gini on `rows`, as metrics.json scores a model.

    Parameters
    ----------
    table : RatingTable
        The table to measure.
    frame : pandas.DataFrame
        `rating_frame` of `rows`.
    spec : Spec
        The run's spec (its exposure column).
    book : Book
        The run's book.
    rows : numpy.ndarray
        The rows measured (positions in the book).
    power : float
        The Tweedie power of the deviance, in (1, 2).

    Returns
    -------
    dict
        `mean_deviance` = sum e d(y, mu) / sum e with y = loss / e and mu = the table's pure
        premium per exposure unit, unrounded (`models.deviance.mean_deviance`); `gini` of the losses
        ordered by mu, exposure-weighted (`evaluation.metrics.gini`).
    """
    from premiumlab.evaluation.metrics import gini
    from premiumlab.models.deviance import mean_deviance
    from rating_tables import pure_premium

    exposure, amount = book.exposure[rows], _claim_amount(book)[rows]
    mu = pure_premium(table, frame, spec.columns.exposure) / exposure
    return {"mean_deviance": mean_deviance(amount / exposure, mu, exposure, power), "gini": gini(amount, mu, exposure)}


def _fidelity(
    table: RatingTable, frame: pd.DataFrame, spec: Spec, book: Book, rows: np.ndarray, source: SourceChoice
) -> tuple[dict, list[Diagnostic]]:
    """Deviance and Gini of the table on `rows` beside every candidate's, and the retention of the
    source's Gini: G_table / G_source and (G_table - G_glm) / (G_source - G_glm), the latter only
    when its denominator is > 0 (else, for a boosted source, a `retention_undefined` diagnostic)."""
    scores = {"table": table_scores(table, frame, spec, book, rows, source.power), **source.candidates}
    g = {name: s["gini"] for name, s in scores.items()}
    src = source.model
    retention: dict = {"source": src, "gini_table_over_source": g["table"] / g[src] if g[src] else None}
    diagnostics = []
    if "glm" in g:
        gap = g[src] - g["glm"]
        retention["gini_source_minus_glm"] = gap
        kept = (g["table"] - g["glm"]) / gap if gap > 0 and src not in GLM_SOURCES else None
        retention["source_lift_over_glm_kept"] = kept
        if not gap > 0 and src not in GLM_SOURCES:
            diagnostics.append(
                Diagnostic(
                    kind="retention_undefined",
                    model="table",
                    message=(
                        f"(G_table - G_glm) / (G_{src} - G_glm) is not defined: G_{src} - G_glm = {gap:.4f} "
                        f"on the {source.rows} rows ({src} is not better than the GLM); no share of a lift "
                        "over the GLM to keep"
                    ),
                )
            )
    measured = {
        "subset": source.rows,
        "rows": int(rows.size),
        "policies": int(np.unique(book.policy[rows]).size),
        "tweedie_power": source.power,
        "models": scores,
        "retention": retention,
    }
    return measured, diagnostics


def run_power(run: Run) -> float:
    """The run's Tweedie power, as `fit` (metrics.json) and `compare` use it: the GLM's, else
    `FALLBACK_TWEEDIE_POWER`.

    Parameters
    ----------
    run : Run
        The run directory read back.

    Returns
    -------
    float
        The variance power of the pure-premium deviance, in (1, 2).
    """
    from premiumlab._core.defaults import FALLBACK_TWEEDIE_POWER

    if run.files.model_json("glm", "pure_premium").is_file():
        power = run.model_json("glm", "pure_premium").get("power")
        if power is not None:
            return float(power)
    return FALLBACK_TWEEDIE_POWER


def _attenuation(
    made: Made,
    table: RatingTable,
    spec: Spec,
    book: Book,
    preds: pd.DataFrame,
    rows: np.ndarray,
    cells: dict[str, np.ndarray],
    source: SourceChoice,
) -> dict:
    """Attenuation per factor and overall on the training rows (`premiumlab.tabulation.attenuation`)."""
    from premiumlab.tabulation.attenuation import (
        FLATTENED_BELOW,
        attenuation_slope,
        curve_at_rows,
        flattened,
        table_partial_dependence,
    )
    from rating_tables import InteractionFactor, pure_premium

    exposure = book.exposure[rows]
    mains = {
        f.name: np.log(np.append(f.relativity, [] if f.missing is None else [f.missing.relativity]))
        for f in table.factors
        if not isinstance(f, InteractionFactor)
    }
    pairs = {f.of: np.log(f.relativity) for f in table.factors if isinstance(f, InteractionFactor)}

    def slope(y: np.ndarray, x: np.ndarray) -> float | None:
        keep = np.isfinite(x) & np.isfinite(y)
        return attenuation_slope(y[keep], x[keep], exposure[keep]) if keep.any() else None

    factors = {}
    for name, banding in made.bandings.items():
        if name in made.curves:
            values = book.frame[name].to_numpy(dtype=float)[rows] if banding.numeric else cells[name]
            x = curve_at_rows(made.curves[name], values)
        else:
            x = np.log(made.relativities[name])[_row_bands(banding, cells[name])]
        factors[name] = slope(table_partial_dependence(name, mains[name], pairs, cells, exposure), x)
    frame = rating_frame(book, spec, rows)
    table_rate = pure_premium(table, frame, spec.columns.exposure) / exposure
    source_rate = preds[source.column].to_numpy()[rows]
    return {
        "subset": "training",
        "factors": factors,
        "overall": slope(np.log(table_rate), np.log(source_rate)),
        "flattened_below": FLATTENED_BELOW,
        "flattened": flattened(factors),
    }


def _groups(bandings: dict[str, Banding]) -> dict[str, dict[str, int]]:
    """Level -> group (band index) of every categorical factor of the table."""
    out = {}
    for name, banding in bandings.items():
        if not banding.numeric:
            levels, band = banding.level_bands()
            out[name] = {level: int(b) for level, b in zip(levels, band)}
    return out


#: The file beside the format that maps each level of a pooled factor to its group (docs/rating-table.md).
GROUPS_CSV = "groups.csv"


def pooled_groups(groups: dict[str, dict[str, int]]) -> pd.DataFrame:
    """The rows of groups.csv: `factor`, `level`, `group` for every level (the missing level apart)
    of each categorical factor with at least one group of two levels or more.

    Parameters
    ----------
    groups : dict
        Per categorical factor, level -> group (the band index, 0-based, as in fidelity.json).

    Returns
    -------
    pd.DataFrame
        One row per level, in factor order then group then level order; empty when no factor
        pooled levels.
    """
    rows = []
    for name, of_level in groups.items():
        valued = {level: g for level, g in of_level.items() if level != MISSING_LABEL}
        if len(set(valued.values())) < len(valued):
            rows += [(name, level, g) for level, g in sorted(valued.items(), key=lambda item: item[1])]
    return pd.DataFrame(rows, columns=["factor", "level", "group"])


# ---------------------------------------------------------------------------------------------
# the command


def tabulate(
    run_dir: str | Path, out: str | Path, model: str = AUTO, force: bool = False, book: str | Path | None = None
) -> dict:
    """Write the rating table TABLE/ (table.json, factors/*.csv), TABLE/fidelity.json,
    TABLE/exhibit.xlsx and, when a categorical factor's levels were pooled into groups,
    TABLE/groups.csv from a run; returns the summary written to fidelity.json.

    Parameters
    ----------
    run_dir : str or Path
        The run directory (`fit`).
    out : str or Path
        The table folder TABLE to write, atomically.
    model : str
        The source: "auto" (the candidate with the lowest holdout mean Tweedie deviance of the pure
        premium, `premiumlab.tabulation.source`); "gbm" or "gbm_freq_sev": distil the direct
        boosted model or the boosted frequency x severity; "glm": the Tweedie GLM's relativities
        on the run's bands.
    force : bool
        Replace an existing `out`.
    book : str or Path or None
        The run's book at another path (None: the path recorded in run.json); its sha256 must match.

    Returns
    -------
    dict
        The fidelity.json summary (format, version, provenance, source, fidelity, attenuation,
        groups, diagnostics, rate_level, distillation, cautions; docs/rating-table.md) with `table`
        (the folder) and `seconds` (wall time) added.

    Raises
    ------
    InputError
        On an unknown `model`, an existing `out` without `force`, a run or book that does not match
        (book sha256, predictions, levels, model), or a rate-level target that leaves no pure premium.
    """
    from premiumlab.runs.experience_step import fitted_basis
    from rating_tables import save, write_exhibit

    if model not in MODEL_CHOICES:
        raise InputError(f"--model: unknown model '{model}'; use {', '.join(MODEL_CHOICES)}")
    started = time.perf_counter()
    out = Path(out)
    run = open_run(run_dir)
    inputs = run.inputs(book)
    check_target(out, force, inputs=inputs)
    spec = run.spec
    loaded = reread_book(run, book)
    preds = _checked_predictions(run, loaded)
    loaded = _fitted_amounts(loaded, preds)
    power = run_power(run)
    scores, rows_name = candidate_scores(fitted_basis(preds), power)
    source = choose_source(scores, model, rows_name, power, str(run.files.predictions))
    train = ~loaded.holdout
    rows = np.flatnonzero(train)
    made = _glm_bands(run, source) if source.model in GLM_SOURCES else _gbm_bands(run, loaded, preds, train, source)
    cells = {n: _row_cells(b, loaded, run, rows) for n, b in made.bandings.items()}
    if source.model in GLM_SOURCES:
        made = _glm_two_way(made, run, loaded, preds, rows, cells, source)
    exposure = loaded.exposure[rows]
    amount = _claim_amount(loaded)[rows]
    unrounded, rounded = (
        _table_factors(
            spec,
            made.bandings,
            made.relativities,
            made.two_way,
            made.bases,
            cells,
            exposure,
            amount,
            decimals,
            made.credibility,
            made.two_way_credibility,
        )
        for decimals in (None, spec.table.relativity_decimals)
    )
    target = _pure_premium_target(spec, loaded, train)
    provenance = {
        "run": Path(run_dir).resolve().name,
        "source": source.model,
        "model": source.column,
        "book_sha256": loaded.sha256,
    }
    current = None if loaded.current_premium is None else float(loaded.current_premium[train].sum())
    table, level = _rate_level(spec, unrounded, rounded, rating_frame(loaded, spec, rows), target, provenance, current)
    held = np.flatnonzero(loaded.holdout) if loaded.holdout.any() else rows
    measured, diagnostics = _fidelity(table, rating_frame(loaded, spec, held), spec, loaded, held, source)
    groups = _groups(made.bandings)
    summary = {
        "format": "premiumlab.fidelity",
        "version": FIDELITY_VERSION,
        "provenance": provenance,
        "source": source.to_dict(),
        "fidelity": measured,
        "attenuation": _attenuation(made, table, spec, loaded, preds, rows, cells, source),
        "groups": groups,
        "diagnostics": [d.to_dict() for d in (*source.diagnostics, *diagnostics)],
        "rate_level": level,
        "distillation": made.notes,
        "cautions": list(table.cautions),
    }
    with atomic_output(out, force=force, inputs=inputs) as tmp:
        save(table, tmp)
        write_json(tmp / "fidelity.json", summary)
        pooled = pooled_groups(groups)
        if len(pooled):
            pooled.to_csv(tmp / GROUPS_CSV, index=False, lineterminator="\n")
        write_exhibit(table, tmp / "exhibit.xlsx")
    return {**summary, "table": str(out), "seconds": time.perf_counter() - started}
