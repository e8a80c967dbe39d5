"""The banded refit of a boosted model, and the pooling of bands until every promise holds.

Refit (`refit`): Poisson quasi-likelihood GLM, log link, on the training rows aggregated to cells
(exact: the score equations depend on per-cell sums): response = boosted pure premium per exposure
unit, weight = exposure; treatment coding against each factor's base band, plus one term per
non-base pair of bands for each two-way table, so that table's base row and column are 1. The
design, cells, aliasing and Newton iterations are the GLM engines' (`premiumlab.models.glm.engines`):
a two-way table (a, b) is one more one-hot factor "a:b" whose levels are the non-base pairs of
bands, every pair with a base band sharing its base level. A factor's missing band (the last, when
its training rows hold missing values) is its own cell of the main effect; a two-way table has no
missing cell, so a pair with a missing band shares the base level too (its relativity there is 1).

Pooling (`pooled_refit`): merges the adjacent bands of a promised factor with the worst reversal
and refits, until main effect x every two-way table is monotone, before and after rounding.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace

import numpy as np

from premiumlab._core.errors import InputError
from premiumlab.models.glm.engines import OneHotDesign, aggregate_cells, choose_columns, column_major, poisson_irls
from premiumlab.tabulation.banding import Banding, base_band

# ---------------------------------------------------------------------------------------------
# the refit


@dataclass(frozen=True)
class Refit:
    """A multiplicative fit: relativity per band (base band exactly 1) and, per two-way table (a, b),
    a matrix of relativities with base row and base column exactly 1.

    aliased: terms dropped as exactly collinear with earlier ones or without exposure (relativity 1),
    as "factor[band]" or "a:b[band_a, band_b]"; iterations: Newton steps taken; two_way_credibility:
    per two-way table, the credibility Z of each cell applied to it (`credible_two_way`; empty
    when none was applied).
    """

    relativities: dict[str, np.ndarray]
    two_way: dict[tuple[str, str], np.ndarray]
    bases: dict[str, int]
    aliased: list[str]
    iterations: int
    intercept: float
    two_way_credibility: dict[tuple[str, str], np.ndarray] = field(default_factory=dict)


def _pair_cells(
    sizes: dict[str, int], bases: dict[str, int], a: str, b: str, missing: dict[str, int] | None = None
) -> list[tuple[int, int]]:
    """The pairs of bands of a two-way table (a, b) with a term, in row-major order: neither band a
    base band nor a missing band (`missing`: factor -> its missing band)."""
    missing = missing or {}

    def kept(name: str) -> list[int]:
        return [i for i in range(sizes[name]) if i not in (bases[name], missing.get(name))]

    return list(itertools.product(kept(a), kept(b)))


def _banded_design(
    codes: dict[str, np.ndarray],
    sizes: dict[str, int],
    bases: dict[str, int],
    pairs: list[tuple[str, str]],
    missing: dict[str, int],
) -> OneHotDesign:
    """The one-hot design of the rows: one factor per banded factor (levels "0", "1", ..., base the
    base band), then one per two-way table (a, b) named "a:b" with level 0 for every pair of bands
    that includes a base or missing band and one level "i, j" per other pair (i, j)."""
    names, levels, base_codes, columns = [], [], [], []
    for name, code in codes.items():
        names.append(name)
        levels.append(tuple(str(k) for k in range(sizes[name])))
        base_codes.append(bases[name])
        columns.append(code)
    for a, b in pairs:
        cells = _pair_cells(sizes, bases, a, b, missing)
        level_of_pair = np.zeros((sizes[a], sizes[b]), dtype=np.int64)
        for level, (i, j) in enumerate(cells, start=1):
            level_of_pair[i, j] = level
        names.append(f"{a}:{b}")
        levels.append(("base", *tuple(f"{i}, {j}" for i, j in cells)))
        base_codes.append(0)
        columns.append(level_of_pair[codes[a], codes[b]])
    n_rows = next(iter(codes.values())).size
    return OneHotDesign(tuple(names), tuple(levels), tuple(base_codes), column_major(columns, n_rows))


def refit(
    codes: dict[str, np.ndarray],
    sizes: dict[str, int],
    bases: dict[str, int],
    pairs: list[tuple[str, str]],
    exposure: np.ndarray,
    response: np.ndarray,
    missing: dict[str, int] | None = None,
) -> Refit:
    """Fit the banded multiplicative model to `response` (per exposure unit) with weights `exposure`.

    Parameters
    ----------
    codes : dict[str, np.ndarray]
        Band of every training row, per factor.
    sizes, bases : dict[str, int]
        Number of bands and base band, per factor.
    pairs : list[tuple[str, str]]
        The two-way tables.
    exposure, response : np.ndarray
        Exposure and boosted pure premium per exposure unit of every training row.
    missing : dict[str, int] or None
        The missing band of each factor that has one (None: none has): its own main-effect cell,
        no cell of a two-way table.

    Returns
    -------
    Refit
        exp(coefficient) of each band and non-base pair of bands (1 for base and dropped terms, and
        for a two-way table's pairs with a missing band).

    Raises
    ------
    InputError
        When Newton's method does not converge.
    """
    missing = missing or {}
    cells = aggregate_cells(_banded_design(codes, sizes, bases, pairs, missing), exposure * response, exposure)
    design = cells.design
    kept = choose_columns(design, cells.weight).kept
    fit = poisson_irls(design.sparse(kept), cells.numerator / cells.weight, cells.weight)
    if not fit.converged:
        raise InputError(f"refit: Newton's method did not converge in {fit.iterations} iterations")
    beta = np.zeros(design.n_full)
    beta[kept] = fit.beta
    estimated = np.zeros(design.n_full, dtype=bool)
    estimated[kept] = True
    estimated[design.base_columns()] = True
    terms = design.full_terms()
    aliased = [terms[column] for column in np.flatnonzero(~estimated)]
    relativity = [np.exp(beta[design.columns_of(j)]) for j in range(len(design.factor_names))]
    rel = dict(zip(codes, relativity))
    two = {}
    for (a, b), pair_relativity in zip(pairs, relativity[len(codes) :]):
        matrix = np.ones((sizes[a], sizes[b]))
        for (i, j), value in zip(_pair_cells(sizes, bases, a, b, missing), pair_relativity[1:]):
            matrix[i, j] = value
        two[(a, b)] = matrix
    return Refit(rel, two, dict(bases), aliased, fit.iterations, float(beta[0]))


def credible_two_way(fit: Refit, codes: dict[str, np.ndarray], exposure: np.ndarray, claims: np.ndarray) -> Refit:
    """The refit with each two-way cell's relativity weighted by credibility towards 1.

    Per two-way table (a, b), the cells are the pairs of bands; Z_ij is the Buhlmann-Straub
    credibility of the cell's own experience, claims per exposure unit (`credibility.credibility_by_level` on the rows
    grouped by cell) and the cell's relativity becomes r_ij^Z_ij = exp(Z_ij log r_ij), so that a
    thin cell keeps little of its interaction. Base rows and columns stay exactly 1.

    Parameters
    ----------
    fit : Refit
        The refit of the banded model.
    codes : dict[str, np.ndarray]
        Band of every training row, per factor.
    exposure : np.ndarray
        Exposure of each training row (> 0).
    claims : np.ndarray
        Claims of each training row: the claim count (`distil`: Z of the claim frequency) or amount.

    Returns
    -------
    Refit
        `fit` with the weighted two-way tables and their Z in `two_way_credibility`.
    """
    from premiumlab.tabulation.credibility import credibility_by_level

    two_way, applied = {}, {}
    for (a, b), matrix in fit.two_way.items():
        cell = codes[a] * matrix.shape[1] + codes[b]
        z = credibility_by_level(claims, exposure, cell, matrix.size)["credibility"].to_numpy().reshape(matrix.shape)
        two_way[(a, b)], applied[(a, b)] = np.exp(z * np.log(matrix)), z
    return replace(fit, two_way=two_way, two_way_credibility=applied)


# ---------------------------------------------------------------------------------------------
# monotone pooling


def round_relativity(values: np.ndarray, decimals: int) -> np.ndarray:
    """Relativities rounded half to even to `decimals`, never below 10^-decimals (a table needs > 0).

    Parameters
    ----------
    values : np.ndarray
        Relativities (> 0), any shape.
    decimals : int
        Decimal places kept.

    Returns
    -------
    np.ndarray
        max(round(values, decimals), 10^-decimals), elementwise, in the shape of `values`.
    """
    return np.maximum(np.round(values, decimals), 10.0**-decimals)


def effect_grid(
    name: str, relativities: dict[str, np.ndarray], two_way: dict[tuple[str, str], np.ndarray]
) -> np.ndarray:
    """Relativity of factor `name` by band (rows) for every combination of the bands of the factors it
    shares a two-way table with (columns): main effect x each of its two-way tables.

    Parameters
    ----------
    name : str
        The factor.
    relativities : dict[str, np.ndarray]
        Relativity of each band, per factor.
    two_way : dict[tuple[str, str], np.ndarray]
        Relativity matrix of each two-way table (a, b), rows the bands of a, columns those of b.

    Returns
    -------
    np.ndarray
        Shape (bands of `name`, product of the partners' bands; 1 without partners): element
        [k, c] = rel_name[k] x prod over tables t of t[k, c_t], partners in the order of `two_way`.
    """
    out = relativities[name][:, None]
    for (a, b), matrix in two_way.items():
        if name in (a, b):
            side = matrix if name == a else matrix.T
            out = (out[:, :, None] * side[:, None, :]).reshape(out.shape[0], -1)
    return out


@dataclass(frozen=True)
class Reversal:
    """The largest breach of a promise: factor, bands k and k+1, and its size in log relativity."""

    factor: str
    band: int
    amount: float
    rounded: bool


def worst_reversal(bandings: dict[str, Banding], fit: Refit, decimals: int) -> Reversal | None:
    """The largest log-scale breach of a promised direction between adjacent bands (the missing band
    apart: it has no place in the order), over every band of the partner factors, in the refit's
    relativities or in their rounded values (ties are allowed).

    The breach between bands k and k+1 is -s (log g[k+1, c] - log g[k, c]), with s the promise's sign
    (+1 increasing, -1 decreasing) and g the `effect_grid`; it counts when it exceeds 1e-12 unrounded,
    or 0 once rounded.

    Parameters
    ----------
    bandings : dict[str, Banding]
        The bandings of the factors, with their promises.
    fit : Refit
        The refit to check.
    decimals : int
        Decimal places of the relativities in the table (`round_relativity`).

    Returns
    -------
    Reversal or None
        The largest breach (factor, its lower band k, size in log relativity, whether it was
        measured on the rounded relativities), or None when every promise holds.
    """
    rounded_rel = {n: round_relativity(v, decimals) for n, v in fit.relativities.items()}
    rounded_two = {k: round_relativity(v, decimals) for k, v in fit.two_way.items()}
    worst: Reversal | None = None
    for name, banding in bandings.items():
        if banding.direction == 0 or banding.ordinary_bands < 2:
            continue
        for rel, two, is_rounded in ((fit.relativities, fit.two_way, False), (rounded_rel, rounded_two, True)):
            grid = effect_grid(name, rel, two)[: banding.ordinary_bands]
            steps = -banding.direction * np.diff(np.log(grid), axis=0)
            k, _ = np.unravel_index(np.argmax(steps), steps.shape)
            amount = float(steps.max())
            if amount > (1e-12 if not is_rounded else 0.0) and (worst is None or amount > worst.amount):
                worst = Reversal(name, int(k), amount, is_rounded)
    return worst


@dataclass
class PooledRefit:
    """The final bandings and refit, with the merges that made the refit monotone."""

    bandings: dict[str, Banding]
    fit: Refit
    codes: dict[str, np.ndarray]
    merges: list[dict] = field(default_factory=list)


def band_exposure(codes: np.ndarray, n_bands: int, exposure: np.ndarray) -> np.ndarray:
    """Exposure of each band 0 .. n_bands-1 given the band code of every row.

    Parameters
    ----------
    codes : np.ndarray
        Band of each row, in 0 .. n_bands-1.
    n_bands : int
        Number of bands.
    exposure : np.ndarray
        Exposure of each row, in the book's exposure unit.

    Returns
    -------
    np.ndarray
        Sum of the exposure of each band's rows (0 for an empty band), length n_bands.
    """
    return np.bincount(codes, weights=exposure, minlength=n_bands)


def pooled_refit(
    bandings: dict[str, Banding],
    values: dict[str, np.ndarray],
    pairs: list[tuple[str, str]],
    exposure: np.ndarray,
    response: np.ndarray,
    decimals: int,
    claims: np.ndarray | None = None,
) -> PooledRefit:
    """Refit (with credible two-way cells when `claims` is given), find the worst adjacent reversal of
    a promised factor, pool those two bands, refit, until no promise is breached (`values`: numeric
    values or level indices of the training rows).

    Parameters
    ----------
    bandings : dict[str, Banding]
        The initial banding of each factor.
    values : dict[str, np.ndarray]
        Per factor: numeric values or level indices of the training rows.
    pairs : list[tuple[str, str]]
        The two-way tables.
    exposure : np.ndarray
        Exposure of each training row (the refit's weight).
    response : np.ndarray
        Boosted pure premium per exposure unit of each training row.
    decimals : int
        Decimal places of the relativities in the table; the promises must hold after rounding too.
    claims : np.ndarray or None
        Claims (count, or amount) of each training row: each two-way cell is weighted by the
        credibility of its claims per exposure unit towards 1 (`credible_two_way`) before the
        promises are checked. None: not.

    Returns
    -------
    PooledRefit
        The final bandings, the refit on them, each row's band codes and the merges made (factor,
        the two band labels, the reversal in log relativity, whether it showed after rounding).

    Raises
    ------
    InputError
        When a refit's Newton's method does not converge.
    """
    bandings = dict(bandings)
    codes = {n: b.codes(values[n]) for n, b in bandings.items()}
    merges: list[dict] = []
    while True:
        sizes = {n: b.n_bands for n, b in bandings.items()}
        bases = {n: base_band(b, band_exposure(codes[n], sizes[n], exposure)) for n, b in bandings.items()}
        missing = {n: b.n_bands - 1 for n, b in bandings.items() if b.missing}
        fit = refit(codes, sizes, bases, pairs, exposure, response, missing)
        if claims is not None and pairs:
            fit = credible_two_way(fit, codes, exposure, claims)
        reversal = worst_reversal(bandings, fit, decimals)
        if reversal is None:
            return PooledRefit(bandings, fit, codes, merges)
        name, k = reversal.factor, reversal.band
        labels = bandings[name].labels()
        merges.append(
            {
                "factor": name,
                "bands": [labels[k], labels[k + 1]],
                "reversal_log": reversal.amount,
                "after_rounding": reversal.rounded,
            }
        )
        bandings[name] = bandings[name].merged(k)
        codes[name] = np.where(codes[name] > k, codes[name] - 1, codes[name])
