"""Numerics of the GLM baselines: one-hot design, aliasing, the cells and rows engines, row statistics,
and the Poisson Newton fit of a sparse design (the banded refit of a distilled table).

Every model is written in rate form: a row carries a numerator ``a`` (claim count or amount) and a
weight ``w`` (exposure or claim count); the response is the rate ``y = a / w`` with variance
``phi * mu**power / w`` and mean ``mu = exp(x'beta)`` (log link). Poisson frequency in this form has
the same estimates, Fisher information and deviance as the count form with offset log(exposure);
the row statistics are computed in the form statsmodels reports for the row-level fit.
"""

from __future__ import annotations

import itertools
import warnings
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import statsmodels.api as sm
from threadpoolctl import threadpool_limits

CHUNK_ROWS = 1_000_000
GROUP_LEVELS = 256
COEFFICIENT_TOLERANCE = 1e-10
MAX_ITERATIONS = 100
ALIAS_TOLERANCE = 1e-9
STEP_HALVINGS = 30
CELLS_MIN_LIMIT = 1_000
CELLS_SHARE_OF_ROWS = 0.05


@dataclass(frozen=True)
class Family:
    """Exponential-dispersion family with log link; ``power`` is the variance power (V(mu) = mu**power)."""

    name: str
    power: float

    def statsmodels(self) -> sm.families.Family:
        """The statsmodels family (true Tweedie density, ``eql=False``)."""
        log = sm.families.links.Log()
        if self.name == "poisson":
            return sm.families.Poisson(link=log)
        if self.name == "gamma":
            return sm.families.Gamma(link=log)
        return sm.families.Tweedie(link=log, var_power=self.power, eql=False)

    def row_view(
        self, numerator: np.ndarray, weight: np.ndarray, rate: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray | float]:
        """(endog, mu, var_weights) of the row-level statsmodels fit for rows with fitted ``rate``.

        Poisson: counts with mean exposure * rate and unit weights (offset form); others: the rate
        itself with var_weights ``weight``.
        """
        if self.name == "poisson":
            return numerator, weight * rate, 1.0
        return numerator / weight, rate, weight


POISSON = Family("poisson", 1.0)
GAMMA = Family("gamma", 2.0)


def _margin(counts: np.ndarray, keep: tuple[int, ...]) -> np.ndarray:
    """Sum of a counts array over every axis but ``keep`` (kept axes in their order)."""
    return counts.sum(axis=tuple(axis for axis in range(counts.ndim) if axis not in keep))


def column_major(columns: list[np.ndarray], n_rows: int) -> np.ndarray:
    """(n_rows, len(columns)) Fortran-ordered native-integer array from 1-D code columns.

    Parameters
    ----------
    columns : list[np.ndarray]
        One integer array of level codes per factor, each of length `n_rows`.
    n_rows : int
        Number of rows (used for the shape when there are no columns).

    Returns
    -------
    np.ndarray
        intp array of shape (n_rows, len(columns)), column j being ``columns[j]``.
    """
    if not columns:
        return np.zeros((n_rows, 0), dtype=np.intp)
    return np.array(columns, dtype=np.intp).T


