"""Numerics of the GLM baselines: one-hot design, aliasing, the one (penalised) Newton loop that the
cells and rows engines and the banded refit of a distilled table share, and row statistics.

Every model is written in rate form: a row carries a numerator ``a`` (claim count or amount) and a
weight ``w`` (exposure or claim count); the response is the rate ``y = a / w`` with variance
``phi * mu**power / w`` and mean ``mu = exp(x'beta)`` (log link). Poisson frequency in this form has
the same estimates, Fisher information and deviance as the count form with offset log(exposure);
the row statistics are computed in the form statsmodels reports for the row-level fit.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Any, Protocol

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import statsmodels.api as sm
from threadpoolctl import threadpool_limits

from premiumlab._core.cluster import IN_PROCESS, TaskRunner

CHUNK_ROWS = 1_000_000
GROUP_LEVELS = 256
COEFFICIENT_TOLERANCE = 1e-10
MAX_ITERATIONS = 100
PENALTY_FREEZE_TOLERANCE = 1e-6
MAX_PENALTY_STEPS = 50
ALIAS_TOLERANCE = 1e-9
STEP_HALVINGS = 30
CELLS_MIN_LIMIT = 1_000
CELLS_SHARE_OF_ROWS = 0.5


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

    def take(self, rows: np.ndarray | slice) -> OneHotDesign:
        """The design restricted to ``rows`` (boolean mask, positions or a slice)."""
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
    numerator_squared: np.ndarray


@dataclass(frozen=True)
class RowChunk:
    """Consecutive rows of a fit (a partition of the book): rows `rows` of `design` (None: all of
    them), and their numerator and weight. In one process a chunk is a view of the whole design; `standalone` is
    the chunk with its own rows' codes only, to send to another process."""

    design: OneHotDesign
    numerator: np.ndarray
    weight: np.ndarray
    rows: slice | None = None

    @property
    def codes(self) -> np.ndarray:
        """The chunk's rows' level codes, (rows, factors)."""
        return self.design.codes if self.rows is None else self.design.codes[self.rows]

    def linear_predictor(self, beta_full: np.ndarray) -> np.ndarray:
        """x'beta of the chunk's rows; `beta_full` is indexed by full-space column."""
        return self.design.linear_predictor(beta_full, slice(None) if self.rows is None else self.rows)

    def standalone(self) -> RowChunk:
        """The chunk holding only its own rows' codes (a copy when it is a view of more rows)."""
        if self.rows is None:
            return self
        return RowChunk(self.design.take(self.rows), self.numerator, self.weight)


