"""GLM baselines: Poisson frequency, Gamma severity and Tweedie pure premium, log link.

Estimates come from the cells engine (statsmodels on the distinct combinations of levels, exact)
or the rows engine (IRLS on the sparse one-hot rows); every statistic is the row-level one that
statsmodels reports for the fit on the rows with ``var_weights`` (and offset log exposure for
Poisson). Terms are ``Intercept`` and ``factor[level]`` with treatment coding against the base level.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import scipy.stats

from premiumlab._core.cautions import DRAFT
from premiumlab._core.errors import InputError
from premiumlab._core.validators import ABOVE_ZERO, AT_LEAST_ZERO, COUNT, Rule, checked_array
from premiumlab.models.glm.engines import (
    Cells,
    ColumnChoice,
    EngineFit,
    Family,
    OneHotDesign,
    aggregate_cells,
    choose_columns,
    choose_engine,
    column_major,
    fit_on_cells,
    fit_on_rows,
    row_statistics,
)
from premiumlab.models.glm.tweedie import POWER_GRID, profile_power
from premiumlab.models.targets import FREQUENCY, PURE_PREMIUM, SEVERITY, Target

ENGINES = ("auto", "cells", "rows")


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
    df_resid: int
    dispersion: float
    pearson_chi2: float
    aic: float
    llf: float
    coefficients: list[dict[str, Any]]
    relativities: dict[str, dict[str, float]]
    base_levels: dict[str, str]
    control: list[str] = field(default_factory=list)
    aliased: list[str] = field(default_factory=list)
    power_profile: list[dict[str, float]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

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
            "df_resid": int(self.df_resid),
            "dispersion": _json_float(self.dispersion),
            "pearson_chi2": _json_float(self.pearson_chi2),
            "aic": _json_float(self.aic),
            "llf": _json_float(self.llf),
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
            "control": list(self.control),
            "aliased": list(self.aliased),
            "power_profile": [
                {key: _json_float(value) for key, value in entry.items()} for entry in self.power_profile
            ],
            "notes": list(self.notes),
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
        exp(Intercept) x product of the relativities of each row's levels."""
        intercept = next(row["estimate"] for row in self.coefficients if row["term"] == "Intercept")
        log_mean = np.full(len(factors), float(intercept))
        for name, levels in self.relativities.items():
            codes = _level_codes(factors, name, list(levels))
            log_mean += np.log(np.array(list(levels.values()), dtype=float))[codes]
        return np.exp(log_mean)


def _json_float(value: float | None) -> float | None:
    if value is None or not np.isfinite(value):
        return None
    return float(value)


def _level_codes(factors: pd.DataFrame, name: str, levels: list[str]) -> np.ndarray:
    """Position of each row's value (as text) among `levels`; matched once per distinct value."""
    if name not in factors.columns:
        raise InputError(f"factors: column '{name}' is missing")
    column = factors[name]
    row_codes, uniques = pd.factorize(column, use_na_sentinel=True)
    text = pd.Series(np.asarray(uniques, dtype=object), dtype=object).astype("string")
    level_of = pd.Index(levels, dtype=object).get_indexer(text.to_numpy(dtype=object, na_value=None))
    codes = np.append(level_of, -1)[row_codes]  # a missing value (code -1) matches no level
    unknown = np.flatnonzero(codes < 0)
    if unknown.size:
        value = column.iloc[[unknown[0]]].astype("string").iloc[0]
        raise InputError(
            f"factor '{name}': level '{value}' at row position {unknown[0]} is missing or not a fitted level"
        )
    return codes.astype(np.int64)


@dataclass(frozen=True)
class _Problem:
    """One model's rows: design, numerator (count or amount), weight (exposure or count)."""

    label: str
    design: OneHotDesign
    numerator: np.ndarray
    weight: np.ndarray
    cells: Cells
    columns: ColumnChoice


def _problem(label: str, inputs: GlmInputs, rows: np.ndarray, numerator: np.ndarray, weight: np.ndarray) -> _Problem:
    design = _design(inputs)
    if not rows.all():
        design = design.take(rows)
    cells = aggregate_cells(design, numerator[rows], weight[rows])
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
    return _Problem(label, design, numerator[rows], weight[rows], cells, columns)


