"""The banded refit of a boosted model, and the pooling of bands until every promise holds.

Refit (`refit`): Poisson quasi-likelihood GLM, log link, on the training rows aggregated to cells
(exact: the score equations depend on per-cell sums): response = boosted pure premium per exposure
unit, weight = exposure; treatment coding against each factor's base band, plus one term per
non-base pair of bands for each two-way table, so that table's base row and column are 1. 

Pooling (`pooled_refit`): merges the adjacent bands of a promised factor with the worst reversal
and refits, until main effect x every two-way table is monotone, before and after rounding.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.sparse as sp

from premiumlab._core.errors import InputError
from premiumlab.tabulation.banding import Banding, base_band

# ---------------------------------------------------------------------------------------------
# the refit


@dataclass(frozen=True)
class Refit:
    """A multiplicative fit: relativity per band (base band exactly 1) and, per two-way table (a, b),
    a matrix of relativities with base row and base column exactly 1.

    aliased: terms dropped as exactly collinear with earlier ones (relativity 1), as
    "factor[band]" or "a:b[band_a, band_b]"; iterations: Newton steps taken.
    """

    relativities: dict[str, np.ndarray]
    two_way: dict[tuple[str, str], np.ndarray]
    bases: dict[str, int]
    aliased: list[str]
    iterations: int
    intercept: float


def _cells(codes: dict[str, np.ndarray], sizes: dict[str, int], exposure: np.ndarray, response: np.ndarray
           ) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray]:
    """Distinct band combinations: their band codes, summed exposure and exposure-weighted mean response."""
    names = list(codes)
    if np.prod([float(sizes[n]) for n in names]) < 2.0**62:
        key = np.ravel_multi_index([codes[n] for n in names], [sizes[n] for n in names])
        uniq, inverse = np.unique(key, return_inverse=True)
        cell_codes = dict(zip(names, np.unravel_index(uniq, [sizes[n] for n in names])))
    else:
        uniq, inverse = np.unique(np.column_stack([codes[n] for n in names]), axis=0, return_inverse=True)
        cell_codes = {n: uniq[:, j] for j, n in enumerate(names)}
    inverse = inverse.ravel()
    weight = np.bincount(inverse, weights=exposure)
    mean = np.bincount(inverse, weights=exposure * response) / weight
    return cell_codes, weight, mean


def _design(cell_codes: dict[str, np.ndarray], sizes: dict[str, int], bases: dict[str, int],
            pairs: list[tuple[str, str]]) -> tuple[sp.csc_matrix, list[tuple]]:
    """Sparse treatment-coded design on the cells and the term of each column."""
    n = next(iter(cell_codes.values())).size
    terms: list[tuple] = [("Intercept",)]
    blocks = [np.zeros(n, dtype=np.int64)]
    offset = 1
    for name, code in cell_codes.items():
        level = np.arange(sizes[name])
        keep = level[level != bases[name]]
        column = np.full(sizes[name], -1, dtype=np.int64)
        column[keep] = offset + np.arange(keep.size)
        blocks.append(column[code])
        terms += [(name, int(k)) for k in keep]
        offset += keep.size
    for a, b in pairs:
        ka = [k for k in range(sizes[a]) if k != bases[a]]
        kb = [k for k in range(sizes[b]) if k != bases[b]]
        column = np.full((sizes[a], sizes[b]), -1, dtype=np.int64)
        for i, j in itertools.product(ka, kb):
            column[i, j] = offset
            terms.append((a, b, i, j))
            offset += 1
        blocks.append(column[cell_codes[a], cell_codes[b]])
    cols = np.concatenate(blocks)
    rows = np.tile(np.arange(n), len(blocks))
    keep = cols >= 0
    x = sp.csc_matrix((np.ones(keep.sum()), (rows[keep], cols[keep])), shape=(n, offset))
    return x, terms


def _independent_columns(gram: np.ndarray, tolerance: float = 1e-9) -> np.ndarray:
    """Columns kept in order, each dropped when it is (numerically) a combination of those kept before:
    residual variance after projection below `tolerance` x its own."""
    kept: list[int] = []
    for j in range(gram.shape[0]):
        if gram[j, j] <= 0:
            continue
        trial = kept + [j]
        sub = gram[np.ix_(trial, trial)]
        try:
            chol = np.linalg.cholesky(sub)
        except np.linalg.LinAlgError:
            continue
        if chol[-1, -1] ** 2 > tolerance * gram[j, j]:
            kept.append(j)
    return np.array(kept, dtype=np.int64)


def _poisson_deviance(y: np.ndarray, mu: np.ndarray, w: np.ndarray) -> float:
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(y > 0, y * np.log(y / mu), 0.0)
    return float(2.0 * np.sum(w * (term - (y - mu))))


def poisson_fit(x: sp.spmatrix, y: np.ndarray, w: np.ndarray, max_iterations: int = 100,
                tolerance: float = 1e-10) -> tuple[np.ndarray, int]:
    """Poisson quasi-likelihood, log link: Newton's method on sum w (y eta - exp(eta)), step-halving
    on the deviance; stops when every coefficient step is below `tolerance`."""
    beta = np.zeros(x.shape[1])
    beta[0] = np.log(np.sum(w * y) / np.sum(w))
    mu = np.exp(x @ beta)
    deviance = _poisson_deviance(y, mu, w)
    for iteration in range(1, max_iterations + 1):
        hessian = (x.T @ sp.diags(w * mu) @ x).toarray()
        step = scipy.linalg.cho_solve(scipy.linalg.cho_factor(hessian), x.T @ (w * (y - mu)))
        for _ in range(30):
            trial = beta + step
            mu_trial = np.exp(x @ trial)
            dev_trial = _poisson_deviance(y, mu_trial, w)
            if dev_trial <= deviance * (1 + 1e-12) + 1e-300:
                break
            step = step / 2
        beta, mu, deviance = trial, mu_trial, dev_trial
        if np.max(np.abs(step)) < tolerance:
            return beta, iteration
    raise InputError(f"refit: Newton's method did not converge in {max_iterations} iterations")


def refit(codes: dict[str, np.ndarray], sizes: dict[str, int], bases: dict[str, int],
          pairs: list[tuple[str, str]], exposure: np.ndarray, response: np.ndarray) -> Refit:
    """Fit the banded multiplicative model to `response` (per exposure unit) with weights `exposure`."""
    cell_codes, weight, mean = _cells(codes, sizes, exposure, response)
    x, terms = _design(cell_codes, sizes, bases, pairs)
    gram = (x.T @ sp.diags(weight) @ x).toarray()
    kept = _independent_columns(gram)
    beta_kept, iterations = poisson_fit(x[:, kept], mean, weight)
    beta = np.zeros(len(terms))
    beta[kept] = beta_kept
    rel = {n: np.ones(sizes[n]) for n in codes}
    two = {(a, b): np.ones((sizes[a], sizes[b])) for a, b in pairs}
    aliased = []
    dropped = np.ones(len(terms), dtype=bool)
    dropped[kept] = False
    for term, value, gone in zip(terms, beta, dropped):
        if len(term) == 2:
            rel[term[0]][term[1]] = np.exp(value)
            if gone:
                aliased.append(f"{term[0]}[{term[1]}]")
        elif len(term) == 4:
            two[(term[0], term[1])][term[2], term[3]] = np.exp(value)
            if gone:
                aliased.append(f"{term[0]}:{term[1]}[{term[2]}, {term[3]}]")
    return Refit(rel, two, dict(bases), aliased, iterations, float(beta[0]))


# ---------------------------------------------------------------------------------------------
# monotone pooling


def round_relativity(values: np.ndarray, decimals: int) -> np.ndarray:
    """Relativities rounded half to even to `decimals`, never below 10^-decimals (a table needs > 0)."""
    return np.maximum(np.round(values, decimals), 10.0 ** -decimals)


def effect_grid(name: str, relativities: dict[str, np.ndarray], two_way: dict[tuple[str, str], np.ndarray]
                ) -> np.ndarray:
    """Relativity of factor `name` by band (rows) for every combination of the bands of the factors it
    shares a two-way table with (columns): main effect x each of its two-way tables."""
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
    """The largest log-scale breach of a promised direction between adjacent bands, over every band of
    the partner factors, in the refit's relativities or in their rounded values (ties are allowed)."""
    rounded_rel = {n: round_relativity(v, decimals) for n, v in fit.relativities.items()}
    rounded_two = {k: round_relativity(v, decimals) for k, v in fit.two_way.items()}
    worst: Reversal | None = None
    for name, banding in bandings.items():
        if banding.direction == 0 or banding.n_bands < 2:
            continue
        for rel, two, is_rounded in ((fit.relativities, fit.two_way, False), (rounded_rel, rounded_two, True)):
            steps = -banding.direction * np.diff(np.log(effect_grid(name, rel, two)), axis=0)
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
    """Exposure of each band 0 .. n_bands-1 given the band code of every row."""
    return np.bincount(codes, weights=exposure, minlength=n_bands)


