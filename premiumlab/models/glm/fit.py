"""GLM baselines: Poisson frequency, Gamma severity and Tweedie pure premium, log link.

Estimates come from the cells engine (Newton's method on the distinct combinations of levels,
exact) or the rows engine (the same loop on the sparse one-hot rows); every statistic is the
row-level one that statsmodels reports for the fit on the rows with ``var_weights`` (and offset log
exposure for Poisson). Terms are ``Intercept`` and ``factor[level]`` with treatment coding against
the base level. With ``penalty="credibility"`` (the default) each factor's level coefficients are
shrunk towards its base by the credibility penalty that the data choose
(`premiumlab.models.glm.credibility`); ``penalty="none"`` is the maximum-likelihood fit.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import scipy.stats

from premiumlab._core.cautions import DRAFT
from premiumlab._core.cluster import IN_PROCESS, TaskRunner
from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError
from premiumlab._core.validators import ABOVE_ZERO, AT_LEAST_ZERO, COUNT, Rule, checked_array
from premiumlab.models.glm.credibility import (
    PENALTIES,
    PenaltyGroups,
    credibility_rule,
    factor_credibility,
    penalty_groups,
)
from premiumlab.models.glm.engines import (
    MAX_PENALTY_STEPS,
    Cells,
    ColumnChoice,
    EngineFit,
    Family,
    OneHotDesign,
    cells_of_chunks,
    choose_columns,
    choose_engine,
    column_major,
    fit_on_cells,
    fit_on_rows,
    row_chunks,
    statistics_of_chunks,
)
from premiumlab.models.glm.tweedie import INTERVAL_LEVEL, POWER_BOUNDS, POWER_TOLERANCE, TweedieBook, profile_power
from premiumlab.models.targets import FREQUENCY, PURE_PREMIUM, SEVERITY, Target

ENGINES = ("auto", "cells", "rows")
SHOWN_LEVELS = 5
PENALTY_SETTLED = 1e-3


@dataclass(frozen=True)
class GlmInputs:
    """Rows of a book ready for the GLMs; validated on construction (InputError names the field).

    ``factors``: one pandas Categorical column per factor, string categories in display order, no
    missing values; ``exposure`` > 0; ``claim_count`` integers >= 0; ``claim_amount`` >= 0 and 0
    where the count is 0; ``control`` factors are fitted but not meant for a table.
    """

    factors: pd.DataFrame
    base_levels: dict[str, str]
    exposure: np.ndarray
    claim_count: np.ndarray
    claim_amount: np.ndarray | None = None
    control: list[str] = ()  # type: ignore[assignment]

    def __post_init__(self) -> None:
        n_rows = _check_factors(self.factors)
        _check_base_levels(self.factors, self.base_levels)
        exposure = checked_array("exposure", self.exposure, ABOVE_ZERO, n_rows)
        count = checked_array("claim_count", self.claim_count, COUNT, n_rows)
        object.__setattr__(self, "exposure", exposure)
        object.__setattr__(self, "claim_count", count)
        if self.claim_amount is not None:
            amount = checked_array("claim_amount", self.claim_amount, AT_LEAST_ZERO, n_rows)
            checked_array("claim_amount", amount, Rule("0 where claim_count is 0", lambda a: (a == 0) | (count > 0)))
            object.__setattr__(self, "claim_amount", amount)
        unknown = [name for name in self.control if name not in self.factors.columns]
        if unknown:
            raise InputError(f"control: '{unknown[0]}' is not a factor")
        object.__setattr__(self, "control", list(self.control))


def _check_factors(factors: Any) -> int:
    if not isinstance(factors, pd.DataFrame):
        raise InputError("factors: expected a pandas DataFrame with one column per factor")
    if len(factors) == 0:
        raise InputError("factors: the book has no rows")
    duplicated = factors.columns[factors.columns.duplicated()]
    if len(duplicated):
        raise InputError(f"factors: column '{duplicated[0]}' appears twice")
    for name in factors.columns:
        column = factors[name]
        if not isinstance(column.dtype, pd.CategoricalDtype):
            raise InputError(f"factor '{name}': expected a pandas Categorical column, got dtype {column.dtype}")
        labels = [level for level in column.cat.categories if not isinstance(level, str)]
        if labels:
            raise InputError(f"factor '{name}': level labels must be strings, got {labels[0]!r}")
        missing = np.flatnonzero(column.cat.codes.to_numpy() < 0)
        if missing.size:
            raise InputError(f"factor '{name}': {missing.size} missing values, first at row position {missing[0]}")
    return len(factors)


def _check_base_levels(factors: pd.DataFrame, base_levels: dict[str, str]) -> None:
    for name in base_levels:
        if name not in factors.columns:
            raise InputError(f"base_levels: '{name}' is not a factor")
    for name in factors.columns:
        if name not in base_levels:
            raise InputError(f"base_levels: no base level given for factor '{name}'")
        if base_levels[name] not in factors[name].cat.categories:
            raise InputError(f"base_levels['{name}']: '{base_levels[name]}' is not a level of the factor")


@dataclass
class GlmResult:
    """A fitted GLM baseline with row-level statistics (JSON keys: docs/run-directory.md, models/glm_*.json)."""

    family: str
    power: float | None
    link: str
    engine: str
    n_rows: int
    n_cells: int
    deviance: float
    null_deviance: float
    df_resid: float
    dispersion: float
    pearson_chi2: float
    aic: float
    llf: float
    penalty: str
    converged: bool
    iterations: int
    effective_parameters: float
    coefficients: list[dict[str, Any]]
    relativities: dict[str, dict[str, float]]
    base_levels: dict[str, str]
    factor_covariance: dict[str, dict[str, Any]] = field(default_factory=dict)
    control: list[str] = field(default_factory=list)
    credibility: dict[str, dict[str, float]] = field(default_factory=dict)
    aliased: list[str] = field(default_factory=list)
    no_rows: list[str] = field(default_factory=list)
    power_profile: list[dict[str, float]] = field(default_factory=list)
    power_interval: list[float] | None = None
    notes: list[str] = field(default_factory=list)
    warnings: list[dict[str, Any]] = field(default_factory=list)

    def to_json_dict(self) -> dict[str, Any]:
        """Plain JSON-able dict in a fixed key order; non-finite floats become null."""
        return {
            "family": self.family,
            "power": _json_float(self.power),
            "link": self.link,
            "engine": self.engine,
            "n_rows": int(self.n_rows),
            "n_cells": int(self.n_cells),
            "deviance": _json_float(self.deviance),
            "null_deviance": _json_float(self.null_deviance),
            "df_resid": _json_number(self.df_resid),
            "dispersion": _json_float(self.dispersion),
            "pearson_chi2": _json_float(self.pearson_chi2),
            "aic": _json_float(self.aic),
            "llf": _json_float(self.llf),
            "penalty": self.penalty,
            "converged": bool(self.converged),
            "iterations": int(self.iterations),
            "effective_parameters": _json_number(self.effective_parameters),
            "coefficients": [
                {
                    key: (row[key] if key == "term" else _json_float(row[key]))
                    for key in ("term", "estimate", "std_error", "p_value")
                }
                for row in self.coefficients
            ],
            "relativities": {
                name: {level: _json_float(value) for level, value in levels.items()}
                for name, levels in self.relativities.items()
            },
            "base_levels": dict(self.base_levels),
            "factor_covariance": {
                name: {"terms": list(block["terms"]), "matrix": [[float(v) for v in row] for row in block["matrix"]]}
                for name, block in self.factor_covariance.items()
            },
            "control": list(self.control),
            "credibility": {
                name: {key: _json_number(value) for key, value in entry.items()}
                for name, entry in self.credibility.items()
            },
            "aliased": list(self.aliased),
            "no_rows": list(self.no_rows),
            "power_profile": [
                {key: _json_float(value) for key, value in entry.items()} for entry in self.power_profile
            ],
            "power_interval": None if self.power_interval is None else [float(end) for end in self.power_interval],
            "notes": list(self.notes),
            "warnings": [dict(entry) for entry in self.warnings],
            "caution": DRAFT,
        }

    @classmethod
    def from_json_dict(cls, data: dict[str, Any]) -> GlmResult:
        """Inverse of ``to_json_dict`` (the caution is not stored)."""
        names = [name for name in cls.__dataclass_fields__]
        missing = [name for name in names if name not in data]
        if missing:
            raise InputError(f"GLM model JSON: missing key '{missing[0]}'")
        return cls(**{name: data[name] for name in names})

    def predict(self, factors: pd.DataFrame) -> np.ndarray:
        """Mean per exposure unit (frequency, pure premium) or per claim (severity):
        exp(Intercept) x product of the relativities of each row's levels.

        A value that is not a fitted level (a level unseen in the training rows, a missing value)
        takes the complement, relativity 1 (the base level); `unseen_rows` finds those rows.

        Parameters
        ----------
        factors : pandas.DataFrame
            One column per fitted factor; values compared as text with the fitted levels.

        Returns
        -------
        np.ndarray
            The mean of every row (money or claims per exposure unit, or money per claim).
        """
        intercept = next(row["estimate"] for row in self.coefficients if row["term"] == "Intercept")
        log_mean = np.full(len(factors), float(intercept))
        for name, levels in self.relativities.items():
            codes = _level_codes(factors, name, list(levels))
            log_relativity = np.append(np.log(np.array(list(levels.values()), dtype=float)), 0.0)
            log_mean += log_relativity[codes]  # code -1, not a fitted level: the appended 0
        return np.exp(log_mean)

    def unseen_rows(self, factors: pd.DataFrame) -> dict[str, np.ndarray]:
        """Per factor with any, the rows whose value is not a fitted level (priced at the base by `predict`).

        Parameters
        ----------
        factors : pandas.DataFrame
            One column per fitted factor, as for `predict`.

        Returns
        -------
        dict[str, np.ndarray]
            Factor name -> boolean mask of its rows with a value that is not a fitted level.
        """
        masks = {name: _level_codes(factors, name, list(levels)) < 0 for name, levels in self.relativities.items()}
        return {name: mask for name, mask in masks.items() if mask.any()}


def _json_float(value: float | None) -> float | None:
    if value is None or not np.isfinite(value):
        return None
    return float(value)


def _json_number(value: float) -> float | int | None:
    """A whole number as an integer (the unpenalised degrees of freedom), otherwise as `_json_float`."""
    if np.isfinite(value) and float(value).is_integer():
        return int(value)
    return _json_float(value)


def _level_codes(factors: pd.DataFrame, name: str, levels: list[str]) -> np.ndarray:
    """Position of each row's value (as text) among `levels`, -1 for a missing value or another level;
    matched once per distinct value."""
    if name not in factors.columns:
        raise InputError(f"factors: column '{name}' is missing")
    row_codes, uniques = pd.factorize(factors[name], use_na_sentinel=True)
    text = pd.Series(np.asarray(uniques, dtype=object), dtype=object).astype("string")
    level_of = pd.Index(levels, dtype=object).get_indexer(text.to_numpy(dtype=object, na_value=None))
    return np.append(level_of, -1)[row_codes].astype(np.int64)  # a missing value (code -1) matches no level


@dataclass(frozen=True)
class _Problem:
    """One model's rows: design, numerator (count or amount), weight (exposure or count), and
    the same rows cut into `chunks` held where `runner` runs the passes over the rows."""

    target: Target
    design: OneHotDesign
    numerator: np.ndarray
    weight: np.ndarray
    cells: Cells
    columns: ColumnChoice
    groups: PenaltyGroups
    chunks: list[Any]
    runner: TaskRunner

    @property
    def label(self) -> str:
        return self.target.title

    @property
    def model(self) -> str:
        """The model's name in the run (docs/run-directory.md): glm_TARGET."""
        return f"glm_{self.target.name}"