@dataclass(frozen=True)
class OneHotDesign:
    """Treatment-coded one-hot design of rows held sparsely as one level code per factor and row.

    The codes are the column indices of a CSR one-hot matrix. The full column space is
    ``Intercept`` then every level of every factor (base levels included, never estimated).
    Passes over the rows work on groups of consecutive factors with at most GROUP_LEVELS level
    combinations, each row's combination held as one code: X'v and X'WX then take one weighted
    count per group (or pair of groups) instead of one per factor (or pair of factors).
    """

    factor_names: tuple[str, ...]
    levels: tuple[tuple[str, ...], ...]
    base_codes: tuple[int, ...]
    codes: np.ndarray  # (n_rows, n_factors) level codes

    def __post_init__(self) -> None:
        object.__setattr__(self, "codes", np.asfortranarray(self.codes, dtype=np.intp))

    @property
    def n_rows(self) -> int:
        return int(self.codes.shape[0])

    @cached_property
    def offsets(self) -> np.ndarray:
        """Column of each factor's first level in the full space (the intercept is column 0)."""
        return 1 + np.cumsum([0] + [len(lv) for lv in self.levels])[:-1].astype(np.int64)

    @property
    def n_full(self) -> int:
        return 1 + sum(len(lv) for lv in self.levels)

    def full_terms(self) -> list[str]:
        """Term name of every full-space column: ``Intercept`` and ``factor[level]``."""
        return ["Intercept"] + [f"{name}[{level}]" for name, lv in zip(self.factor_names, self.levels) for level in lv]

    def base_columns(self) -> np.ndarray:
        return self.offsets + np.asarray(self.base_codes, dtype=np.int64)

    def columns_of(self, factor: int) -> np.ndarray:
        """Full-space columns of a factor's levels."""
        return self.offsets[factor] + np.arange(len(self.levels[factor]))

    def take(self, rows: np.ndarray) -> OneHotDesign:
        """The design restricted to ``rows`` (boolean mask or positions)."""
        return OneHotDesign(
            self.factor_names,
            self.levels,
            self.base_codes,
            column_major([column[rows] for column in self.codes.T], len(np.arange(self.n_rows)[rows])),
        )

    def chunks(self, chunk_rows: int = CHUNK_ROWS) -> Iterator[slice]:
        for start in range(0, self.n_rows, chunk_rows):
            yield slice(start, min(start + chunk_rows, self.n_rows))

    @cached_property
    def groups(self) -> tuple[tuple[int, ...], ...]:
        """Consecutive factors grouped while their level combinations number at most GROUP_LEVELS."""
        groups: list[list[int]] = []
        combinations = GROUP_LEVELS + 1
        for j, lv in enumerate(self.levels):
            if combinations * len(lv) <= GROUP_LEVELS:
                groups[-1].append(j)
                combinations *= len(lv)
            else:
                groups.append([j])
                combinations = len(lv)
        return tuple(tuple(group) for group in groups)

    def group_shape(self, group: tuple[int, ...]) -> tuple[int, ...]:
        return tuple(len(self.levels[j]) for j in group)

    @cached_property
    def group_codes(self) -> tuple[np.ndarray, ...]:
        """Per group, each row's combination of levels as one code (row-major over the group's factors)."""
        codes = []
        for group in self.groups:
            code = self.codes[:, group[0]].copy()
            for j in group[1:]:
                code = code * len(self.levels[j]) + self.codes[:, j]
            codes.append(code)
        return tuple(codes)

    def linear_predictor(self, beta_full: np.ndarray, rows: slice = slice(None)) -> np.ndarray:
        """x'beta for ``rows``; ``beta_full`` is indexed by full-space column."""
        eta = np.full(len(np.arange(self.n_rows)[rows]), beta_full[0])
        for group, code in zip(self.groups, self.group_codes):
            shape = self.group_shape(group)
            table = np.zeros(shape)
            for axis, j in enumerate(group):
                table = table + beta_full[self.columns_of(j)].reshape(
                    [-1 if a == axis else 1 for a in range(len(shape))]
                )
            eta += table.ravel()[code[rows]]
        return eta

    def transpose_times(self, values: np.ndarray) -> np.ndarray:
        """X'v in the full space."""
        result = np.zeros(self.n_full)
        result[0] = values.sum()
        for group, code in zip(self.groups, self.group_codes):
            shape = self.group_shape(group)
            counts = np.bincount(code, values, minlength=int(np.prod(shape))).reshape(shape)
            for axis, j in enumerate(group):
                result[self.columns_of(j)] = _margin(counts, (axis,))
        return result

    def gram(self, weights: np.ndarray) -> np.ndarray:
        """X'WX in the full space from weighted counts of level combinations within and across groups."""
        gram = np.zeros((self.n_full, self.n_full))
        totals = self.transpose_times(weights)
        gram[0, :] = totals
        gram[:, 0] = totals
        gram[np.arange(1, self.n_full), np.arange(1, self.n_full)] = totals[1:]

        def fill(factors: tuple[int, ...], counts: np.ndarray, axis_pairs: Iterable[tuple[int, int]]) -> None:
            for x_axis, y_axis in axis_pairs:
                block = _margin(counts, (x_axis, y_axis))
                rows, columns = self.columns_of(factors[x_axis]), self.columns_of(factors[y_axis])
                gram[np.ix_(rows, columns)] = block
                gram[np.ix_(columns, rows)] = block.T

        for g, (group, code) in enumerate(zip(self.groups, self.group_codes)):
            shape = self.group_shape(group)
            size = int(np.prod(shape))
            counts = np.bincount(code, weights, minlength=size).reshape(shape)
            fill(group, counts, itertools.combinations(range(len(group)), 2))
            for other, other_code in zip(self.groups[g + 1 :], self.group_codes[g + 1 :]):
                other_shape = self.group_shape(other)
                other_size = int(np.prod(other_shape))
                counts = np.bincount(code * other_size + other_code, weights, minlength=size * other_size)
                fill(
                    group + other,
                    counts.reshape(shape + other_shape),
                    itertools.product(range(len(group)), range(len(group), len(group) + len(other))),
                )
        return gram

    def sparse(self, columns: np.ndarray) -> sp.csc_matrix:
        """The 0/1 design with the given full-space columns, in that order, as a CSC matrix."""
        rows = np.tile(np.arange(self.n_rows), 1 + len(self.levels))
        full_columns = np.concatenate(
            [np.zeros(self.n_rows, dtype=np.int64)]
            + [offset + self.codes[:, j] for j, offset in enumerate(self.offsets)]
        )
        full = sp.csc_matrix((np.ones(rows.size), (rows, full_columns)), shape=(self.n_rows, self.n_full))
        return full[:, columns]

    def dense(self, columns: np.ndarray) -> np.ndarray:
        """Dense design with the given full-space columns (for small designs, e.g. cells)."""
        return self.sparse(columns).toarray()