def pooled_refit(bandings: dict[str, Banding], values: dict[str, np.ndarray], pairs: list[tuple[str, str]],
                 exposure: np.ndarray, response: np.ndarray, decimals: int) -> PooledRefit:
    """Refit, find the worst adjacent reversal of a promised factor, pool those two bands, refit, until
    no promise is breached (`values`: numeric values or level indices of the training rows)."""
    bandings = dict(bandings)
    codes = {n: b.codes(values[n]) for n, b in bandings.items()}
    merges: list[dict] = []
    while True:
        sizes = {n: b.n_bands for n, b in bandings.items()}
        bases = {n: base_band(b, band_exposure(codes[n], sizes[n], exposure)) for n, b in bandings.items()}
        fit = refit(codes, sizes, bases, pairs, exposure, response)
        reversal = worst_reversal(bandings, fit, decimals)
        if reversal is None:
            return PooledRefit(bandings, fit, codes, merges)
        name, k = reversal.factor, reversal.band
        labels = bandings[name].labels()
        merges.append({"factor": name, "bands": [labels[k], labels[k + 1]],
                       "reversal_log": reversal.amount, "after_rounding": reversal.rounded})
        bandings[name] = bandings[name].merged(k)
        codes[name] = np.where(codes[name] > k, codes[name] - 1, codes[name])
