"""Premium dislocation: how the proposed premiums move each policy's current premium (pure functions).

Per-policy change = proposed / current - 1, rounded to 12 decimals so that a change of exactly
5 % is not pushed across a band edge by binary floating point. Bands are lower-inclusive:
[-20 %, -10 %) is "-20% to -10%". Capping limits each policy's change to [-cap, +cap]; the
correction factor k then solves sum(clip(k x proposed, current x (1 - cap), current x (1 + cap)))
= sum(proposed) exactly (the fixed point where policies pushed over the cap by the correction are
capped too, the others scaled by k).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import pandas as pd

from rating_tables.errors import TableError
from rating_tables.table import MISSING_LABEL

BAND_EDGES = (-0.20, -0.10, -0.05, 0.0, 0.05, 0.10, 0.20)
BAND_LABELS = (
    "below -20%",
    "-20% to -10%",
    "-10% to -5%",
    "-5% to 0%",
    "0% to +5%",
    "+5% to +10%",
    "+10% to +20%",
    "above +20%",
)
CHANGE_DECIMALS = 12


def _premium_change(current: npt.NDArray[np.float64], proposed: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    """proposed / current - 1 per policy, rounded to CHANGE_DECIMALS."""
    return np.round(proposed / current - 1.0, CHANGE_DECIMALS)


def _share(part: float, whole: float) -> float:
    return float(part / whole) if whole else 0.0


def _change_bands(change: npt.NDArray[np.float64], current: npt.NDArray[np.float64]) -> list[dict[str, Any]]:
    """Count and current premium of the rows in each change band, with their shares."""
    codes = np.searchsorted(np.array(BAND_EDGES), change, side="right")
    counts = np.bincount(codes, minlength=len(BAND_LABELS))
    premium = np.bincount(codes, weights=current, minlength=len(BAND_LABELS))
    edges = (None, *BAND_EDGES, None)
    return [
        {
            "band": label,
            "lower": edges[i],
            "upper": edges[i + 1],
            "count": int(counts[i]),
            "count_share": _share(counts[i], change.size),
            "current_premium": float(premium[i]),
            "premium_share": _share(premium[i], premium.sum()),
        }
        for i, label in enumerate(BAND_LABELS)
    ]


@dataclass(frozen=True)
class Capping:
    """Capped premiums, the off-balance they create, and the correction that restores the total.

    capped = clip(proposed, current x (1 - cap), current x (1 + cap)), money per policy;
    off_balance = sum(capped) / sum(proposed) - 1; corrected = clip(k x proposed, same limits) with
    sum(corrected) = sum(proposed). `correction_factor` (k) and `corrected` are None when no k
    reaches the total (every policy held at a limit).
    """

    cap: float
    low: npt.NDArray[np.float64]
    high: npt.NDArray[np.float64]
    capped: npt.NDArray[np.float64]
    off_balance: float
    correction_factor: float | None
    corrected: npt.NDArray[np.float64] | None

    def summary(self, current: npt.NDArray[np.float64], proposed: npt.NDArray[np.float64]) -> dict[str, Any]:
        """The JSON-able figures of the capping."""
        out: dict[str, Any] = {
            "cap": self.cap,
            "capped_up": int((proposed > self.high).sum()),
            "capped_down": int((proposed < self.low).sum()),
            "total_proposed": float(proposed.sum()),
            "total_capped": float(self.capped.sum()),
            "off_balance": self.off_balance,
            "correction_factor": self.correction_factor,
            "after_correction": None,
        }
        k = self.correction_factor
        if self.corrected is not None and k is not None:  # both or neither are None
            out["after_correction"] = {
                "total": float(self.corrected.sum()),
                "capped_up": int((k * proposed > self.high).sum()),
                "capped_down": int((k * proposed < self.low).sum()),
                "bands": _change_bands(_premium_change(current, self.corrected), current),
            }
        return out


def cap_premiums(current: npt.NDArray[np.float64], proposed: npt.NDArray[np.float64], cap: float) -> Capping:
    """Cap each policy's change at +-`cap` (0.15 for 15 %) and solve the correction factor.

    The inputs are not checked here (`impact` checks them).

    Parameters
    ----------
    current : numpy.ndarray of float64
        Current premium per policy, money, finite and > 0.
    proposed : numpy.ndarray of float64
        Proposed premium per policy, money, finite and > 0, same shape as `current`.
    cap : float
        Largest change allowed either way, a share >= 0 (0.15 = 15 %).

    Returns
    -------
    Capping
        low = current x max(0, 1 - cap) and high = current x (1 + cap), money per policy;
        capped = clip(proposed, low, high); off_balance = sum(capped) / sum(proposed) - 1; the
        correction factor k > 0 with sum(clip(k x proposed, low, high)) = sum(proposed) (found
        exactly on the piecewise-linear sum, not by iteration) and corrected = clip(k x proposed,
        low, high), or both None when no k reaches the total.
    """
    low = current * max(0.0, 1.0 - cap)
    high = current * (1.0 + cap)
    capped = np.clip(proposed, low, high)
    total = float(proposed.sum())
    k = _correction(proposed, low, high, total)
    return Capping(
        cap=float(cap),
        low=low,
        high=high,
        capped=capped,
        off_balance=float(capped.sum() / total - 1.0),
        correction_factor=k,
        corrected=None if k is None else np.clip(k * proposed, low, high),
    )


def _correction(
    proposed: npt.NDArray[np.float64], low: npt.NDArray[np.float64], high: npt.NDArray[np.float64], target: float
) -> float | None:
    """k > 0 with f(k) = sum(clip(k x proposed, low, high)) = target, or None.

    f is continuous, non-decreasing and linear between the knots low/proposed and high/proposed,
    so it is evaluated at every knot with cumulative sums and interpolated on the crossing segment.
    """
    at_low, at_high = low / proposed, high / proposed
    knots = np.unique(np.concatenate([at_low, at_high]))
    order_low, order_high = np.argsort(at_low, kind="stable"), np.argsort(at_high, kind="stable")
    sum_p_low = np.concatenate([[0.0], np.cumsum(proposed[order_low])])
    sum_low = np.concatenate([[0.0], np.cumsum(low[order_low])])
    sum_p_high = np.concatenate([[0.0], np.cumsum(proposed[order_high])])
    sum_high = np.concatenate([[0.0], np.cumsum(high[order_high])])
    n_started = np.searchsorted(at_low[order_low], knots, side="right")  # policies with low/p <= k
    n_capped = np.searchsorted(at_high[order_high], knots, side="left")  # policies with high/p < k
    f = (sum_low[-1] - sum_low[n_started]) + sum_high[n_capped] + knots * (sum_p_low[n_started] - sum_p_high[n_capped])
    if not f[0] <= target <= f[-1]:
        return None
    j = int(np.searchsorted(f, target, side="left"))
    if j == 0:
        return float(knots[0])
    return float(knots[j - 1] + (target - f[j - 1]) * (knots[j] - knots[j - 1]) / (f[j] - f[j - 1]))


def _levels(series: pd.Series) -> tuple[npt.NDArray[np.intp], list[str]]:
    """Each value's level code and the level labels; missing values (None, NaN, empty text) take
    the last label, `MISSING_LABEL`, as the rater takes them to the missing row."""
    if isinstance(series.dtype, pd.CategoricalDtype):
        codes, labels = series.cat.codes.to_numpy().astype(np.intp), [str(c) for c in series.cat.categories]
    else:
        try:
            codes, uniques = pd.factorize(series, sort=True)
        except TypeError:  # values of mixed types cannot be sorted
            codes, uniques = pd.factorize(series)
        labels = [str(u) for u in uniques]
    kept = np.array([label != "" for label in labels], dtype=bool)
    if kept.all() and not (codes < 0).any():
        return codes, labels
    missing = int(kept.sum())  # the code of the missing label, after the kept labels
    lookup = np.append(np.where(kept, np.cumsum(kept) - 1, missing), missing)  # code -1 takes the last entry
    return lookup[codes], [label for label in labels if label != ""] + [MISSING_LABEL]


def _by_level(
    series: pd.Series, current: npt.NDArray[np.float64], proposed: npt.NDArray[np.float64]
) -> list[dict[str, Any]]:
    """Per level of a factor: rows, current and proposed premium, premium-weighted mean change
    (sum proposed / sum current - 1)."""
    codes, labels = _levels(series)
    counts = np.bincount(codes, minlength=len(labels))
    cur = np.bincount(codes, weights=current, minlength=len(labels))
    prop = np.bincount(codes, weights=proposed, minlength=len(labels))
    return [
        {
            "level": labels[i],
            "count": int(counts[i]),
            "current_premium": float(cur[i]),
            "proposed_premium": float(prop[i]),
            "change": float(prop[i] / cur[i] - 1.0),
        }
        for i in range(len(labels))
        if counts[i]
    ]


def _premiums(values: npt.NDArray[np.float64], name: str, n: int) -> npt.NDArray[np.float64]:
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (n,):
        raise TableError(f"{name}: expected {n} premiums (one per book row), got shape {arr.shape}", where=name)
    bad = np.flatnonzero(~(np.isfinite(arr) & (arr > 0)))
    if bad.size:
        raise TableError(
            f"{name}: premium {float(arr[bad[0]])!r} at book row {int(bad[0])} (0-based) must be finite and > 0",
            where=name,
        )
    return arr


def impact(
    current: npt.NDArray[np.float64],
    proposed: npt.NDArray[np.float64],
    book: pd.DataFrame,
    factors: list[str],
    thresholds: tuple[float, ...] = (0.05, 0.10, 0.25),
    cap: float | None = None,
    top: int = 10,
    id_columns: tuple[str, ...] = (),
) -> dict[str, Any]:
    """Dislocation summary of moving every row of `book` from `current` to `proposed` premium.

    Returns a JSON-able dict: totals and overall change; the change bands by count and current
    premium; the share of rows (and of current premium) whose change exceeds each threshold;
    change by level of each factor in `factors` (book columns); the `top` largest increases
    (0-based row, the row's policy id and period, premiums, change); and with `cap` the capping
    figures (see `Capping`). A row is one policy in one period; `rows` counts them and `policies`
    counts the distinct policies (by the first of `id_columns`).

    A row's change is round(proposed / current - 1, 12), a share (0.05 = +5 %); the change
    bands are lower-inclusive with edges -20 %, -10 %, -5 %, 0, +5 %, +10 %, +20 % (`BAND_EDGES`).

    Parameters
    ----------
    current : numpy.ndarray of float64
        Current premium per book row, money, finite and > 0 (any 1-D array-like of numbers).
    proposed : numpy.ndarray of float64
        Proposed premium per book row, money, finite and > 0.
    book : pandas.DataFrame
        The policy-period rows, one per premium, in the premiums' order; only its length and the
        columns named in `factors` are read.
    factors : list of str
        Columns of `book` to break the change down by; each value is a level, shown as text.
    thresholds : tuple of float
        Changes, as shares (0.10 = 10 %), for which the rows with a change strictly above
        are counted.
    cap : float or None
        Largest change allowed either way, a share >= 0 (0.15 = 15 %); None for no capping.
    top : int
        How many of the largest increases to list, >= 0.
    id_columns : tuple of str
        Columns of `book` that identify a row, the policy id first, then the period (either may be
        left out); their values are shown as text.

    Returns
    -------
    dict
        `rows` (policy-period rows), `policies` (distinct values of the first id column, else the
        rows); `total_current`, `total_proposed` (money); `overall_change` =
        total_proposed / total_current - 1 (0.0 for no rows);
        `bands`: for each of the 8 change bands, `band` (label), `lower` and `upper` (the edges as
        shares, None for the open ends), `count`, `count_share` (share of the rows),
        `current_premium` (money) and `premium_share` (share of the total current premium);
        `above_thresholds`: for each threshold t, `threshold`, `count` (rows with change > t),
        `count_share` and `premium_share` (their current premium over the total);
        `by_factor`: for each factor, a list of levels with rows, each `level` (text; sorted
        by value, or in order of first appearance when the values cannot be sorted; a
        categorical column in category order; missing values, None, NaN or empty text, last as
        `MISSING_LABEL`, `(missing)`), `count`,
        `current_premium`, `proposed_premium` (money) and `change` = proposed_premium /
        current_premium - 1;
        `largest_increases`: up to `top` rows with a change > 0, largest first (ties in row
        order), each `row` (0-based), `id` (`{column: value as text}` for `id_columns`), `current`,
        `proposed` (money) and `change`;
        `capping`: None without `cap` or without rows, else `cap`; `capped_up` and `capped_down`
        (rows whose proposed premium is above current x (1 + cap) or below current x
        max(0, 1 - cap)); `total_proposed`, `total_capped` (money); `off_balance`;
        `correction_factor` (k, or None); `after_correction`: None when k is None, else `total`
        (money), `capped_up` and `capped_down` (rows still beyond a limit after scaling by
        k) and `bands` (the change bands of the corrected premiums), as `cap_premiums` defines
        them.

    Raises
    ------
    TableError
        When a premium array does not hold one value per book row or holds a value that is not
        finite and > 0 (naming the 0-based row), a factor or id column is not a column of `book`, a threshold
        or `cap` is not a finite number (or `cap` is negative), or `top` is not an integer >= 0.
    """
    n = len(book)
    current, proposed = _premiums(current, "current", n), _premiums(proposed, "proposed", n)
    missing = [f for f in (*factors, *id_columns) if f not in book.columns]
    if missing:
        raise TableError(f"factors: the book has no column {missing[0]!r}", where=missing[0])
    for value, name in [(t, "thresholds") for t in thresholds] + ([(cap, "cap")] if cap is not None else []):
        if (
            isinstance(value, bool)
            or not isinstance(value, (int, float, np.number))
            or not np.isfinite(value)
            or (name == "cap" and value < 0)
        ):
            raise TableError(f"{name}: {value!r} must be a finite number{' >= 0' if name == 'cap' else ''}", where=name)
    if isinstance(top, bool) or not isinstance(top, int) or top < 0:
        raise TableError(f"top: {top!r} must be an integer >= 0", where="top")
    change = _premium_change(current, proposed)
    order = np.argsort(-change, kind="stable")[:top]
    order = order[change[order] > 0]
    total_current = float(current.sum())
    ids = {c: book[c].to_numpy() for c in id_columns}
    return {
        "rows": n,
        "policies": int(pd.unique(ids[id_columns[0]]).size) if id_columns else n,
        "total_current": total_current,
        "total_proposed": float(proposed.sum()),
        "overall_change": _share(proposed.sum(), total_current) - 1.0 if n else 0.0,
        "bands": _change_bands(change, current),
        "above_thresholds": [
            {
                "threshold": float(t),
                "count": int((change > t).sum()),
                "count_share": _share((change > t).sum(), n),
                "premium_share": _share(current[change > t].sum(), total_current),
            }
            for t in thresholds
        ],
        "by_factor": {f: _by_level(book[f], current, proposed) for f in factors},
        "largest_increases": [
            {
                "row": int(i),
                "id": {c: str(values[i]) for c, values in ids.items()},
                "current": float(current[i]),
                "proposed": float(proposed[i]),
                "change": float(change[i]),
            }
            for i in order
        ],
        "capping": None
        if cap is None or n == 0
        else cap_premiums(current, proposed, float(cap)).summary(current, proposed),
    }
