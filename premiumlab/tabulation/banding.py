"""Bands of a factor from its effect curve, and the base band whose relativity is 1.

Ordered factors (numeric, or categorical with a level order): isotonic curve where a direction is
promised, then the optimal segmentation into at most `max_bands` bands of at least `min_share`
exposure each (`premiumlab.tabulation.segment`). A numeric band starts at its first grid value, so
band edges are the upper grid values of the cells they follow. Unordered categoricals: levels
ordered by effect, then thin levels merged into their nearest neighbour in that order
(`merge_thin_levels`).

The missing value, when the training rows hold one, is a band of its own after the others (the
missing label's band of a categorical factor, a band after the last edge of a numeric one): it takes
no part in the ordering, the segmentation, the merging of thin levels or a promise, and it is never
the base band.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from premiumlab.book.bands import band_labels
from premiumlab.tabulation.effects import Curve
from premiumlab.tabulation.segment import isotonic, optimal_segmentation
from rating_tables import MISSING_LABEL
from rating_tables.monotone import Monotone


@dataclass(frozen=True)
class Banding:
    """How a factor's values map to table bands.

    Numeric: band 0 is (-inf, edges[0]), band k is [edges[k-1], edges[k]), the last runs to inf.
    Categorical: `band_of_level[i]` is the band of `levels[i]`; `ordered` bands follow the level
    order (a promise refers to it), unordered bands are numbered in effect order.
    `base_level` is the spec's base level (categorical), whose band gets relativity 1.
    `missing`: the last band is the missing values' (numeric: after the band above the last edge;
    categorical: the band of the last level, `MISSING_LABEL`, alone).
    """

    name: str
    monotone: str
    edges: np.ndarray | None = None
    levels: tuple[str, ...] | None = None
    band_of_level: np.ndarray | None = None
    ordered: bool = True
    base_level: str | None = None
    missing: bool = False

    @property
    def numeric(self) -> bool:
        return self.edges is not None

    @property
    def n_bands(self) -> int:
        """Every band, the missing band included."""
        if self.edges is not None:
            return self.edges.size + 1 + int(self.missing)
        return int(self.level_bands()[1].max()) + 1

    @property
    def ordinary_bands(self) -> int:
        """The bands of values present: every band but the missing one, which is the last."""
        return self.n_bands - int(self.missing)

    @property
    def direction(self) -> int:
        """The promise's sign: +1 increasing, -1 decreasing, 0 none."""
        return Monotone(self.monotone).sign

    def level_bands(self) -> tuple[tuple[str, ...], np.ndarray]:
        """`(levels, band_of_level)` of a categorical banding; a numeric banding has neither."""
        if self.levels is None or self.band_of_level is None:
            raise TypeError(f"banding of '{self.name}': a numeric banding has no levels")
        return self.levels, self.band_of_level

    def codes(self, values: np.ndarray) -> np.ndarray:
        """Band of each value: numeric values (NaN: the missing band), or level indices into `levels`."""
        if self.edges is not None:
            values = np.asarray(values, dtype=float)
            missing = np.isnan(values)
            assert self.missing or not missing.any(), f"'{self.name}': a missing value but no missing band"
            return np.where(missing, self.n_bands - 1, np.searchsorted(self.edges, values, side="right"))
        return self.level_bands()[1][values]

    def merged(self, k: int) -> Banding:
        """The banding with bands k and k+1 pooled into one (neither the missing band)."""
        assert k + 1 < self.ordinary_bands, "the missing band is never pooled"
        if self.edges is not None:
            return replace(self, edges=np.delete(self.edges, k))
        band = self.level_bands()[1]
        return replace(self, band_of_level=np.where(band > k, band - 1, band))

    def labels(self) -> list[str]:
        """Band labels: `[lower, upper)` or the levels of the band joined by `+`; the missing band's
        is `MISSING_LABEL`."""
        if self.edges is not None:
            return band_labels(self.edges) + ([MISSING_LABEL] if self.missing else [])
        levels, band = self.level_bands()
        return ["+".join(lv for lv, b in zip(levels, band) if b == k) for k in range(self.n_bands)]


def _ordered_bands(curve: Curve, direction: int, max_bands: int, min_share: float) -> np.ndarray:
    """Band index of each curve point: isotonic curve when a direction is promised, then the optimal
    segmentation (at most `max_bands` bands, each holding at least `min_share` of the weight)."""
    effect = curve.effect if direction == 0 else isotonic(curve.effect, curve.weight, increasing=direction > 0)
    return optimal_segmentation(effect, curve.weight, max_bands, min_share).labels(effect.size)