@dataclass(frozen=True)
class Cells:
    """Distinct combinations of factor levels with the sums of their rows."""

    design: OneHotDesign
    numerator: np.ndarray
    weight: np.ndarray
    row_count: np.ndarray


def aggregate_cells(design: OneHotDesign, numerator: np.ndarray, weight: np.ndarray) -> Cells:
    """Group rows by their level codes (sorted cells) and sum numerator, weight and rows per cell.

    Parameters
    ----------
    design : OneHotDesign
        The rows' level codes.
    numerator : np.ndarray
        Per row: claim count or claim amount (money).
    weight : np.ndarray
        Per row: exposure units or claim count.

    Returns
    -------
    Cells
        One cell per distinct combination of levels, in ascending order of the codes: its design
        row, and the sums of numerator, weight and rows (as floats) over the rows in it.
    """
    key = np.zeros(design.n_rows, dtype=np.int64)
    span = 1
    for j, lv in enumerate(design.levels):
        if span * len(lv) >= 2**62:
            key = np.unique(key, return_inverse=True)[1].astype(np.int64)
            span = int(key.max()) + 1
        key = key * len(lv) + design.codes[:, j]
        span *= len(lv)
    _, first_row, cell_of_row = np.unique(key, return_index=True, return_inverse=True)
    n_cells = len(first_row)
    return Cells(
        design=design.take(first_row),
        numerator=np.bincount(cell_of_row, numerator, minlength=n_cells),
        weight=np.bincount(cell_of_row, weight, minlength=n_cells),
        row_count=np.bincount(cell_of_row, minlength=n_cells).astype(float),
    )


@dataclass(frozen=True)
class ColumnChoice:
    """Estimated full-space columns, and the dropped ones with the reason."""

    kept: np.ndarray
    no_data: list[str]
    collinear: list[str]


