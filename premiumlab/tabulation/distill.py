"""Distillation numerics: a boosted model's effect curves, their banding, and the banded refit.

1. Effect curves (`effect_curve`): partial dependence of the boosted model's raw (log) score on one
   factor, averaged over a sample of policies drawn with probability proportional to exposure, so a
   plain mean is an exposure-weighted mean, computed exactly from the trees
   (`premiumlab.models.trees.partial_dependence`); curves are known up to an additive constant (all
   later steps are shift-invariant).
2. Grid (`quantile_grid`, `cell_exposure`): at most `points` exposure-weighted quantiles of the
   training values, q_k = the smallest value whose cumulative exposure share exceeds k / points,
   k = 0 .. points-1. Grid point g_i stands for the cell [g_i, g_{i+1}) (the first from -inf, the
   last to inf); its weight is the training exposure in that cell. A band of grid points therefore
   starts at its first grid value: band edges are the upper grid values of the cells they follow.
3. Banding: ordered factors (numeric, or categorical with a level order) -> isotonic curve where a
   direction is promised, then the optimal segmentation into at most `max_bands` bands of at least
   `min_share` exposure each (`premiumlab.segment`). Unordered categoricals -> levels ordered by
   effect, then thin levels merged into their nearest neighbour in that order (`merge_thin_levels`).
4. Refit (`refit`): Poisson quasi-likelihood GLM, log link, on the training rows aggregated to cells
   (exact: the score equations depend on per-cell sums): response = boosted pure premium per
   exposure unit, weight = exposure; treatment coding against each factor's base band, plus one term
   per non-base pair of bands for each two-way table, so that table's base row and column are 1.
   `pooled_refit` merges the adjacent bands of a promised factor with the worst reversal and refits,
   until main effect x every two-way table is monotone, before and after rounding.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.linalg
import scipy.sparse as sp

from premiumlab._core.errors import InputError
from premiumlab.models.trees.parser import Trees
from premiumlab.models.trees.partial_dependence import partial_dependence
from premiumlab.tabulation.segment import isotonic, optimal_segmentation

# ---------------------------------------------------------------------------------------------
# sample


def exposure_sample(exposure: np.ndarray, size: int, seed: int) -> np.ndarray:
    """Row indices drawn with replacement with probability exposure / sum(exposure), seeded."""
    p = np.asarray(exposure, dtype=float)
    return np.random.default_rng(seed).choice(p.size, size=size, replace=True, p=p / p.sum())


# ---------------------------------------------------------------------------------------------
# grids and curves


def quantile_grid(values: np.ndarray, weights: np.ndarray, points: int) -> np.ndarray:
    """Distinct exposure-weighted quantiles q_k, k = 0 .. points-1: the smallest value whose cumulative
    weight share exceeds k / points (q_0 is the minimum)."""
    order = np.argsort(values, kind="stable")
    v, w = np.asarray(values, dtype=float)[order], np.asarray(weights, dtype=float)[order]
    share = np.cumsum(w) / w.sum()
    idx = np.searchsorted(share, np.arange(points) / points, side="right")
    return np.unique(v[np.minimum(idx, v.size - 1)])


def cell_exposure(grid: np.ndarray, values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weight of each grid cell [g_i, g_{i+1}) (first cell from -inf, last to inf)."""
    cell = np.maximum(np.searchsorted(grid, values, side="right") - 1, 0)
    return np.bincount(cell, weights=weights, minlength=grid.size)


@dataclass(frozen=True)
class Curve:
    """A factor's effect on the log score at ordered points, with the exposure each point stands for.

    points: grid values (numeric) or indices into `labels` (categorical); effect: log score up to a
    constant; weight: training exposure (> 0) of each point's cell or level.
    """

    factor: str
    points: np.ndarray
    effect: np.ndarray
    weight: np.ndarray
    labels: tuple[str, ...] = ()


# ---------------------------------------------------------------------------------------------
# banding