def row_chunks(
    design: OneHotDesign, numerator: np.ndarray, weight: np.ndarray, parts: int = 1, chunk_rows: int = CHUNK_ROWS
) -> list[RowChunk]:
    """The rows cut into consecutive chunks of at most `chunk_rows` rows, and at least `parts` chunks
    when there are as many rows (one chunk per worker of a cluster).

    Parameters
    ----------
    design : OneHotDesign
        The rows' level codes.
    numerator : np.ndarray
        Per row: claim count or claim amount (money).
    weight : np.ndarray
        Per row: exposure units or claim count, > 0.
    parts : int
        The fewest chunks wanted (the workers that will share them), >= 1.
    chunk_rows : int
        The most rows of a chunk (bounds the memory of a pass).

    Returns
    -------
    list[RowChunk]
        The chunks in row order, views of the rows (no copy; `RowChunk.standalone` copies one).
    """
    size = max(1, min(chunk_rows, -(-design.n_rows // max(1, parts))))
    if size >= design.n_rows:
        return [RowChunk(design, numerator, weight)]
    return [RowChunk(design, numerator[rows], weight[rows], rows) for rows in design.chunks(size)]


def _sums_by_cell(design: OneHotDesign, codes: np.ndarray, sums: np.ndarray) -> Cells:
    """Group rows by their level codes `codes` (of `design`'s factors; cells in ascending order of
    the codes) and add up the four columns of `sums` (numerator, weight, rows, numerator^2 / weight)
    per cell."""
    key = np.zeros(len(codes), dtype=np.int64)
    span = 1
    for j, lv in enumerate(design.levels):
        if span * len(lv) >= 2**62:
            key = np.unique(key, return_inverse=True)[1].astype(np.int64)
            span = int(key.max()) + 1
        key = key * len(lv) + codes[:, j]
        span *= len(lv)
    _, first_row, cell_of_row = np.unique(key, return_index=True, return_inverse=True)
    n_cells = len(first_row)
    added = [np.bincount(cell_of_row, column, minlength=n_cells) for column in sums.T]
    cells = OneHotDesign(design.factor_names, design.levels, design.base_codes, codes[first_row])
    return Cells(cells, *added)


def cell_statistics(chunk: RowChunk) -> Cells:
    """The cells of a chunk of rows with their partial sums, the one aggregation of the cells engine.

    Applied to all the rows at once, chunk by chunk in one process, or to a book's partitions on
    the workers of a Dask cluster; `combine_cells` adds the partial sums up.

    Parameters
    ----------
    chunk : RowChunk
        Rows: level codes, numerator a (claim count or money) and weight w (exposure or claims, > 0).

    Returns
    -------
    Cells
        One cell per distinct combination of levels among the chunk's rows, in ascending order of
        the codes, with the sums over its rows of a, w, 1 (rows, as floats) and a^2 / w.
    """
    a, w = chunk.numerator, chunk.weight
    return _sums_by_cell(chunk.design, chunk.codes, np.column_stack([a, w, np.ones(len(w)), a**2 / w]))


def combine_cells(parts: Sequence[Cells]) -> Cells:
    """The cells of several chunks' partial sums (`cell_statistics`): the sums added up per cell.

    Parameters
    ----------
    parts : Sequence[Cells]
        Partial sums of chunks of rows of one design (same factors and levels), at least one.

    Returns
    -------
    Cells
        One cell per distinct combination of levels over the parts, in ascending order of the
        codes (as `cell_statistics` of all the rows at once), with the parts' sums added.
    """
    if len(parts) == 1:
        return parts[0]
    codes = np.concatenate([p.design.codes for p in parts])
    sums = np.concatenate([np.column_stack([p.numerator, p.weight, p.row_count, p.numerator_squared]) for p in parts])
    return _sums_by_cell(parts[0].design, codes, sums)


def _chunk_cells(_: None, chunk: RowChunk) -> Cells:
    """`cell_statistics` as a task of a `TaskRunner` (no shared part)."""
    return cell_statistics(chunk)


def cells_of_chunks(chunks: Sequence[Any], runner: TaskRunner = IN_PROCESS) -> Cells:
    """The cells of all the rows: `cell_statistics` of every chunk, run where `runner` runs its
    tasks (here, or on the workers of a Dask cluster), added up here by `combine_cells`.

    Parameters
    ----------
    chunks : Sequence
        The rows' chunks (`row_chunks`), as `runner.place` holds them.
    runner : TaskRunner
        This process, or the workers of a Dask cluster (`premiumlab._core.cluster`).

    Returns
    -------
    Cells
        As `aggregate_cells`.
    """
    return combine_cells(runner.map(_chunk_cells, None, chunks, _nothing))


def aggregate_cells(design: OneHotDesign, numerator: np.ndarray, weight: np.ndarray) -> Cells:
    """Group rows by their level codes (sorted cells) and sum numerator, weight and rows per cell,
    chunk by chunk in this process (`cell_statistics`, `combine_cells`).

    Parameters
    ----------
    design : OneHotDesign
        The rows' level codes.
    numerator : np.ndarray
        Per row: claim count or claim amount (money).
    weight : np.ndarray
        Per row: exposure units or claim count, > 0.

    Returns
    -------
    Cells
        One cell per distinct combination of levels, in ascending order of the codes: its design
        row, and the sums of numerator, weight, rows (as floats) and numerator^2 / weight over the
        rows in it.
    """
    return cells_of_chunks(row_chunks(design, numerator, weight))


def _nothing() -> None:
    """No progress to report."""


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

    Both engines run `newton_fit`; the cells engine adds the aggregation and saves per-step work in
    proportion to the cells' share. CPU seconds (best of two) on 1,000,000 Poisson rows of the
    invented books of benchmarks/glm_fit.py, parts b and c, unpenalised, on a busy two-core machine: cells engine 0.24 s
    against rows engine 0.30 s at 0.1 % cells, 0.39 s against 0.59 s at 20 %, 0.66 s against 0.73 s
    at 67 % (five to seven factors) and 0.87 s against 0.80 s at 65 % (eight factors), 1.18 s against
    0.87 s at 94 % (ten factors).

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


class Columns(Protocol):
    """The estimated columns of a design, as the Newton loop uses them (k columns, column 0 the intercept)."""

    def gram(self, weights: np.ndarray) -> np.ndarray:
        """X' diag(weights) X, (k, k)."""
        ...

    def transpose_times(self, values: np.ndarray) -> np.ndarray:
        """X'v, (k,)."""
        ...

    def linear_predictor(self, beta: np.ndarray) -> np.ndarray:
        """X beta, one value per design row."""
        ...

    @property
    def size(self) -> int:
        """The number of columns k."""
        ...


@dataclass(frozen=True)
class KeptColumns:
    """The kept full-space columns of a one-hot design (`choose_columns`), in their order."""

    design: OneHotDesign
    kept: np.ndarray

    @property
    def size(self) -> int:
        return len(self.kept)

    def gram(self, weights: np.ndarray) -> np.ndarray:
        return self.design.gram(weights)[np.ix_(self.kept, self.kept)]

    def transpose_times(self, values: np.ndarray) -> np.ndarray:
        return self.design.transpose_times(values)[self.kept]

    def linear_predictor(self, beta: np.ndarray) -> np.ndarray:
        beta_full = np.zeros(self.design.n_full)
        beta_full[self.kept] = beta
        return self.design.linear_predictor(beta_full)


@dataclass(frozen=True)
class SparseColumns:
    """A sparse design matrix of full column rank."""

    matrix: sp.csc_matrix

    @property
    def size(self) -> int:
        return int(self.matrix.shape[1])

    def gram(self, weights: np.ndarray) -> np.ndarray:
        return np.asarray((self.matrix.T @ sp.diags(weights) @ self.matrix).toarray())

    def transpose_times(self, values: np.ndarray) -> np.ndarray:
        return np.asarray(self.matrix.T @ values)

    def linear_predictor(self, beta: np.ndarray) -> np.ndarray:
        return np.asarray(self.matrix @ beta)


@dataclass(frozen=True)
class RateData:
    """Responses in rate form, per design row (a row of the book or a cell of rows).

    ``numerator`` a and ``weight`` w are sums over the book rows behind a design row, and
    ``numerator_squared`` is the sum of a^2 / w over them (for the Pearson statistic);
    ``n_rows`` counts the book rows (the residual degrees of freedom).
    """

    numerator: np.ndarray
    weight: np.ndarray
    numerator_squared: np.ndarray
    n_rows: int

    @classmethod
    def of_rows(cls, numerator: np.ndarray, weight: np.ndarray) -> RateData:
        """The book rows themselves."""
        return cls(numerator, weight, numerator**2 / weight, len(weight))

    @classmethod
    def of_cells(cls, cells: Cells) -> RateData:
        """The cells' sums."""
        return cls(cells.numerator, cells.weight, cells.numerator_squared, int(cells.row_count.sum()))


def mean_dependent_deviance(data: RateData, mu: np.ndarray, power: float) -> float:
    """The deviance sum_i w_i d(y_i, mu) less its terms free of the means (for comparing means).

    With a = w y summed per design row: 2 sum [w mu^(2-p) / (2-p) - a mu^(1-p) / (1-p)], and the
    limits 2 sum [w mu - a log mu] at p = 1 (Poisson) and 2 sum [w log mu + a / mu] at p = 2 (Gamma).

    Parameters
    ----------
    data : RateData
        Numerator a and weight w per design row.
    mu : np.ndarray
        Mean rate of each design row, > 0 (units of a / w).
    power : float
        Variance power p.

    Returns
    -------
    float
        The deviance up to a constant of the data.
    """
    a, w = data.numerator, data.weight
    if power == 1.0:
        terms = w * mu - a * np.log(mu)
    elif power == 2.0:
        terms = w * np.log(mu) + a / mu
    else:
        terms = w * mu ** (2.0 - power) / (2.0 - power) - a * mu ** (1.0 - power) / (1.0 - power)
    return float(2.0 * np.sum(terms))


def pearson_chi2(data: RateData, mu: np.ndarray, power: float) -> float:
    """sum over book rows of w (y - mu)^2 / mu^p, from per-design-row sums: sum (S - 2 mu a + mu^2 w) / mu^p.

    Parameters
    ----------
    data : RateData
        a, w and S = sum a^2 / w per design row.
    mu : np.ndarray
        Mean rate of each design row, > 0.
    power : float
        Variance power p.

    Returns
    -------
    float
        The Pearson chi-square of the rate form (for Poisson it equals that of the counts).
    """
    return float(np.sum((data.numerator_squared - 2.0 * mu * data.numerator + mu**2 * data.weight) / mu**power))


@dataclass(frozen=True)
class EngineFit:
    """Estimates on the kept columns, the inverse of the penalised information, and the penalty.

    ``unit_covariance`` is (X'WX + diag(ridge))^-1 at unit dispersion: times the dispersion it is
    the covariance of the estimates (unpenalised, ridge 0) or their posterior covariance (penalised).
    ``penalty_change`` is the largest relative change of the ridge at its last re-choice (0 when
    it is fixed).
    """

    beta: np.ndarray
    unit_covariance: np.ndarray
    converged: bool
    iterations: int
    ridge: np.ndarray
    penalty_change: float = 0.0

    @property
    def effective_parameters(self) -> float:
        """tr((X'WX + R)^-1 X'WX) = k - sum_j r_j S_jj: the number of coefficients the penalty leaves."""
        return float(len(self.beta) - np.sum(self.ridge * np.diag(self.unit_covariance)))


@dataclass(frozen=True)
class WorkingModel:
    """The quadratic approximation of the GLM that one Newton step solves, at coefficients ``start``.

    -log-likelihood x 2 / phi ~ (const - 2 right'beta + beta' gram beta) / phi near ``start``:
    ``gram`` = X' diag(W) X with the observed information per row W = w mu^(1-p) ((2-p) mu + (p-1) y),
    ``right`` = gram start + X' w mu^(1-p) (y - mu). ``pearson_chi2`` is the Pearson statistic at
    ``start`` (None for Poisson, whose dispersion is 1); ``n_rows`` the book rows.
    """

    gram: np.ndarray
    right: np.ndarray
    start: np.ndarray
    pearson_chi2: float | None
    n_rows: int

    def dispersion(self, effective_parameters: float) -> float:
        """phi: 1 for Poisson, else the Pearson statistic at ``start`` / (rows - effective parameters).

        Parameters
        ----------
        effective_parameters : float
            k_eff, the effective number of coefficients.

        Returns
        -------
        float
            The dispersion phi.
        """
        if self.pearson_chi2 is None:
            return 1.0
        return float(self.pearson_chi2 / (self.n_rows - effective_parameters))


#: (working model, current ridge per column) -> new ridge per column
RidgeRule = Callable[[WorkingModel, np.ndarray], np.ndarray]


def newton_fit(
    columns: Columns,
    data: RateData,
    family: Family,
    ridge: np.ndarray | None = None,
    choose_ridge: RidgeRule | None = None,
    start: EngineFit | None = None,
) -> EngineFit:
    """Penalised Newton's method for a log-link GLM in rate form, the one Newton loop of the GLMs.

    Minimises the penalised deviance Q(beta) = D(beta) + sum_j r_j beta_j^2 (r = ridge, 0 for the
    intercept and for unpenalised fits), D = sum w d(y, mu), mu = exp(X beta), Var y = phi mu^p / w.
    Each step solves (X'WX + R) step = X' w mu^(1-p) (y - mu) - R beta with the observed
    information per row W = w mu^(1-p) ((2-p) mu + (p-1) y) (> 0 for 1 <= p <= 2; it is Fisher's
    w mu^(2-p) for Poisson, and converges quadratically also where Fisher scoring does not), halved
    (at most STEP_HALVINGS times) while Q rises by more than a 1e-12 share. With `choose_ridge`,
    the ridge is re-chosen at every step from that step's `WorkingModel` until the step falls below
    PENALTY_FREEZE_TOLERANCE, or for at most MAX_PENALTY_STEPS steps (where one large residual
    dominates the dispersion, the two settle together slowly); then it is held and the fit continues. Starts at the intercept
    log(sum a / sum w) (or at `start`); converged when every coefficient's step is below
    COEFFICIENT_TOLERANCE within MAX_ITERATIONS steps. The covariance is taken from Fisher's
    information X' diag(w mu^(2-p)) X + R at the last step's start, as statsmodels reports it.

    Parameters
    ----------
    columns : Columns
        The design's estimated columns, of full column rank, column 0 the intercept.
    data : RateData
        Numerator (claims or money), weight (exposure or claims) and Pearson sums per design row.
    family : Family
        Its variance power p is used.
    ridge : np.ndarray or None
        Fixed penalty r per column (None: 0, the unpenalised fit); the start of `choose_ridge`.
    choose_ridge : RidgeRule or None
        Re-chooses the ridge from the working model (e.g. `credibility.credibility_ridge`).
    start : EngineFit or None
        Warm start: its estimates (and, with `choose_ridge`, its ridge).

    Returns
    -------
    EngineFit
        beta, (X'WX + R)^-1 (Fisher's W) at the last step's start, whether it converged, the
        steps, the ridge.
    """
    power = family.power
    if start is None:
        beta = np.zeros(columns.size)
        beta[0] = np.log(data.numerator.sum() / data.weight.sum())
    else:
        beta = start.beta.copy()
    ridge = np.zeros(len(beta)) if ridge is None else np.asarray(ridge, dtype=float).copy()
    if start is not None and choose_ridge is not None:
        ridge = start.ridge.copy()
    mu = np.exp(columns.linear_predictor(beta))
    deviance = mean_dependent_deviance(data, mu, power)
    adapting, converged, iteration, penalty_change = choose_ridge is not None, False, 0, 0.0
    for iteration in range(1, MAX_ITERATIONS + 1):
        start_mu = mu
        scale = mu ** (1.0 - power)
        gram = columns.gram(scale * ((2.0 - power) * mu * data.weight + (power - 1.0) * data.numerator))
        right = gram @ beta + columns.transpose_times(scale * (data.numerator - mu * data.weight))
        if adapting:
            assert choose_ridge is not None
            chi2 = None if family.name == "poisson" else pearson_chi2(data, mu, power)
            chosen = choose_ridge(WorkingModel(gram, right, beta, chi2, data.n_rows), ridge)
            penalty_change = _relative_change(ridge, chosen)
            ridge = chosen
        newton_step = scipy.linalg.cho_solve(scipy.linalg.cho_factor(gram + np.diag(ridge)), right) - beta
        objective = deviance + beta @ (ridge * beta)
        step = newton_step
        for _ in range(STEP_HALVINGS):
            trial = beta + step
            mu_trial = np.exp(columns.linear_predictor(trial))
            deviance_trial = mean_dependent_deviance(data, mu_trial, power)
            if deviance_trial + trial @ (ridge * trial) <= objective + 1e-12 * abs(objective):
                break
            step = step / 2
        beta, mu, deviance = trial, mu_trial, deviance_trial
        size = float(np.max(np.abs(newton_step)))
        if adapting and (size < PENALTY_FREEZE_TOLERANCE or iteration >= MAX_PENALTY_STEPS):
            adapting = False
        elif not adapting and size < COEFFICIENT_TOLERANCE:
            converged = True
            break
    fisher = gram if power == 1.0 else columns.gram(data.weight * start_mu ** (2.0 - power))
    unit_covariance = scipy.linalg.cho_solve(scipy.linalg.cho_factor(fisher + np.diag(ridge)), np.eye(len(beta)))
    return EngineFit(beta, unit_covariance, converged, iteration, ridge, penalty_change)


def _relative_change(old: np.ndarray, new: np.ndarray) -> float:
    """max |new / old - 1| over the penalised columns (inf where a penalty appears or vanishes)."""
    moved = (old > 0) | (new > 0)
    if not moved.any():
        return 0.0
    if not np.all(old[moved] > 0):
        return float("inf")
    return float(np.max(np.abs(new[moved] / old[moved] - 1.0)))


def fit_on_cells(
    cells: Cells,
    kept: np.ndarray,
    family: Family,
    ridge: np.ndarray | None = None,
    choose_ridge: RidgeRule | None = None,
    start: EngineFit | None = None,
) -> EngineFit:
    """`newton_fit` on the cells: exact, since the score and Fisher information of the rows depend
    only on each cell's sums of numerator and weight (and the Pearson statistic on its sum of a^2 / w).

    BLAS runs on one thread here: the matrices are small, and two BLAS threads on a busy two-core
    machine made these fits 5-10 times slower (benchmarks/glm_fit.py).

    Parameters
    ----------
    cells : Cells
        The cells with their sums (`aggregate_cells`).
    kept : np.ndarray
        Full-space columns to estimate, of full column rank on the cells (`choose_columns`).
    family : Family
        Poisson, Gamma or Tweedie at its power, log link.
    ridge, choose_ridge, start
        As `newton_fit`.

    Returns
    -------
    EngineFit
        As `newton_fit`.
    """
    with threadpool_limits(limits=1, user_api="blas"):
        return newton_fit(KeptColumns(cells.design, kept), RateData.of_cells(cells), family, ridge, choose_ridge, start)


def fit_on_rows(
    design: OneHotDesign,
    numerator: np.ndarray,
    weight: np.ndarray,
    kept: np.ndarray,
    family: Family,
    ridge: np.ndarray | None = None,
    choose_ridge: RidgeRule | None = None,
    start: EngineFit | None = None,
) -> EngineFit:
    """`newton_fit` on the sparse one-hot rows (one BLAS thread, as `fit_on_cells`).

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
    ridge, choose_ridge, start
        As `newton_fit`.

    Returns
    -------
    EngineFit
        As `newton_fit`.
    """
    with threadpool_limits(limits=1, user_api="blas"):
        return newton_fit(
            KeptColumns(design, kept), RateData.of_rows(numerator, weight), family, ridge, choose_ridge, start
        )


def poisson_irls(design: sp.spmatrix, rate: np.ndarray, weight: np.ndarray) -> EngineFit:
    """Poisson quasi-likelihood with log link on a sparse design whose column 0 is the intercept.

    Maximises sum w (y eta - exp(eta)), eta = X beta: the unpenalised `newton_fit` with p = 1
    (Fisher scoring is Newton's method for this canonical link).

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
    return newton_fit(SparseColumns(sp.csc_matrix(design)), RateData.of_rows(rate * weight, weight), POISSON)


@dataclass(frozen=True)
class RowStatistics:
    """Row-level statistics as statsmodels reports them for the row-level fit with var_weights."""

    n_rows: int
    n_parameters: float
    deviance: float
    null_deviance: float
    pearson_chi2: float
    dispersion: float
    llf: float

    @property
    def df_resid(self) -> float:
        return self.n_rows - self.n_parameters

    @property
    def aic(self) -> float:
        """-2 llf + 2 k, k the (effective) number of estimated coefficients (dispersion not counted)."""
        return -2.0 * self.llf + 2.0 * self.n_parameters


def row_statistics(
    design: OneHotDesign,
    beta_full: np.ndarray,
    numerator: np.ndarray,
    weight: np.ndarray,
    family: Family,
    n_parameters: float,
    chunk_rows: int = CHUNK_ROWS,
) -> RowStatistics:
    """`statistics_of_chunks` of the rows cut into chunks of `chunk_rows` rows, in this process.

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
    n_parameters : float
        Estimated coefficients k (a penalised fit: its effective number); df_resid = rows - k.
    chunk_rows : int
        Rows per pass chunk (bounds the memory of a pass).

    Returns
    -------
    RowStatistics
        The statistics as statsmodels reports them for the row-level fit.
    """
    chunks = row_chunks(design, numerator, weight, chunk_rows=chunk_rows)
    return statistics_of_chunks(chunks, beta_full, family, n_parameters, float(numerator.sum() / weight.sum()))


@dataclass(frozen=True)
class _AtCoefficients:
    """What a pass of row statistics over a chunk needs besides the chunk (sent once to the workers)."""

    beta_full: np.ndarray
    family: Family
    null_rate: float
    dispersion: float


def _deviance_sums(at: _AtCoefficients, chunk: RowChunk) -> np.ndarray:
    """[deviance, null deviance, Pearson chi2, rows] of the chunk's rows (statsmodels' family functions)."""
    model_family = at.family.statsmodels()
    rate = np.exp(chunk.linear_predictor(at.beta_full))
    endog, mu, var_weights = at.family.row_view(chunk.numerator, chunk.weight, rate)
    _, null_mu, _ = at.family.row_view(chunk.numerator, chunk.weight, np.full(len(rate), at.null_rate))
    return np.array(
        [
            model_family.deviance(endog, mu, var_weights),
            model_family.deviance(endog, null_mu, var_weights),
            float(np.sum(var_weights * (endog - mu) ** 2 / model_family.variance(mu))),
            len(chunk.weight),
        ]
    )


def _loglik_sum(at: _AtCoefficients, chunk: RowChunk) -> float:
    """The chunk's rows' log-likelihood at the dispersion (statsmodels' family function)."""
    rate = np.exp(chunk.linear_predictor(at.beta_full))
    endog, mu, var_weights = at.family.row_view(chunk.numerator, chunk.weight, rate)
    return float(at.family.statsmodels().loglike(endog, mu, var_weights=var_weights, scale=at.dispersion))


def statistics_of_chunks(
    chunks: Sequence[Any],
    beta_full: np.ndarray,
    family: Family,
    n_parameters: float,
    null_rate: float,
    runner: TaskRunner = IN_PROCESS,
) -> RowStatistics:
    """Deviance, null deviance (intercept only, rate sum(a)/sum(w)), Pearson chi2, dispersion
    (chi2 / df_resid; 1 for Poisson) and log-likelihood at that dispersion, from partial sums over
    chunks of rows (two passes, run where `runner` runs its tasks, added up here). Log-likelihood,
    deviance and variance are statsmodels' own family functions.

    Pearson chi2 = sum(v (y - mu)^2 / V(mu)), with (y, mu, v) the row view of the family
    (`Family.row_view`: counts and unit weights for Poisson, rates and var_weights w otherwise).

    Parameters
    ----------
    chunks : Sequence
        The rows' chunks (`row_chunks`), as `runner.place` holds them.
    beta_full : np.ndarray
        Coefficients indexed by full-space column (0 for columns not estimated).
    family : Family
        The fitted family.
    n_parameters : float
        Estimated coefficients k (a penalised fit: its effective number, `EngineFit.effective_parameters`);
        df_resid = rows - k.
    null_rate : float
        The intercept-only fit's rate sum(a) / sum(w) over all the rows.
    runner : TaskRunner
        This process, or the workers of a Dask cluster (`premiumlab._core.cluster`).

    Returns
    -------
    RowStatistics
        The statistics as statsmodels reports them for the row-level fit.
    """
    at = _AtCoefficients(np.asarray(beta_full, dtype=float), family, null_rate, 1.0)
    sums = runner.map(_deviance_sums, at, chunks, _nothing)
    deviance, null_deviance, pearson_chi2, rows = (float(sum(part[i] for part in sums)) for i in range(4))
    n_rows = int(rows)
    dispersion = 1.0 if family.name == "poisson" else pearson_chi2 / (n_rows - n_parameters)
    llf = float(sum(runner.map(_loglik_sum, replace(at, dispersion=dispersion), chunks, _nothing)))
    return RowStatistics(n_rows, n_parameters, deviance, null_deviance, pearson_chi2, float(dispersion), llf)