def _problem(
    target: Target,
    inputs: GlmInputs,
    rows: np.ndarray,
    numerator: np.ndarray,
    weight: np.ndarray,
    runner: TaskRunner,
) -> _Problem:
    label = target.title
    design = _design(inputs)
    if not rows.all():
        design = design.take(rows)
    chunks = row_chunks(design, numerator[rows], weight[rows], parts=runner.workers)
    if runner is not IN_PROCESS:  # each partition is sent to a worker with its own rows only
        chunks = [chunk.standalone() for chunk in chunks]
    chunks = runner.place(chunks)
    cells = cells_of_chunks(chunks, runner)
    for j, name in enumerate(design.factor_names):
        if not np.any(cells.design.codes[:, j] == design.base_codes[j]):
            raise InputError(
                f"base_levels['{name}']: base level '{inputs.base_levels[name]}' has no rows in the "
                f"{label} fit; choose a level with data"
            )
    columns = choose_columns(cells.design, cells.row_count)
    if design.n_rows <= len(columns.kept):
        raise InputError(
            f"{label}: {design.n_rows} rows for {len(columns.kept)} parameters; the fit needs more rows than parameters"
        )
    groups = penalty_groups(design, columns.kept)
    return _Problem(target, design, numerator[rows], weight[rows], cells, columns, groups, chunks, runner)