@dataclass(frozen=True)
class Banding:
    """How a factor's values map to table bands.

    Numeric: band 0 is (-inf, edges[0]), band k is [edges[k-1], edges[k]), the last runs to inf.
    Categorical: `band_of_level[i]` is the band of `levels[i]`; `ordered` bands follow the level
    order (a promise refers to it), unordered bands are numbered in effect order.
    `base_level` is the spec's base level (categorical), whose band gets relativity 1.
    """

    name: str
    monotone: str
    edges: np.ndarray | None = None
    levels: tuple[str, ...] | None = None
    band_of_level: np.ndarray | None = None
    ordered: bool = True
    base_level: str | None = None

    @property
    def numeric(self) -> bool:
        return self.edges is not None

    @property
    def n_bands(self) -> int:
        return self.edges.size + 1 if self.numeric else int(self.band_of_level.max()) + 1

    @property
    def direction(self) -> int:
        return {"increasing": 1, "decreasing": -1, "none": 0}[self.monotone]

    def codes(self, values: np.ndarray) -> np.ndarray:
        """Band of each value: numeric values, or level indices into `levels`."""
        if self.numeric:
            return np.searchsorted(self.edges, np.asarray(values, dtype=float), side="right")
        return self.band_of_level[values]

    def merged(self, k: int) -> "Banding":
        """The banding with bands k and k+1 pooled into one."""
        if self.numeric:
            return replace(self, edges=np.delete(self.edges, k))
        return replace(self, band_of_level=np.where(self.band_of_level > k, self.band_of_level - 1,
                                                    self.band_of_level))

    def labels(self) -> list[str]:
        """Band labels: `[lower, upper)` or the levels of the band joined by `+`."""
        if self.numeric:
            full = np.concatenate([[-np.inf], self.edges, [np.inf]])
            return [f"[{full[k]:g}, {full[k + 1]:g})" for k in range(self.n_bands)]
        return ["+".join(lv for lv, b in zip(self.levels, self.band_of_level) if b == k)
                for k in range(self.n_bands)]


def ordered_bands(curve: Curve, direction: int, max_bands: int, min_share: float) -> np.ndarray:
    """Band index of each curve point: isotonic curve when a direction is promised, then the optimal
    segmentation (at most `max_bands` bands, each holding at least `min_share` of the weight)."""
    effect = curve.effect if direction == 0 else isotonic(curve.effect, curve.weight, increasing=direction > 0)
    return optimal_segmentation(effect, curve.weight, max_bands, min_share).labels(effect.size)


def numeric_banding(curve: Curve, monotone: str, max_bands: int, min_share: float) -> Banding:
    """Bands of a numeric factor from its curve; edges at the first grid value of each band."""
    band = ordered_bands(curve, {"increasing": 1, "decreasing": -1, "none": 0}[monotone], max_bands, min_share)
    starts = np.flatnonzero(np.diff(band)) + 1
    return Banding(curve.factor, monotone, edges=np.asarray(curve.points, dtype=float)[starts])


def merge_thin_levels(effect: np.ndarray, weight: np.ndarray, min_weight: float) -> np.ndarray:
    """Group of each level: levels sorted by effect, then the thinnest group under `min_weight` joins
    the adjacent group (in effect order) whose exposure-weighted mean effect is nearest (the lower one
    on a tie), until no group is thin or one group is left. Groups are numbered in effect order."""
    order = np.argsort(effect, kind="stable")
    groups = [[int(i)] for i in order]
    total = [float(weight[i]) for i in order]
    mean = [float(effect[i]) for i in order]
    while len(groups) > 1:
        thin = [g for g in range(len(groups)) if total[g] < min_weight]
        if not thin:
            break
        g = min(thin, key=lambda k: (total[k], k))
        near = [k for k in (g - 1, g + 1) if 0 <= k < len(groups)]
        h = min(near, key=lambda k: (abs(mean[k] - mean[g]), k))
        a, b = min(g, h), max(g, h)
        mean[a] = (mean[a] * total[a] + mean[b] * total[b]) / (total[a] + total[b])
        total[a] += total[b]
        groups[a] += groups[b]
        del groups[b], total[b], mean[b]
    out = np.empty(len(effect), dtype=np.int64)
    for k, members in enumerate(groups):
        out[members] = k
    return out