def _design(inputs: GlmInputs) -> OneHotDesign:
    names = tuple(str(name) for name in inputs.factors.columns)
    levels = tuple(tuple(inputs.factors[name].cat.categories) for name in names)
    base_codes = tuple(levels[j].index(inputs.base_levels[name]) for j, name in enumerate(names))
    codes = column_major([inputs.factors[name].cat.codes.to_numpy() for name in names], len(inputs.factors))
    return OneHotDesign(names, levels, base_codes, codes)


def _check_engine(engine: str) -> None:
    if engine not in ENGINES:
        raise InputError(f"engine: expected one of {', '.join(ENGINES)}, got '{engine}'")


def _engine_name(engine: str, problem: _Problem) -> str:
    if engine == "auto":
        return choose_engine(problem.design.n_rows, problem.cells.design.n_rows)
    return engine


def _estimate(problem: _Problem, family: Family, engine: str) -> EngineFit:
    """The engine's fit; a numerical failure inside it (statsmodels or the linear algebra) becomes an
    InputError naming the model, since it comes from the data."""
    try:
        if engine == "cells":
            return fit_on_cells(problem.cells, problem.columns.kept, family)
        return fit_on_rows(problem.design, problem.numerator, problem.weight, problem.columns.kept, family)
    except InputError:
        raise
    except (ValueError, FloatingPointError, np.linalg.LinAlgError) as e:
        raise InputError(
            f"the {problem.label} GLM could not be fitted ({' '.join(str(e).split())}); "
            "check the book for extreme or degenerate values"
        ) from None


def _full_beta(problem: _Problem, fit: EngineFit) -> np.ndarray:
    beta_full = np.zeros(problem.design.n_full)
    beta_full[problem.columns.kept] = fit.beta
    return beta_full


def _fit(problem: _Problem, family: Family, engine: str, inputs: GlmInputs, notes: list[str]) -> GlmResult:
    fit = _estimate(problem, family, engine)
    beta_full = _full_beta(problem, fit)
    kept = problem.columns.kept
    stats = row_statistics(problem.design, beta_full, problem.numerator, problem.weight, family, len(kept))
    std_error = np.sqrt(np.diag(fit.unit_covariance) * stats.dispersion)
    p_value = 2.0 * scipy.stats.norm.sf(np.abs(fit.beta / std_error))
    terms = problem.design.full_terms()
    design = problem.design
    relativities = {
        name: {level: float(np.exp(beta_full[offset + k])) for k, level in enumerate(levels)}
        for name, levels, offset in zip(design.factor_names, design.levels, design.offsets)
    }
    dropped = set(problem.columns.no_data) | set(problem.columns.collinear)
    notes = list(notes)
    notes += [
        f"{term}: no rows in the {problem.label} fit; not estimated, relativity 1.0" for term in problem.columns.no_data
    ]
    notes += [
        f"{term}: aliased (a linear combination of earlier terms); not estimated, relativity 1.0"
        for term in problem.columns.collinear
    ]
    if not fit.converged:
        notes.append(f"{engine} engine did not converge in {fit.iterations} iterations")
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
        coefficients=[
            {"term": terms[column], "estimate": float(b), "std_error": float(se), "p_value": float(p)}
            for column, b, se, p in zip(kept, fit.beta, std_error, p_value)
        ],
        relativities=relativities,
        base_levels=dict(inputs.base_levels),
        control=list(inputs.control),
        aliased=[term for term in terms if term in dropped],
        notes=notes,
    )


def _require_amount(inputs: GlmInputs, target: Target) -> None:
    if target.needs_amount and inputs.claim_amount is None:
        raise InputError(f"claim_amount: required for the {target.title} model but not given")


def _target_problem(target: Target, inputs: GlmInputs) -> _Problem:
    """The target's rows, response (its numerator) and var_weights (its weight), `premiumlab.models.targets`."""
    rows = target.rows(inputs.claim_count, inputs.claim_amount)
    numerator, weight = target.columns(inputs.exposure, inputs.claim_count, inputs.claim_amount)
    return _problem(target.title, inputs, rows, numerator, weight)


def _family(target: Target, tweedie_power: float | None = None) -> Family:
    """The engines' family of a target: its GLM family at its deviance power."""
    return Family(target.family, float(target.deviance_power(tweedie_power)))