def _design(inputs: GlmInputs) -> OneHotDesign:
    names = tuple(str(name) for name in inputs.factors.columns)
    levels = tuple(tuple(inputs.factors[name].cat.categories) for name in names)
    base_codes = tuple(levels[j].index(inputs.base_levels[name]) for j, name in enumerate(names))
    codes = column_major([inputs.factors[name].cat.codes.to_numpy() for name in names], len(inputs.factors))
    return OneHotDesign(names, levels, base_codes, codes)


def _check_options(engine: str, penalty: str) -> None:
    if engine not in ENGINES:
        raise InputError(f"engine: expected one of {', '.join(ENGINES)}, got '{engine}'")
    if penalty not in PENALTIES:
        raise InputError(f"penalty: expected one of {', '.join(PENALTIES)}, got '{penalty}'")


def _engine_name(engine: str, problem: _Problem) -> str:
    if engine == "auto":
        return choose_engine(problem.design.n_rows, problem.cells.design.n_rows)
    return engine


def _estimate(
    problem: _Problem, family: Family, engine: str, penalty: str, start: EngineFit | None = None
) -> EngineFit:
    """The engine's fit, penalised as asked (warm-started at `start`)."""
    rule = credibility_rule(problem.groups) if penalty == "credibility" and problem.groups.names else None
    with _failures_named(problem, penalty):
        if engine == "cells":
            return fit_on_cells(problem.cells, problem.columns.kept, family, choose_ridge=rule, start=start)
        return fit_on_rows(
            problem.design,
            problem.numerator,
            problem.weight,
            problem.columns.kept,
            family,
            choose_ridge=rule,
            start=start,
        )