def choose_columns(design: OneHotDesign, row_count: np.ndarray) -> ColumnChoice:
    """Drop base levels, levels without rows, and columns in the span of earlier ones (in term order).

    Rank is revealed by a Cholesky factorisation of X'X taken column by column in term order: a
    column whose squared distance to the span of the kept ones is below ALIAS_TOLERANCE times its
    squared norm is aliased (as a QR with columns kept in their given order would find).

    Parameters
    ----------
    design : OneHotDesign
        The design whose full-space columns are chosen (the cells' design, or the rows').
    row_count : np.ndarray
        Weight of each design row in X'X: the rows per cell (or 1 per row); a level whose column
        has weight 0 has no data.

    Returns
    -------
    ColumnChoice
        The kept full-space columns in term order, and the term names dropped for lack of data and
        as aliased. Base levels are neither kept nor listed.
    """
    gram = design.gram(row_count)
    terms = design.full_terms()
    base = set(design.base_columns().tolist())
    kept: list[int] = []
    factor = np.zeros((0, 0))
    no_data, collinear = [], []
    for column in range(design.n_full):
        if column in base:
            continue
        if gram[column, column] == 0.0:
            no_data.append(terms[column])
            continue
        cross = scipy.linalg.solve_triangular(factor, gram[kept, column], lower=True) if kept else np.zeros(0)
        residual = gram[column, column] - cross @ cross
        if residual <= ALIAS_TOLERANCE * gram[column, column]:
            collinear.append(terms[column])
            continue
        size = len(kept)
        grown = np.zeros((size + 1, size + 1))
        grown[:size, :size] = factor
        grown[size, :size] = cross
        grown[size, size] = np.sqrt(residual)
        factor = grown
        kept.append(column)
    return ColumnChoice(np.array(kept, dtype=np.int64), no_data, collinear)


def choose_engine(n_rows: int, n_cells: int) -> str:
    """``cells`` when the cells are few: at most max(CELLS_MIN_LIMIT, CELLS_SHARE_OF_ROWS * rows).

    Timed on 1,000,000 Poisson rows (benchmarks/glm_fit.py, part c): cells engine 0.5 s against
    rows engine 0.8 s at 0.1 % cells, equal (1.4 s) at 4.3 %, 14.6 s against 1.4 s at 20 %.

    Parameters
    ----------
    n_rows : int
        Rows of the fit.
    n_cells : int
        Distinct combinations of levels among them.

    Returns
    -------
    str
        "cells" or "rows".
    """
    return "cells" if n_cells <= max(CELLS_MIN_LIMIT, CELLS_SHARE_OF_ROWS * n_rows) else "rows"


@dataclass(frozen=True)
class EngineFit:
    """Estimates on the kept columns and the inverse Fisher information at unit dispersion."""

    beta: np.ndarray
    unit_covariance: np.ndarray
    converged: bool
    iterations: int


def fit_on_cells(cells: Cells, kept: np.ndarray, family: Family) -> EngineFit:
    """statsmodels GLM on the cells: Poisson on summed counts with offset log(summed exposure); Gamma
    and Tweedie on summed numerator / summed weight with var_weights the summed weight. Exact: the
    score and Fisher information of the rows depend only on these sums.

    BLAS runs on one thread here: the cell design is small, and two BLAS threads on a busy
    two-core machine made these fits 5-10 times slower (benchmarks/glm_fit.py).

    Parameters
    ----------
    cells : Cells
        The cells with their summed numerator, weight and rows (`aggregate_cells`).
    kept : np.ndarray
        Full-space columns to estimate, of full column rank on the cells (`choose_columns`).
    family : Family
        Poisson, Gamma or Tweedie at its power, log link.

    Returns
    -------
    EngineFit
        beta on the kept columns, the inverse Fisher information at unit dispersion
        (statsmodels' ``normalized_cov_params``), whether it converged, and the iterations.
    """
    exog = cells.design.dense(kept)
    with warnings.catch_warnings(), threadpool_limits(limits=1, user_api="blas"):
        warnings.simplefilter("ignore")
        if family.name == "poisson":
            model = sm.GLM(cells.numerator, exog, family=family.statsmodels(), offset=np.log(cells.weight))
        else:
            model = sm.GLM(cells.numerator / cells.weight, exog, family=family.statsmodels(), var_weights=cells.weight)
        fit = model.fit(tol=COEFFICIENT_TOLERANCE, tol_criterion="params", maxiter=MAX_ITERATIONS)
    return EngineFit(
        np.asarray(fit.params),
        np.asarray(fit.normalized_cov_params),
        bool(fit.converged),
        int(fit.fit_history["iteration"]),
    )