def fit_frequency(inputs: GlmInputs, engine: str = "auto") -> GlmResult:
    """Poisson GLM of claim counts, log link, offset log(exposure); relativities per claim frequency.

    log E[count] = log(exposure) + x'beta, so exp(x'beta) is the claim frequency (claims per
    exposure unit).

    Parameters
    ----------
    inputs : GlmInputs
        The rows: factors, base levels, exposure and claim counts.
    engine : str
        "auto" (cells when they are few, `choose_engine`), "cells" or "rows".

    Returns
    -------
    GlmResult
        Coefficients, relativities and row-level statistics (dispersion 1).

    Raises
    ------
    InputError
        An unknown engine, a base level without rows, no more rows than parameters, or a fit that
        fails on the data.
    """
    _check_engine(engine)
    problem = _target_problem(FREQUENCY, inputs)
    return _fit(problem, _family(FREQUENCY), _engine_name(engine, problem), inputs, [])


def fit_severity(inputs: GlmInputs, engine: str = "auto") -> GlmResult:
    """Gamma GLM of amount / count with var_weights count, on rows with count > 0 and amount > 0.

    Nil claims (count > 0, amount 0) are excluded and counted in the notes.

    log E[amount / count] = x'beta, so exp(x'beta) is the severity (money per claim).

    Parameters
    ----------
    inputs : GlmInputs
        The rows, with claim amounts (money).
    engine : str
        "auto" (cells when they are few, `choose_engine`), "cells" or "rows".

    Returns
    -------
    GlmResult
        Coefficients, relativities and row-level statistics on the rows with claims, dispersion
        Pearson chi2 / df_resid.

    Raises
    ------
    InputError
        No claim amounts, no row with count > 0 and amount > 0, or as `fit_frequency`.
    """
    _check_engine(engine)
    _require_amount(inputs, SEVERITY)
    if not SEVERITY.rows(inputs.claim_count, inputs.claim_amount).any():
        raise InputError("claim_amount: no row has claim_count > 0 and claim_amount > 0; severity cannot be fitted")
    nil_claims = int(np.count_nonzero((inputs.claim_count > 0) & (inputs.claim_amount == 0)))
    notes = [f"{nil_claims} nil-claim rows (claim_count > 0, claim_amount 0) excluded from severity"]
    problem = _target_problem(SEVERITY, inputs)
    return _fit(problem, _family(SEVERITY), _engine_name(engine, problem), inputs, notes)


def fit_pure_premium(inputs: GlmInputs, power: str | float = "auto", engine: str = "auto") -> GlmResult:
    """Tweedie GLM of amount / exposure with var_weights exposure, log link.

    ``power="auto"``: profile likelihood over 1.1..1.9 on the rows with the true Tweedie density
    and the dispersion at its maximum likelihood for each power (see `premiumlab.models.glm.tweedie`).

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

    Returns
    -------
    GlmResult
        Coefficients, relativities and row-level statistics at the chosen power; with "auto" also
        the profile (`power_profile`: power, log-likelihood, dispersion) and a note on the choice.

    Raises
    ------
    InputError
        A power that is neither "auto" nor in (1, 2), no claim amounts, or as `fit_frequency`.
    """
    _check_engine(engine)
    fixed_power = None if power == "auto" else _fixed_power(power)
    _require_amount(inputs, PURE_PREMIUM)
    problem = _target_problem(PURE_PREMIUM, inputs)
    engine = _engine_name(engine, problem)
    if fixed_power is None:

        def row_means(candidate: float) -> np.ndarray:
            fit = _estimate(problem, _family(PURE_PREMIUM, candidate), engine)
            return np.exp(problem.design.linear_predictor(_full_beta(problem, fit)))

        chosen, profile = profile_power(row_means, problem.numerator / problem.weight, problem.weight)
        notes = [f"power {chosen:g} chosen by profile likelihood over {POWER_GRID[0]:g}..{POWER_GRID[-1]:g}"]
        if chosen in (POWER_GRID[0], POWER_GRID[-1]):
            notes.append(f"power {chosen:g} is at the edge of the searched range; the likelihood may peak outside it")
    else:
        chosen, profile, notes = fixed_power, [], []
    result = _fit(problem, _family(PURE_PREMIUM, chosen), engine, inputs, notes)
    result.power_profile = profile
    return result


def _fixed_power(power: Any) -> float:
    if isinstance(power, bool) or not isinstance(power, (int, float)) or not 1.0 < float(power) < 2.0:
        raise InputError(f"power: expected 'auto' or a number strictly between 1 and 2, got {power!r}")
    return float(power)