@contextmanager
def _failures_named(problem: _Problem, penalty: str) -> Iterator[None]:
    """A numerical failure in a fit (the linear algebra, or a mean that ran to zero) becomes an
    InputError naming the model, since it comes from the data."""
    try:
        yield
    except InputError:
        raise
    except (ValueError, FloatingPointError, np.linalg.LinAlgError) as e:
        hint = "check the book for extreme or degenerate values"
        if penalty == "none" and len(_levels_without_claims(problem)):
            hint = 'it has levels without claims, whose unpenalised estimates run to zero; use the credibility penalty ([glm] penalty = "credibility")'
        raise InputError(f"the {problem.label} GLM could not be fitted ({' '.join(str(e).split())}); {hint}") from None


def _full_beta(problem: _Problem, fit: EngineFit) -> np.ndarray:
    beta_full = np.zeros(problem.design.n_full)
    beta_full[problem.columns.kept] = fit.beta
    return beta_full


def _fit(
    problem: _Problem,
    family: Family,
    engine: str,
    penalty: str,
    inputs: GlmInputs,
    notes: list[str],
    fit: EngineFit | None = None,
) -> GlmResult:
    """The GlmResult of `problem` at `family` (from `fit` when it is already estimated)."""
    if fit is None:
        fit = _estimate(problem, family, engine, penalty)
    beta_full = _full_beta(problem, fit)
    kept = problem.columns.kept
    penalised = bool(np.any(fit.ridge > 0))
    parameters = fit.effective_parameters if penalised else len(kept)
    null_rate = float(problem.numerator.sum() / problem.weight.sum())
    stats = statistics_of_chunks(problem.chunks, beta_full, family, parameters, null_rate, problem.runner)
    std_error = np.sqrt(np.diag(fit.unit_covariance) * stats.dispersion)
    terms = problem.design.full_terms()
    without = _levels_without_claims(problem)
    if not penalised:
        std_error[np.isin(kept, without)] = np.nan  # the estimate runs to -infinity: no standard error
    p_value = 2.0 * scipy.stats.norm.sf(np.abs(fit.beta / std_error))
    design = problem.design
    relativities = {
        name: {level: float(np.exp(beta_full[offset + k])) for k, level in enumerate(levels)}
        for name, levels, offset in zip(design.factor_names, design.levels, design.offsets)
    }
    notes = list(notes) + _where_notes(problem, engine)
    notes += [
        f"{term}: no rows in the {problem.label} fit; not estimated, relativity 1.0" for term in problem.columns.no_data
    ]
    notes += [
        f"{term}: aliased (a linear combination of earlier terms); not estimated, relativity 1.0"
        for term in problem.columns.collinear
    ]
    if not fit.converged:
        notes.append(f"{engine} engine did not converge in {fit.iterations} iterations")
    credibility = factor_credibility(problem.groups, fit, stats.dispersion) if penalised else {}
    return GlmResult(
        family=family.name,
        power=family.power if family.name == "tweedie" else None,
        link="log",
        engine=engine,
        n_rows=stats.n_rows,
        n_cells=problem.cells.design.n_rows,
        deviance=stats.deviance,
        null_deviance=stats.null_deviance,
        df_resid=stats.df_resid,
        dispersion=stats.dispersion,
        pearson_chi2=stats.pearson_chi2,
        aic=stats.aic,
        llf=stats.llf,
        penalty=penalty,
        converged=fit.converged,
        iterations=fit.iterations,
        effective_parameters=parameters,
        coefficients=[
            {"term": terms[column], "estimate": float(b), "std_error": float(se), "p_value": float(p)}
            for column, b, se, p in zip(kept, fit.beta, std_error, p_value)
        ],
        relativities=relativities,
        base_levels=dict(inputs.base_levels),
        factor_covariance=_factor_covariance(design, kept, fit.unit_covariance * stats.dispersion, std_error),
        control=list(inputs.control),
        credibility={name: asdict(entry) for name, entry in credibility.items()},
        aliased=list(problem.columns.collinear),
        no_rows=list(problem.columns.no_data),
        notes=notes,
        warnings=[d.to_dict() for d in _diagnostics(problem, fit, penalised, relativities, without)],
    )