def fit_on_rows(
    design: OneHotDesign, numerator: np.ndarray, weight: np.ndarray, kept: np.ndarray, family: Family
) -> EngineFit:
    """Fisher scoring (IRLS) on the sparse one-hot rows until every coefficient moves < 1e-10.

    Working weights w * mu**(2 - power), working response eta + (y - mu) / mu, start
    mu = (y + mean y) / 2 as statsmodels; covariance from X'WX of the last iteration, at
    coefficients within 1e-10 of the estimate (as statsmodels does).

    Parameters
    ----------
    design : OneHotDesign
        The rows' level codes.
    numerator : np.ndarray
        Per row: claim count or claim amount (money); the rate is y = numerator / weight.
    weight : np.ndarray
        Per row: exposure units or claim count, > 0.
    kept : np.ndarray
        Full-space columns to estimate, of full column rank (`choose_columns`).
    family : Family
        Poisson, Gamma or Tweedie at its power (its variance power is used), log link.

    Returns
    -------
    EngineFit
        beta on the kept columns, (X'WX)^-1 at unit dispersion, whether every coefficient step fell
        below 1e-10 within MAX_ITERATIONS, and the iterations.
    """
    rate = numerator / weight
    mu = (rate + numerator.sum() / weight.sum()) / 2.0
    eta = np.log(mu)
    beta = np.full(len(kept), np.inf)
    beta_full = np.zeros(design.n_full)
    converged, iteration = False, 0
    for iteration in range(1, MAX_ITERATIONS + 1):  # noqa: B007 - the count of steps is returned
        working_weight = weight * mu ** (2.0 - family.power)
        information = scipy.linalg.cho_factor(design.gram(working_weight)[np.ix_(kept, kept)])
        score_side = design.transpose_times(working_weight * (eta + (rate - mu) / mu))[kept]
        new_beta = scipy.linalg.cho_solve(information, score_side)
        step = np.max(np.abs(new_beta - beta))
        beta = new_beta
        beta_full[kept] = beta
        eta = design.linear_predictor(beta_full)
        mu = np.exp(eta)
        if step < COEFFICIENT_TOLERANCE:
            converged = True
            break
    unit_covariance = scipy.linalg.cho_solve(information, np.eye(len(kept)))
    return EngineFit(beta, unit_covariance, converged, iteration)


def poisson_irls(design: sp.spmatrix, rate: np.ndarray, weight: np.ndarray) -> EngineFit:
    """Poisson quasi-likelihood with log link on a sparse design whose column 0 is the intercept.

    Maximises sum w (y eta - exp(eta)), eta = X beta, by Newton's method (Fisher scoring = IRLS for
    this canonical link): step = (X' diag(w mu) X)^-1 X' w (y - mu), halved (at most 30 times) while
    the Poisson deviance 2 sum w (y log(y / mu) - (y - mu)) rises by more than a 1e-12 share. Starts
    at the intercept log(sum w y / sum w); stops when every coefficient step is below
    COEFFICIENT_TOLERANCE, after at most MAX_ITERATIONS steps.

    Parameters
    ----------
    design : scipy.sparse matrix
        X, rows x columns, of full column rank (e.g. the columns `choose_columns` keeps).
    rate : np.ndarray
        Response y per unit of weight (>= 0).
    weight : np.ndarray
        Weights w (> 0), e.g. exposure.

    Returns
    -------
    EngineFit
        beta, the inverse of X' diag(w mu) X at the last step's start, whether it converged, steps.
    """
    deviance_of = POISSON.statsmodels().deviance
    beta = np.zeros(design.shape[1])
    beta[0] = np.log(np.sum(weight * rate) / np.sum(weight))
    mu = np.exp(design @ beta)
    deviance = deviance_of(rate, mu, var_weights=weight)
    converged, iteration = False, 0
    for iteration in range(1, MAX_ITERATIONS + 1):  # noqa: B007 - the count of steps is returned
        information = scipy.linalg.cho_factor((design.T @ sp.diags(weight * mu) @ design).toarray())
        step = scipy.linalg.cho_solve(information, design.T @ (weight * (rate - mu)))
        for _ in range(STEP_HALVINGS):
            trial = beta + step
            mu_trial = np.exp(design @ trial)
            deviance_trial = deviance_of(rate, mu_trial, var_weights=weight)
            if deviance_trial <= deviance * (1 + 1e-12) + 1e-300:
                break
            step = step / 2
        beta, mu, deviance = trial, mu_trial, deviance_trial
        if np.max(np.abs(step)) < COEFFICIENT_TOLERANCE:
            converged = True
            break
    unit_covariance = scipy.linalg.cho_solve(information, np.eye(len(beta)))
    return EngineFit(beta, unit_covariance, converged, iteration)