def categorical_banding(curve: Curve, levels: tuple[str, ...], monotone: str, ordered: bool, max_bands: int,
                        min_share: float, base_level: str | None = None) -> Banding:
    """Bands of a categorical factor. `curve.points` index `levels` (levels without training exposure
    are absent from the curve): they join the previous level's band when ordered (the first band when
    no level precedes), else the band holding the most exposure."""
    points = np.asarray(curve.points, dtype=np.int64)
    if ordered:
        present = ordered_bands(curve, {"increasing": 1, "decreasing": -1, "none": 0}[monotone],
                                max_bands, min_share)
    else:
        present = merge_thin_levels(curve.effect, curve.weight, min_share * curve.weight.sum())
    band = np.full(len(levels), -1, dtype=np.int64)
    band[points] = present
    if ordered:
        band = np.maximum.accumulate(band)
        band[band < 0] = 0
    else:
        band[band < 0] = np.argmax(np.bincount(present, weights=curve.weight))
    return Banding(curve.factor, monotone, levels=tuple(levels), band_of_level=band, ordered=ordered,
                   base_level=base_level)


def base_band(banding: Banding, band_exposure: np.ndarray) -> int:
    """The band whose relativity is 1: the spec's base level's band, else the most exposed band."""
    if banding.base_level is not None and not banding.numeric:
        return int(banding.band_of_level[banding.levels.index(banding.base_level)])
    return int(np.argmax(band_exposure))


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


# ---------------------------------------------------------------------------------------------
# the whole distillation


@dataclass(frozen=True)
class FactorValues:
    """One factor on the training rows: numeric values, or indices into `levels` (categorical).

    model_codes: the boosted model's encoding of each level (categorical); ordered: bands follow
    the level order (numeric factors always); base_level: the spec's base level, if any.
    """

    name: str
    monotone: str
    values: np.ndarray
    levels: tuple[str, ...] | None = None
    model_codes: np.ndarray | None = None
    ordered: bool = True
    base_level: str | None = None


@dataclass(frozen=True)
class DistilOptions:
    """max_bands, min_share (of training exposure per band), sample (policies), grid_points, seed,
    decimals (relativity rounding, for the monotone check after rounding), pairs (two-way tables)."""

    max_bands: int = 8
    min_share: float = 0.02
    sample: int = 20000
    grid_points: int = 100
    seed: int = 2026
    decimals: int = 3
    pairs: tuple[tuple[str, str], ...] = ()


@dataclass
class Distillation:
    """Effect curves, the bandings they gave, and the pooled refit."""

    curves: dict[str, Curve]
    initial: dict[str, Banding]
    pooled: PooledRefit


def effect_curve(trees: Trees, sample: np.ndarray, feature: int, factor: FactorValues, exposure: np.ndarray,
                 grid_points: int) -> Curve:
    """The factor's partial dependence on the log score over its grid (numeric) or its levels with
    training exposure (categorical), with the exposure each point stands for."""
    if factor.levels is None:
        grid = quantile_grid(factor.values, exposure, grid_points)
        return Curve(factor.name, grid, partial_dependence(trees, sample, feature, grid),
                     cell_exposure(grid, factor.values, exposure))
    weight = np.bincount(factor.values, weights=exposure, minlength=len(factor.levels))
    present = np.flatnonzero(weight > 0)
    effect = partial_dependence(trees, sample, feature, factor.model_codes[present].astype(float))
    return Curve(factor.name, present, effect, weight[present], factor.levels)


def distil(model_text: str, sample: np.ndarray, factors: list[FactorValues], exposure: np.ndarray,
           response: np.ndarray, options: DistilOptions) -> Distillation:
    """Curves -> bands -> pooled refit. `sample`: the encoded sample matrix (columns in the model's
    feature order); `exposure`, `response` (boosted pure premium per unit) on the training rows."""
    trees = Trees.from_text(model_text)
    curves, bandings = {}, {}
    for factor in factors:
        if factor.name not in trees.feature_names:
            raise InputError(f"boosted model: factor '{factor.name}' is not one of its features "
                             f"({', '.join(trees.feature_names)})")
        curve = effect_curve(trees, sample, trees.feature_names.index(factor.name), factor, exposure,
                             options.grid_points)
        curves[factor.name] = curve
        if factor.levels is None:
            bandings[factor.name] = numeric_banding(curve, factor.monotone, options.max_bands, options.min_share)
        else:
            bandings[factor.name] = categorical_banding(curve, factor.levels, factor.monotone, factor.ordered,
                                                        options.max_bands, options.min_share, factor.base_level)
    pooled = pooled_refit(bandings, {f.name: f.values for f in factors}, list(options.pairs), exposure,
                          response, options.decimals)
    return Distillation(curves, bandings, pooled)