def _where_notes(problem: _Problem, engine: str) -> list[str]:
    """Where the fit ran, when a cluster took part: the passes over the rows on its workers, the
    Newton steps here (on the cells, or on the rows with the rows engine)."""
    if problem.runner is IN_PROCESS:
        return []
    steps = (
        "the Newton steps ran in this process on the cells"
        if engine == "cells"
        else "the rows engine's Newton steps ran in this process on the rows (the cluster path falls back to this process)"
    )
    return [
        f"cells and row statistics computed over {len(problem.chunks)} partitions of the rows on "
        f"{problem.runner.description}; {steps}"
    ]


def _levels_without_claims(problem: _Problem) -> np.ndarray:
    """Full-space columns of levels (base included) with rows but a numerator summing to 0."""
    cells = problem.cells
    rows = cells.design.transpose_times(cells.row_count)
    numerator = cells.design.transpose_times(cells.numerator)
    without = (rows > 0) & (numerator == 0)
    without[0] = False
    return np.flatnonzero(without)


def _diagnostics(
    problem: _Problem,
    fit: EngineFit,
    penalised: bool,
    relativities: dict[str, dict[str, float]],
    without: np.ndarray,
) -> list[Diagnostic]:
    """The model's warnings: non-convergence, levels without claims, and terms not estimated."""
    model, label = problem.model, problem.label
    found = []
    if penalised and fit.penalty_change > PENALTY_SETTLED:
        found.append(
            Diagnostic(
                "non_convergence",
                model,
                f"the credibility penalty of the {label} GLM still moved by {fit.penalty_change:.1%} at its "
                f"last step when it was held after {MAX_PENALTY_STEPS} steps; the shrinkage is approximate",
            )
        )
    if not fit.converged:
        hint = "" if penalised else ' (levels without claims run to zero; [glm] penalty = "credibility" holds them)'
        found.append(
            Diagnostic(
                "non_convergence",
                model,
                f"the {label} GLM did not converge in {fit.iterations} Newton steps; its estimates are unreliable{hint}",
            )
        )
    losses = "claims" if problem.target.name == "frequency" else "losses"
    for name, levels in _by_factor(problem.design, without).items():
        lowest = min(relativities[name][level] for level in levels)
        effect = (
            f"the credibility penalty holds them near the base (lowest relativity {lowest:.3g})"
            if penalised
            else f"their estimates run to zero (lowest relativity {lowest:.3g})"
        )
        found.append(_per_factor("separation", model, name, levels, f"without {losses} in the {label} fit; {effect}"))
    terms = problem.design.full_terms()
    not_estimated = (
        (
            "no_rows",
            problem.columns.no_data,
            f"with no rows in the {label} fit: not estimated, relativity 1 (the base)",
        ),
        (
            "aliased",
            problem.columns.collinear,
            "aliased (a linear combination of earlier terms): relativity 1 (the base)",
        ),
    )
    for kind, dropped, message in not_estimated:
        for name, levels in _by_factor(problem.design, np.flatnonzero(np.isin(terms, dropped))).items():
            found.append(_per_factor(kind, model, name, levels, message))
    return found