@dataclass(frozen=True)
class RowStatistics:
    """Row-level statistics as statsmodels reports them for the row-level fit with var_weights."""

    n_rows: int
    n_parameters: int
    deviance: float
    null_deviance: float
    pearson_chi2: float
    dispersion: float
    llf: float

    @property
    def df_resid(self) -> int:
        return self.n_rows - self.n_parameters

    @property
    def aic(self) -> float:
        """-2 llf + 2 k, k the number of estimated coefficients (dispersion not counted)."""
        return -2.0 * self.llf + 2.0 * self.n_parameters


def row_statistics(
    design: OneHotDesign,
    beta_full: np.ndarray,
    numerator: np.ndarray,
    weight: np.ndarray,
    family: Family,
    n_parameters: int,
    chunk_rows: int = CHUNK_ROWS,
) -> RowStatistics:
    """Deviance, null deviance (intercept only, rate sum(a)/sum(w)), Pearson chi2, dispersion
    (chi2 / df_resid; 1 for Poisson) and log-likelihood at that dispersion, from partial sums over
    row chunks. Log-likelihood, deviance and variance are statsmodels' own family functions.

    Pearson chi2 = sum(v (y - mu)^2 / V(mu)), with (y, mu, v) the row view of the family
    (`Family.row_view`: counts and unit weights for Poisson, rates and var_weights w otherwise).

    Parameters
    ----------
    design : OneHotDesign
        The rows' level codes.
    beta_full : np.ndarray
        Coefficients indexed by full-space column (0 for columns not estimated).
    numerator : np.ndarray
        Per row: claim count or claim amount (money).
    weight : np.ndarray
        Per row: exposure units or claim count, > 0.
    family : Family
        The fitted family.
    n_parameters : int
        Estimated coefficients k; df_resid = rows - k.
    chunk_rows : int
        Rows per pass chunk (bounds the memory of a pass).

    Returns
    -------
    RowStatistics
        The statistics as statsmodels reports them for the row-level fit.
    """
    model_family = family.statsmodels()
    null_rate = numerator.sum() / weight.sum()
    deviance = null_deviance = pearson_chi2 = 0.0
    for rows in design.chunks(chunk_rows):
        rate = np.exp(design.linear_predictor(beta_full, rows))
        endog, mu, var_weights = family.row_view(numerator[rows], weight[rows], rate)
        deviance += model_family.deviance(endog, mu, var_weights)
        pearson_chi2 += float(np.sum(var_weights * (endog - mu) ** 2 / model_family.variance(mu)))
        _, null_mu, _ = family.row_view(numerator[rows], weight[rows], np.full(len(rate), null_rate))
        null_deviance += model_family.deviance(endog, null_mu, var_weights)
    n_rows = design.n_rows
    dispersion = 1.0 if family.name == "poisson" else pearson_chi2 / (n_rows - n_parameters)
    llf = 0.0
    for rows in design.chunks(chunk_rows):
        rate = np.exp(design.linear_predictor(beta_full, rows))
        endog, mu, var_weights = family.row_view(numerator[rows], weight[rows], rate)
        llf += model_family.loglike(endog, mu, var_weights=var_weights, scale=dispersion)
    return RowStatistics(
        n_rows, n_parameters, float(deviance), float(null_deviance), pearson_chi2, float(dispersion), float(llf)
    )
