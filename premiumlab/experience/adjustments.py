"""Experience adjustments before modelling: trend, large-loss capping with an excess load,
catastrophe losses spread back as a load, and development to ultimate (docs/spec.md, [experience]).

The order, per claim (with a claims file) or per row total (one policy in one period):
1. severity trend: x' = x (1 + s)^t, with t the years from the period's midpoint to the future
   midpoint (so that the cap is read in the money of the future policy period);
2. cap: capped = min(x', cap), excess = x' - capped; catastrophe claims are set aside, not capped;
3. per row, development and frequency trend: g_p = d_p (1 + f)^t on the capped, excess and
   catastrophe sums (the development factor applies alike to capped and excess losses);
4. flat loads measured on the training rows: excess load L = sum(excess) / sum(capped) (or the
   ratio from a longer history), catastrophe load K = sum(catastrophe) / sum(capped + excess);
5. adjusted amount = capped (1 + L) (1 + K); adjusted count = (count - catastrophe claims) c_p (1 + f)^t,
   with c_p = d_p when development applies to counts, else 1.
With L and K measured on them, the training rows' adjusted total equals their developed and trended
total: capping and the loads move amounts between policies, never the level.

Pure functions on arrays come first; the readers of the period column, the development CSV and the
claims file (the edges) come last.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import numpy.typing as npt
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab.book.spec import Experience, Spec

_TRUE = ("1", "true", "yes", "y", "t")
_FALSE = ("0", "false", "no", "n", "f", "")


# --------------------------------------------------------------------------------------------
# time and trend


def _year_fraction(day: dt.date) -> float:
    """A date as a fractional year: year + (days since 1 January) / days in that year."""
    start = dt.date(day.year, 1, 1)
    days = (dt.date(day.year + 1, 1, 1) - start).days
    return day.year + (day - start).days / days


def _period_midpoint(label: str, given: Mapping[str, str]) -> float:
    """Midpoint of a period as a fractional year: `given[label]` (a date) if listed, else a
    four-digit year label "2024" -> 2024.5; any other label must be listed."""
    if label in given:
        return _year_fraction(dt.date.fromisoformat(given[label]))
    if len(label) == 4 and label.isdigit():
        return int(label) + 0.5
    raise InputError(
        f"experience.period_midpoints: no midpoint for period '{label}' (only four-digit year "
        f"labels have one by default); add it as a date"
    )


def future_midpoint(exp: Experience, effective_date: str) -> float:
    """The future policy period's midpoint (fractional year): `future_midpoint`, else the table's
    effective date plus half a term of `term_years`.

    Parameters
    ----------
    exp : Experience
        The spec's [experience] section.
    effective_date : str
        The rating table's effective date (ISO, YYYY-MM-DD).

    Returns
    -------
    float
        The midpoint as a fractional year: year + (days since 1 January) / days in that year, plus
        term_years / 2 when taken from the effective date.
    """
    if exp.future_midpoint is not None:
        return _year_fraction(dt.date.fromisoformat(exp.future_midpoint))
    return _year_fraction(dt.date.fromisoformat(effective_date)) + exp.term_years / 2.0


def years_to_future(exp: Experience, labels: Sequence[str] | npt.NDArray[np.str_], future: float) -> np.ndarray:
    """Years from each period's midpoint to the future midpoint (zeros without a trend).

    Parameters
    ----------
    exp : Experience
        The spec's [experience] section.
    labels : sequence or ndarray of str
        Period labels: four-digit years ("2024" -> 2024.5), or labels listed in
        `period_midpoints`.
    future : float
        The future midpoint (fractional year, `future_midpoint`).

    Returns
    -------
    ndarray of float
        t = future - midpoint per label (years; negative for a period after the future midpoint).

    Raises
    ------
    InputError
        With a trend, for a label that is not a four-digit year and not in `period_midpoints`.
    """
    if not exp.trend:
        return np.zeros(len(labels))
    return future - np.array([_period_midpoint(p, exp.period_midpoints) for p in labels], dtype=float)


def trend_factor(years: np.ndarray, rate: float) -> np.ndarray:
    """(1 + rate)^years: an annual rate compounded over `years` (negative years trend back).

    Parameters
    ----------
    years : ndarray
        Years to trend over (`years_to_future`).
    rate : float
        Annual trend rate (0.05 = 5 % a year), > -1.

    Returns
    -------
    ndarray of float
        The multiplier (1 + rate)^years per element of `years`.
    """
    return np.power(1.0 + rate, np.asarray(years, dtype=float))


# --------------------------------------------------------------------------------------------
# large losses and loads


def _cap_losses(amount: np.ndarray, cap: float | None) -> tuple[np.ndarray, np.ndarray]:
    """(capped, excess): min(amount, cap) and amount - capped; no cap leaves amounts whole."""
    amount = np.asarray(amount, dtype=float)
    if cap is None:
        return amount.copy(), np.zeros_like(amount)
    capped = np.minimum(amount, cap)
    return capped, amount - capped


def _load_ratio(part: float, base: float) -> float:
    """part / base, the flat load that spreads `part` over losses totalling `base` (0 without either)."""
    return float(part / base) if base > 0 and part > 0 else 0.0


@dataclass(frozen=True)
class Claims:
    """Single claims matched to book rows: row index, amount (money) and catastrophe flag."""

    row: np.ndarray
    amount: np.ndarray
    catastrophe: np.ndarray


@dataclass(frozen=True)
class Adjustment:
    """The adjusted experience of every book row and the record of what was used.

    `count_base` is the integer count left after catastrophe claims; `count_multiplier` the
    development and frequency trend on counts, so the adjusted count is count_base x
    count_multiplier; `amount` the adjusted amount; `record` goes to RUN/experience.json.
    """

    count_base: np.ndarray
    count_multiplier: np.ndarray
    amount: np.ndarray
    record: dict

    @property
    def count(self) -> np.ndarray:
        return self.count_base * self.count_multiplier


def _adjust(
    exp: Experience,
    periods: np.ndarray,
    count: np.ndarray,
    amount: np.ndarray,
    train: np.ndarray,
    future: float,
    development: Mapping[str, float],
    claims: Claims | None = None,
) -> Adjustment:
    """Apply the adjustments of the module docstring to the rows of a book.

    periods: the period label of each row (None-free strings; ignored without trend and development);
    count, amount: the book's row totals; train: rows on which the loads are measured; future: the
    future midpoint (fractional year); development: factor by period label; claims: single claims
    (their amounts must add up to `amount` row by row; `read_claims` checks it).
    """
    n = len(count)
    labels, code = np.unique(np.asarray(periods, dtype=object).astype(str), return_inverse=True)
    years = years_to_future(exp, labels, future)
    sev_trend = trend_factor(years, exp.trend.get("severity", 0.0))
    freq_trend = trend_factor(years, exp.trend.get("frequency", 0.0))
    dev = np.ones(len(labels))
    if exp.development:
        missing = [p for p in labels if p not in development]
        if missing:
            row = int(np.flatnonzero(labels[code] == missing[0])[0])
            raise InputError(f"experience.development: no factor for period '{missing[0]}' (book row {row})")
        dev = np.array([development[p] for p in labels], dtype=float)
    count_dev = dev if exp.development_applies_to_counts else np.ones(len(labels))

    if claims is None:
        units, unit_row, cat = np.asarray(amount, dtype=float), np.arange(n), np.zeros(n, dtype=bool)
    else:
        units, unit_row, cat = claims.amount, claims.row, claims.catastrophe
    trended = units * sev_trend[code[unit_row]]
    capped_units, excess_units = _cap_losses(np.where(cat, 0.0, trended), exp.large_loss_cap)
    g = (dev * freq_trend)[code]

    def per_row(values: np.ndarray) -> np.ndarray:
        return np.bincount(unit_row, weights=values, minlength=n) * g

    capped, excess, catastrophe = per_row(capped_units), per_row(excess_units), per_row(np.where(cat, trended, 0.0))
    cat_claims = np.bincount(unit_row[cat], minlength=n)
    count_base = np.asarray(count, dtype=float) - cat_claims
    _check_counts(count_base, capped + excess, cat_claims)

    tr = np.asarray(train, dtype=bool)
    measured_excess = _load_ratio(excess[tr].sum(), capped[tr].sum())
    excess_load = exp.excess_load_history if exp.excess_load_history is not None else measured_excess
    cat_load = _load_ratio(catastrophe[tr].sum(), (capped + excess)[tr].sum())
    adjusted = capped * (1.0 + excess_load) * (1.0 + cat_load)
    multiplier = (count_dev * freq_trend)[code]
    record = _record(exp, labels, code, years, dev, count_dev, sev_trend, freq_trend, future, development)
    record["large_losses"] = {
        "cap": exp.large_loss_cap,
        "basis": "per claim" if claims is not None else "per row total",
        "losses_capped": int((excess_units > 0).sum()),
        "excess_training": float(excess[tr].sum()),
        "capped_training": float(capped[tr].sum()),
        "excess_load_measured": measured_excess,
        "excess_load": float(excess_load),
        "excess_load_from": "experience.excess_load_history"
        if exp.excess_load_history is not None
        else "training rows",
    }
    record["catastrophe"] = {
        "column": exp.catastrophe_column,
        "claims": int(cat.sum()),
        "amount_training": float(catastrophe[tr].sum()),
        "load": cat_load,
    }
    developed = capped + excess + catastrophe
    record["totals"] = {
        name: _totals(rows, count, amount, developed, count_base * multiplier, adjusted)
        for name, rows in (("training", tr), ("all", np.ones(n, dtype=bool)))
    }
    return Adjustment(count_base, multiplier, adjusted, record)


def _check_counts(count_base: np.ndarray, amount: np.ndarray, cat_claims: np.ndarray) -> None:
    bad = np.flatnonzero(count_base < 0)
    if bad.size:
        raise InputError(
            f"experience.catastrophe_column: book row {bad[0]} has {cat_claims[bad[0]]} catastrophe "
            f"claims, more than its claim count"
        )
    bad = np.flatnonzero((count_base == 0) & (amount > 0))
    if bad.size:
        raise InputError(
            f"experience.catastrophe_column: book row {bad[0]} keeps an amount of "
            f"{amount[bad[0]]:.2f} outside catastrophes but no claim once its "
            f"{cat_claims[bad[0]]} catastrophe claim(s) are taken out of its count"
        )


def _totals(
    rows: np.ndarray,
    count: np.ndarray,
    amount: np.ndarray,
    developed: np.ndarray,
    count_adjusted: np.ndarray,
    adjusted: np.ndarray,
) -> dict:
    return {
        "rows": int(rows.sum()),
        "count_observed": float(np.sum(count[rows])),
        "amount_observed": float(np.sum(amount[rows])),
        "amount_developed_trended": float(developed[rows].sum()),
        "count_adjusted": float(count_adjusted[rows].sum()),
        "amount_adjusted": float(adjusted[rows].sum()),
    }


def _record(
    exp: Experience,
    labels: np.ndarray,
    code: np.ndarray,
    years: np.ndarray,
    dev: np.ndarray,
    count_dev: np.ndarray,
    sev: np.ndarray,
    freq: np.ndarray,
    future: float,
    development: Mapping[str, float],
) -> dict:
    rows = np.bincount(code, minlength=len(labels))
    periods = {
        str(p): {
            "rows": int(rows[i]),
            "years_to_future": float(years[i]),
            "development": float(dev[i]),
            "count_development": float(count_dev[i]),
            "severity_trend": float(sev[i]),
            "frequency_trend": float(freq[i]),
            "amount_multiplier": float(sev[i] * freq[i] * dev[i]),
            "count_multiplier": float(freq[i] * count_dev[i]),
        }
        for i, p in enumerate(labels)
    }
    return {
        "format": "premiumlab.experience",
        "version": 1,
        "order": "severity trend, cap (catastrophe claims set aside), development and frequency trend, "
        "flat excess and catastrophe loads measured on the training rows",
        "applied": applied(exp),
        "not_applied": not_applied(exp),
        "trend": dict(exp.trend),
        "future_midpoint_year": future if exp.trend else None,
        "development_table": {str(k): float(v) for k, v in development.items()},
        "development_applies_to_counts": exp.development_applies_to_counts,
        "periods": periods,
    }


def applied(exp: Experience) -> list[str]:
    """The adjustments the spec sets, in words.

    Parameters
    ----------
    exp : Experience
        The spec's [experience] section.

    Returns
    -------
    list of str
        One phrase each for development, trend (with its rates), the large-loss cap and the
        catastrophe load, in that order, for those set.
    """
    out = []
    if exp.development:
        out.append(
            "developed to ultimate by period"
            + (" (amounts and counts)" if exp.development_applies_to_counts else " (amounts)")
        )
    if exp.trend:
        rates = ", ".join(f"{k} {v:.2%} a year" for k, v in sorted(exp.trend.items()))
        out.append(f"trended to the future policy period ({rates})")
    if exp.large_loss_cap is not None:
        basis = "per claim" if exp.claims_file else "per policy and period"
        out.append(f"large losses capped at {exp.large_loss_cap:,.0f} {basis}, the excess spread back as a flat load")
    if exp.catastrophe_column:
        out.append("catastrophe claims taken out and spread back as a flat load")
    return out


def not_applied(exp: Experience) -> list[str]:
    """The adjustments the spec does not set, in words.

    Parameters
    ----------
    exp : Experience
        The spec's [experience] section.

    Returns
    -------
    list of str
        One phrase each for development, trend, the large-loss cap and catastrophes, in that
        order, for those not set.
    """
    out = []
    if not exp.development:
        out.append("not developed to ultimate")
    if not exp.trend:
        out.append("not trended to the future policy period")
    if exp.large_loss_cap is None:
        out.append("large losses not capped")
    if not exp.catastrophe_column:
        out.append("catastrophe losses not separated")
    return out


def period_order(labels: Sequence[str]) -> list[str]:
    """Distinct period labels in time order: as numbers when they all are, else as text.

    Parameters
    ----------
    labels : sequence of str
        The period label of each row (repeats allowed).

    Returns
    -------
    list of str
        The distinct labels, earliest first.
    """
    unique = sorted(set(labels))
    numeric = pd.to_numeric(pd.Series(unique, dtype=object), errors="coerce")
    if numeric.notna().all():
        return [unique[i] for i in np.argsort(numeric.to_numpy(), kind="stable")]
    return unique


def latest_period_holdout(periods: np.ndarray) -> np.ndarray:
    """True for the rows of the latest period (the out-of-time holdout).

    Parameters
    ----------
    periods : ndarray
        The period label of each row; the latest is the last in `period_order`.

    Returns
    -------
    ndarray of bool
        True for the rows of the latest period.

    Raises
    ------
    InputError
        When the book has a single period.
    """
    labels = np.asarray(periods, dtype=object).astype(str)
    order = period_order(labels.tolist())
    if len(order) < 2:
        raise InputError(f"split.holdout: 'latest_period' needs at least two periods, the book has one ('{order[0]}')")
    return labels == order[-1]


# --------------------------------------------------------------------------------------------
# the edges: reading the period column, the development CSV and the claims file


def read_text_column(path: str | Path, column: str) -> np.ndarray:
    """One column of a book as strings typed the way the book's levels are ("01" stays "01").

    Parameters
    ----------
    path : str or Path
        A book file or a folder of book parts.
    column : str
        The column to read.

    Returns
    -------
    ndarray of object
        The stripped text of each row (`rows.as_text`), "" where it is missing.
    """
    from premiumlab.book.reading import iter_book
    from premiumlab.book.rows import as_text

    return np.concatenate([as_text(chunk[column]) for _, chunk in iter_book(path, [column])])


def _read_development(path: Path) -> dict[str, float]:
    """A development CSV with columns period,factor (factors > 0), one row per period."""
    if not path.is_file():
        raise InputError(f"{path}: development file not found (experience.development)")
    frame = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    missing = [c for c in ("period", "factor") if c not in frame.columns]
    if missing:
        raise InputError(f"{path}: missing column '{missing[0]}' (expected period,factor)")
    factor = pd.to_numeric(frame["factor"].str.strip(), errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~(factor > 0) | ~np.isfinite(factor))
    if bad.size:
        raise InputError(f"{path}: column 'factor', row {bad[0]}: {frame['factor'].iloc[bad[0]]!r} is not a number > 0")
    period = frame["period"].str.strip()
    dup = np.flatnonzero(period.duplicated().to_numpy())
    if dup.size:
        raise InputError(f"{path}: column 'period', row {dup[0]}: period '{period.iloc[dup[0]]}' is listed twice")
    return dict(zip(period, factor.tolist()))


def _development_factors(exp: Experience, spec_dir: Path) -> dict[str, float]:
    """The development table of the spec, or the CSV it names (relative to the spec's folder)."""
    if isinstance(exp.development, str):
        return _read_development(spec_dir / exp.development)
    return dict(exp.development)


def _flags(values: np.ndarray, path: Path, column: str) -> np.ndarray:
    lower = pd.Series(values, dtype=object).str.lower()
    bad = np.flatnonzero(~lower.isin(_TRUE + _FALSE).to_numpy())
    if bad.size:
        raise InputError(
            f"{path}: column '{column}', row {bad[0]}: {values[bad[0]]!r} is not a flag (true/false, yes/no or 1/0)"
        )
    return lower.isin(_TRUE).to_numpy()


def read_claims(path: Path, spec: Spec, policy: np.ndarray, period: np.ndarray | None, amount: np.ndarray) -> Claims:
    """Read the claims file, match each claim to its book row by policy (and period) and check that
    the claims of every row add up to the row's amount.

    Parameters
    ----------
    path : Path
        The claims file (CSV or Parquet).
    spec : Spec
        The pricing spec: the policy and period columns, the amount column of the claims
        (`claims_amount_column`, else the book's `claim_amount`) and the catastrophe flag column.
    policy : ndarray
        The policy id of each book row (text).
    period : ndarray or None
        The period label of each book row, when the spec names a period column.
    amount : ndarray
        The claim amount of each book row (money).

    Returns
    -------
    Claims
        Per claim in file order: its 0-based book row, its amount (money) and its catastrophe flag.

    Raises
    ------
    InputError
        When the file or a column is missing, an amount is not a number >= 0 or a flag not
        true/false, a policy (and period) repeats in the book or matches no book row, or the
        claims of a row do not add up to its amount (within 0.005 + 1e-9 x the amount).
    """
    from premiumlab.book.reading import iter_book, read_columns
    from premiumlab.book.rows import as_text

    c, exp = spec.columns, spec.experience
    if not path.exists():
        raise InputError(f"{path}: claims file not found (experience.claims_file)")
    amount_col = exp.claims_amount_column or c.claim_amount
    assert c.policy_id is not None and amount_col is not None  # the spec refuses a claims_file without them
    keys = [c.policy_id] + ([c.period] if c.period else [])
    wanted = keys + [amount_col] + ([exp.catastrophe_column] if exp.catastrophe_column else [])
    header = read_columns(path)
    missing = [col for col in wanted if col not in header]
    if missing:
        raise InputError(f"{path}: missing column '{missing[0]}' in the claims file")
    chunks = [chunk for _, chunk in iter_book(path, wanted)]
    frame = pd.concat(chunks, ignore_index=True) if chunks else pd.DataFrame(columns=wanted)
    text = {k: as_text(frame[k]) for k in keys}
    values = pd.to_numeric(frame[amount_col].astype("string").str.strip(), errors="coerce").to_numpy(
        dtype=float, na_value=np.nan
    )
    bad = np.flatnonzero(~(np.isfinite(values) & (values >= 0)))
    if bad.size:
        raise InputError(
            f"{path}: column '{amount_col}', row {bad[0]}: {frame[amount_col].iloc[bad[0]]!r} is not an amount >= 0"
        )
    cat = (
        _flags(as_text(frame[exp.catastrophe_column]), path, exp.catastrophe_column)
        if exp.catastrophe_column
        else np.zeros(len(frame), dtype=bool)
    )
    book_keys = [policy] + ([period] if c.period else [])
    index = pd.MultiIndex.from_arrays([np.asarray(k, dtype=object) for k in book_keys])
    if not index.is_unique:
        first = int(np.flatnonzero(index.duplicated())[0])
        raise InputError(
            f"{path}: policy '{policy[first]}' has several book rows; name columns.period so that "
            f"claims can be matched to rows"
        )
    row = index.get_indexer(pd.MultiIndex.from_arrays([text[k] for k in keys]))
    unknown = np.flatnonzero(row < 0)
    if unknown.size:
        at = unknown[0]
        raise InputError(f"{path}: row {at}: no book row has {', '.join(f'{k} {text[k][at]!r}' for k in keys)}")
    total = np.bincount(row, weights=values, minlength=len(amount))
    off = np.flatnonzero(np.abs(total - amount) > 0.005 + 1e-9 * np.abs(amount))
    if off.size:
        r = off[0]
        raise InputError(
            f"{path}: the claims of book row {r} (policy '{policy[r]}') add up to {total[r]:.2f}, but "
            f"the book's '{c.claim_amount}' is {amount[r]:.2f}"
        )
    return Claims(row.astype(np.int64), values, cat)


def prepare(
    spec: Spec,
    spec_dir: Path,
    periods: np.ndarray | None,
    policy: np.ndarray,
    count: np.ndarray,
    amount: np.ndarray | None,
    train: np.ndarray,
) -> Adjustment:
    """Read what the spec's [experience] names (development CSV, claims file, both relative to
    `spec_dir`) and adjust the rows; a book without amounts adjusts its counts only.

    Parameters
    ----------
    spec : Spec
        The pricing spec: its [experience], columns and the table's effective date.
    spec_dir : Path
        The spec file's folder.
    periods : ndarray or None
        The period label of each row, None when the spec names no period column.
    policy : ndarray
        The policy id of each row (text).
    count : ndarray
        The claim count of each row.
    amount : ndarray or None
        The claim amount of each row (money), None for a book without amounts.
    train : ndarray of bool
        The rows on which the excess and catastrophe loads are measured.

    Returns
    -------
    Adjustment
        Per row the count left after catastrophe claims, the count multiplier c_p (1 + f)^t and
        the adjusted amount capped (1 + L) (1 + K) (module docstring), and the record for
        RUN/experience.json.
    """
    exp = spec.experience
    amount = np.zeros(len(count)) if amount is None else amount
    claims = None
    if exp.claims_file is not None:
        claims = read_claims(spec_dir / exp.claims_file, spec, policy, periods, amount)
    labels = periods if periods is not None else np.full(len(count), "", dtype=object)
    future = future_midpoint(exp, spec.table.effective_date)
    return _adjust(exp, labels, count, amount, train, future, _development_factors(exp, spec_dir), claims)