def _factor_covariance(
    design: OneHotDesign, kept: np.ndarray, covariance: np.ndarray, std_error: np.ndarray
) -> dict[str, dict[str, Any]]:
    """Per factor, its estimated terms with a standard error and their covariance block.

    Parameters
    ----------
    design : OneHotDesign
        The fit's design (full-space columns per factor).
    kept : np.ndarray
        Full-space column of each estimated coefficient, in `coefficients` order.
    covariance : np.ndarray
        Covariance of the estimated coefficients, dispersion x (X'WX + Lambda)^-1 (log scale).
    std_error : np.ndarray
        Their standard errors; NaN for a level without claims, which is left out of its block.

    Returns
    -------
    dict
        `{factor: {"terms": [factor[level], ...], "matrix": k x k list}}` for each factor with at
        least one such term (the input of the whole-factor Wald test, `models/glm/wald.py`).
    """
    terms = design.full_terms()
    out: dict[str, dict[str, Any]] = {}
    for j, name in enumerate(design.factor_names):
        inside = np.flatnonzero(np.isin(kept, design.columns_of(j)) & np.isfinite(std_error))
        if len(inside):
            block = covariance[np.ix_(inside, inside)]
            out[name] = {"terms": [terms[kept[i]] for i in inside], "matrix": block.tolist()}
    return out


def _by_factor(design: OneHotDesign, columns: np.ndarray) -> dict[str, list[str]]:
    """Full-space columns grouped as {factor: [level, ...]} in design order."""
    grouped: dict[str, list[str]] = {}
    for j, name in enumerate(design.factor_names):
        positions = columns[np.isin(columns, design.columns_of(j))] - design.offsets[j]
        if len(positions):
            grouped[name] = [design.levels[j][k] for k in positions]
    return grouped


def _per_factor(kind: str, model: str, factor: str, levels: list[str], what: str) -> Diagnostic:
    """One diagnostic for a factor's levels: '3 levels (first: a, b, c) WHAT', the level named when one."""
    shown = ", ".join(f"'{level}'" for level in levels[:SHOWN_LEVELS])
    more = f" and {len(levels) - SHOWN_LEVELS} more" if len(levels) > SHOWN_LEVELS else ""
    counted = f"level {shown}" if len(levels) == 1 else f"{len(levels)} levels ({shown}{more})"
    return Diagnostic(kind, model, f"{counted} {what}", factor, levels[0] if len(levels) == 1 else None)