def numeric_banding(curve: Curve, monotone: str, max_bands: int, min_share: float) -> Banding:
    """Bands of a numeric factor from its curve; edges at the first grid value of each band.

    Parameters
    ----------
    curve : Curve
        The factor's effect curve on its exposure-quantile grid (`effects.effect_curve`).
    monotone : str
        The spec's promise: "increasing", "decreasing" or "none"; a promised curve is made
        isotonic before it is segmented.
    max_bands : int
        Most bands allowed (>= 1).
    min_share : float
        Least share of the curve's total weight (training exposure) per band, in [0, 1].

    Returns
    -------
    Banding
        A numeric banding: edges = the grid values where bands 1, 2, ... start (ascending), so
        band k is [edges[k-1], edges[k]); then the missing band when the curve has a missing effect.
    """
    band = _ordered_bands(curve, Monotone(monotone).sign, max_bands, min_share)
    starts = np.flatnonzero(np.diff(band)) + 1
    return Banding(
        curve.factor,
        monotone,
        edges=np.asarray(curve.points, dtype=float)[starts],
        missing=curve.missing_effect is not None,
    )


def merge_thin_levels(effect: np.ndarray, weight: np.ndarray, min_weight: float) -> np.ndarray:
    """Group of each level: levels sorted by effect, then the thinnest group under `min_weight` joins
    the adjacent group (in effect order) whose exposure-weighted mean effect is nearest (the lower one
    on a tie), until no group is thin or one group is left. Groups are numbered in effect order.

    A merged group's effect is the weighted mean sum(w_i e_i) / sum(w_i) of its levels.

    Parameters
    ----------
    effect : np.ndarray
        Effect of each level on the log score (up to a constant).
    weight : np.ndarray
        Training exposure of each level (> 0).
    min_weight : float
        Least exposure a group may hold, in the unit of `weight`.

    Returns
    -------
    np.ndarray
        Group (int64, 0 = lowest effect) of each level, in the order of `effect`.
    """
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


def categorical_banding(
    curve: Curve,
    levels: tuple[str, ...],
    monotone: str,
    ordered: bool,
    max_bands: int,
    min_share: float,
    base_level: str | None = None,
) -> Banding:
    """Bands of a categorical factor. `curve.points` index `levels` (levels without training exposure
    are absent from the curve): they join the previous level's band when ordered (the first band when
    no level precedes), else the band holding the most exposure. The missing level (`MISSING_LABEL`,
    last in `levels` when the curve has a missing effect) is a band of its own, the last.

    Ordered: isotonic where promised, then the optimal segmentation, as for a numeric factor.
    Unordered: `merge_thin_levels` with a least weight of min_share x the curve's total weight.

    Parameters
    ----------
    curve : Curve
        The factor's effect at its levels with training exposure (`effects.effect_curve`).
    levels : tuple of str
        Every level of the factor, as the run fixed them.
    monotone : str
        The spec's promise on the level order: "increasing", "decreasing" or "none".
    ordered : bool
        The spec gives a level order: bands are contiguous runs of levels in that order; else
        levels are grouped in effect order.
    max_bands : int
        Most bands of an ordered factor (>= 1); an unordered one is limited by `min_share` only.
    min_share : float
        Least share of the curve's total weight (training exposure) per band, in [0, 1].
    base_level : str or None
        The spec's base level, whose band gets relativity 1 (None: the most exposed band).

    Returns
    -------
    Banding
        A categorical banding: the band of every level in `levels`.
    """
    points = np.asarray(curve.points, dtype=np.int64)
    missing = curve.missing_effect is not None
    if ordered:
        present = _ordered_bands(curve, Monotone(monotone).sign, max_bands, min_share)
    else:
        present = merge_thin_levels(curve.effect, curve.weight, min_share * curve.weight.sum())
    band = np.full(len(levels) - int(missing), -1, dtype=np.int64)
    band[points] = present
    if ordered:
        band = np.maximum.accumulate(band)
        band[band < 0] = 0
    else:
        band[band < 0] = np.argmax(np.bincount(present, weights=curve.weight))
    if missing:
        band = np.append(band, band.max() + 1)
    return Banding(
        curve.factor,
        monotone,
        levels=tuple(levels),
        band_of_level=band,
        ordered=ordered,
        base_level=base_level,
        missing=missing,
    )


def base_band(banding: Banding, band_exposure: np.ndarray) -> int:
    """The band whose relativity is 1: the spec's base level's band, else the most exposed band.

    Parameters
    ----------
    banding : Banding
        The factor's banding.
    band_exposure : np.ndarray
        Training exposure of each band (`refit.band_exposure`).

    Returns
    -------
    int
        The base band's index (the first of equally exposed bands; never the missing band).
    """
    if banding.base_level is not None and not banding.numeric:
        levels, band = banding.level_bands()
        return int(band[levels.index(banding.base_level)])
    return int(np.argmax(band_exposure[: banding.ordinary_bands]))