def _require_amount(inputs: GlmInputs, target: Target) -> None:
    if target.needs_amount and inputs.claim_amount is None:
        raise InputError(f"claim_amount: required for the {target.title} model but not given")


def _target_problem(target: Target, inputs: GlmInputs, runner: TaskRunner) -> _Problem:
    """The target's rows, response (its numerator) and var_weights (its weight), `premiumlab.models.targets`."""
    rows = target.rows(inputs.claim_count, inputs.claim_amount)
    numerator, weight = target.columns(inputs.exposure, inputs.claim_count, inputs.claim_amount)
    return _problem(target, inputs, rows, numerator, weight, runner)


def _family(target: Target, tweedie_power: float | None = None) -> Family:
    """The engines' family of a target: its GLM family at its deviance power."""
    return Family(target.family, float(target.deviance_power(tweedie_power)))


def fit_frequency(
    inputs: GlmInputs, engine: str = "auto", penalty: str = "credibility", runner: TaskRunner = IN_PROCESS
) -> GlmResult:
    """Poisson GLM of claim counts, log link, offset log(exposure); relativities per claim frequency.

    log E[count] = log(exposure) + x'beta, so exp(x'beta) is the claim frequency (claims per
    exposure unit).

    Parameters
    ----------
    inputs : GlmInputs
        The rows: factors, base levels, exposure and claim counts.
    engine : str
        "auto" (cells when they are few, `choose_engine`), "cells" or "rows".
    penalty : str
        "credibility": each factor's level coefficients shrunk towards the base with the penalty
        lambda_f = phi / tau_f^2 the data choose (`premiumlab.models.glm.credibility`); standard
        errors are posterior ones. "none": maximum likelihood.
    runner : TaskRunner
        Where the passes over the rows run (the cells' sums and the row statistics,
        `premiumlab._core.cluster`): this process, or the workers of a Dask cluster over partitions
        of the rows, added up here; the Newton steps always run here.

    Returns
    -------
    GlmResult
        Coefficients, relativities, row-level statistics (dispersion 1) and warnings.

    Raises
    ------
    InputError
        An unknown engine or penalty, a base level without rows, no more rows than parameters, or
        a fit that fails on the data.
    """
    _check_options(engine, penalty)
    problem = _target_problem(FREQUENCY, inputs, runner)
    return _fit(problem, _family(FREQUENCY), _engine_name(engine, problem), penalty, inputs, [])


def fit_severity(
    inputs: GlmInputs, engine: str = "auto", penalty: str = "credibility", runner: TaskRunner = IN_PROCESS
) -> GlmResult:
    """Gamma GLM of amount / count with var_weights count, on rows with count > 0 and amount > 0.

    Nil claims (count > 0, amount 0) are excluded and counted in the notes.

    log E[amount / count] = x'beta, so exp(x'beta) is the severity (money per claim).

    Parameters
    ----------
    inputs : GlmInputs
        The rows, with claim amounts (money).
    engine : str
        "auto" (cells when they are few, `choose_engine`), "cells" or "rows".
    penalty : str
        "credibility" or "none", as `fit_frequency`; phi is the Pearson dispersion.
    runner : TaskRunner
        As `fit_frequency`.

    Returns
    -------
    GlmResult
        Coefficients, relativities and row-level statistics on the rows with claims, dispersion
        Pearson chi2 / df_resid, and warnings.

    Raises
    ------
    InputError
        No claim amounts, no row with count > 0 and amount > 0, or as `fit_frequency`.
    """
    _check_options(engine, penalty)
    _require_amount(inputs, SEVERITY)
    if not SEVERITY.rows(inputs.claim_count, inputs.claim_amount).any():
        raise InputError("claim_amount: no row has claim_count > 0 and claim_amount > 0; severity cannot be fitted")
    nil_claims = int(np.count_nonzero((inputs.claim_count > 0) & (inputs.claim_amount == 0)))
    notes = [f"{nil_claims} nil-claim rows (claim_count > 0, claim_amount 0) excluded from severity"]
    problem = _target_problem(SEVERITY, inputs, runner)
    return _fit(problem, _family(SEVERITY), _engine_name(engine, problem), penalty, inputs, notes)


def fit_pure_premium(
    inputs: GlmInputs,
    power: str | float = "auto",
    engine: str = "auto",
    penalty: str = "credibility",
    runner: TaskRunner = IN_PROCESS,
) -> GlmResult:
    """Tweedie GLM of amount / exposure with var_weights exposure, log link.

    ``power="auto"``: profile likelihood over 1.1..1.9 (bounded Brent search to 0.005, with the
    95 % profile likelihood interval) on the rows with the true Tweedie density and the dispersion
    at its maximum likelihood for each power (see `premiumlab.models.glm.tweedie`);
    with the credibility penalty the GLM is refitted, penalty included, at each power tried (each
    fit starting from the last).

    log E[amount / exposure] = x'beta, so exp(x'beta) is the pure premium (money per exposure
    unit); Var = phi mu^p / exposure.

    Parameters
    ----------
    inputs : GlmInputs
        The rows, with claim amounts (money).
    power : str or float
        "auto", or a fixed variance power p with 1 < p < 2.
    engine : str
        "auto" (cells when they are few, `choose_engine`), "cells" or "rows".
    penalty : str
        "credibility" or "none", as `fit_frequency`; phi is the Pearson dispersion.
    runner : TaskRunner
        As `fit_frequency`.

    Returns
    -------
    GlmResult
        Coefficients, relativities and row-level statistics at the chosen power; with "auto" also
        the profile (`power_profile`: power, log-likelihood, dispersion), the interval
        (`power_interval`) and a note on the choice.

    Raises
    ------
    InputError
        A power that is neither "auto" nor in (1, 2), no claim amounts, or as `fit_frequency`.
    """
    _check_options(engine, penalty)
    fixed_power = None if power == "auto" else _fixed_power(power)
    _require_amount(inputs, PURE_PREMIUM)
    problem = _target_problem(PURE_PREMIUM, inputs, runner)
    engine = _engine_name(engine, problem)
    fits: dict[float, EngineFit] = {}
    if fixed_power is None:

        def cell_means(candidate: float) -> np.ndarray:
            last = fits[next(reversed(fits))] if fits else None
            fits[candidate] = _estimate(problem, _family(PURE_PREMIUM, candidate), engine, penalty, start=last)
            return np.exp(problem.cells.design.linear_predictor(_full_beta(problem, fits[candidate])))

        with _failures_named(problem, penalty):
            profile = profile_power(cell_means, _tweedie_book(problem))
        chosen, interval = profile.power, list(profile.interval)
        notes = [
            f"power {chosen:.3f} chosen by profile likelihood over {POWER_BOUNDS[0]:g}..{POWER_BOUNDS[1]:g} "
            f"(to {POWER_TOLERANCE:g}); {INTERVAL_LEVEL:.0%} profile likelihood interval "
            f"{interval[0]:.3f}..{interval[1]:.3f}"
        ]
        notes += [
            f"the power's interval reaches {bound:g}, the edge of the searched range; the likelihood may stay high beyond it"
            for bound in profile.interval_at_bounds
        ]
        points = profile.points
    else:
        chosen, points, notes, interval = fixed_power, [], [], None
    result = _fit(problem, _family(PURE_PREMIUM, chosen), engine, penalty, inputs, notes, fits.get(chosen))
    result.power_profile = points
    result.power_interval = interval
    return result


def _tweedie_book(problem: _Problem) -> TweedieBook:
    """The Tweedie profile's sufficient statistics: the problem's cell sums and its rows with a loss."""
    cells, loss = problem.cells, problem.numerator > 0
    return TweedieBook(
        cell_numerator=cells.numerator,
        cell_weight=cells.weight,
        cell_numerator_squared=cells.numerator_squared,
        n_rows=problem.design.n_rows,
        loss_rate=problem.numerator[loss] / problem.weight[loss],
        loss_weight=problem.weight[loss],
    )


def _fixed_power(power: Any) -> float:
    if isinstance(power, bool) or not isinstance(power, (int, float)) or not 1.0 < float(power) < 2.0:
        raise InputError(f"power: expected 'auto' or a number strictly between 1 and 2, got {power!r}")
    return float(power)
