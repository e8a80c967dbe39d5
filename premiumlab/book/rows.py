"""The rows of a book: typing a chunk, the row-level checks and their findings, the typed book.

Row numbers in messages are 0-based data rows (the header is not counted), the same index that
`predictions.parquet` calls `row`. The checks are pure: a chunk in, findings out.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from premiumlab.book.spec import Factor, Spec
from rating_tables import MISSING_LABEL

#: Rows whose exposure exceeds this many terms are reported (exposure is usually at most one term).
TERM = 1.0
SHOW_ROWS = 5
#: Money amounts must stay below this: float64 holds 15 to 16 significant digits, so from 1e15 on a
#: sum of amounts can no longer carry cents (and squares in the deviances overflow long before 1e308).
MONEY_LIMIT = 1e15
#: Claim counts above this on one row are refused as implausible (a row is a policy's period, or at
#: most a small cell of them; a count that large is a unit or column mix-up). Common practice, not a rule.
COUNT_LIMIT = 1e6


@dataclass(frozen=True)
class Finding:
    """One data finding: `error` stops every command but `validate`; `warning` is reported only."""

    level: str
    column: str
    message: str

    def __str__(self) -> str:
        return f"{self.level}: {self.message}"


@dataclass
class Book:
    """A validated book, typed: numeric factors float64, categorical factors as strings and policy ids
    as text; or, compact (`scan.load_book(compact=True)`), categorical factors as pandas
    Categoricals, policy ids as uint64 keys (`split.policy_keys`) and no current premium."""

    path: str
    frame: pd.DataFrame
    exposure: np.ndarray
    claim_count: np.ndarray
    claim_amount: np.ndarray | None
    current_premium: np.ndarray | None
    policy: np.ndarray
    holdout: np.ndarray
    sha256: str
    warnings: list[Finding] = field(default_factory=list)

    @property
    def n_rows(self) -> int:
        return len(self.exposure)


class FindingCollector:
    """Collects findings per (level, column, check) across chunks: counts add, first rows kept."""

    def __init__(self, source: str) -> None:
        self.source = source
        self.items: dict[tuple[str, str, str], list] = {}

    def add(self, level: str, column: str, check: str, mask: np.ndarray, offset: int) -> None:
        self.add_rows(level, column, check, np.flatnonzero(mask) + offset)

    def add_rows(self, level: str, column: str, check: str, rows: np.ndarray) -> None:
        """Record the rows (0-based, ascending) that fail one check."""
        if len(rows) == 0:
            return
        entry = self.items.setdefault((level, column, check), [0, []])
        entry[0] += len(rows)
        entry[1].extend(rows[: SHOW_ROWS - len(entry[1])].tolist())

    def note(self, level: str, column: str, message: str) -> None:
        self.items[(level, column, message)] = [None, []]

    def merge(self, later: FindingCollector) -> None:
        """Add the findings of the rows that follow these in the book."""
        for key, (count, rows) in later.items.items():
            entry = self.items.setdefault(key, [0 if count is not None else None, []])
            if count is not None:
                entry[0] += count
                entry[1].extend(rows[: SHOW_ROWS - len(entry[1])])

    def findings(self) -> list[Finding]:
        out = []
        for (level, column, check), (count, rows) in self.items.items():
            if count is None:
                out.append(Finding(level, column, f"{self.source}: {check}"))
                continue
            shown = ", ".join(map(str, rows)) + (", ..." if count > len(rows) else "")
            out.append(
                Finding(
                    level,
                    column,
                    f"{self.source}: column '{column}': {count} row{'s' if count != 1 else ''} {check} (rows {shown})",
                )
            )
        return out


def to_number(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """(float values, mask of present-but-not-numeric entries); blanks become NaN, unmasked.

    Parameters
    ----------
    values : pandas.Series
        One column of a chunk: text (CSV) or numbers (Parquet). Text is stripped; "nan" in any
        case reads as NaN and is not flagged.

    Returns
    -------
    tuple of (ndarray, ndarray)
        The values as float64 (NaN where blank, missing or not a number) and a bool mask, True
        where an entry is present but not a number.
    """
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        return values.to_numpy(dtype=float, na_value=np.nan), np.zeros(len(values), dtype=bool)
    text = values.astype("string").str.strip()
    num = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    blank = (text.isna() | (text == "")).to_numpy(dtype=bool)
    bad = np.isnan(num) & ~blank & ~text.str.lower().isin(["nan"]).to_numpy(dtype=bool)
    return num, bad


def as_text(values: pd.Series) -> np.ndarray:
    """Levels as strings ("01" stays "01", floats as %g); missing values become "".

    The text is made once per distinct value and shared by its rows, so a factor with few levels
    costs one pointer per row however long the book is.

    Parameters
    ----------
    values : pandas.Series
        One column of a chunk: text, integers or floats.

    Returns
    -------
    ndarray of object
        The stripped text of each value, "" where it is missing.
    """
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    if pd.api.types.is_float_dtype(values):
        labels = pd.Series([format(v, "g") for v in uniques], dtype=object)
    else:
        labels = pd.Series(uniques).astype("string")
    text = np.append(labels.str.strip().to_numpy(dtype=object), "")  # code -1 (missing) -> ""
    return text[codes]


@dataclass
class TypedChunk:
    exposure: np.ndarray
    count: np.ndarray
    amount: np.ndarray | None
    premium: np.ndarray | None
    factors: dict[str, np.ndarray]
    policy: np.ndarray | None
    period: np.ndarray | None


def check_chunk(chunk: pd.DataFrame, offset: int, spec: Spec, out: FindingCollector) -> TypedChunk:
    """Type one chunk and record its row-level findings.

    Parameters
    ----------
    chunk : pandas.DataFrame
        Rows of the book with the spec's columns (`iter_book`).
    offset : int
        The 0-based book row of the chunk's first row, so that findings name book rows.
    spec : Spec
        The pricing spec: its columns and factors.
    out : FindingCollector
        Receives the chunk's findings (errors and warnings per column and check).

    Returns
    -------
    TypedChunk
        Exposure (exposure units), claim count, claim amount and current premium (money) as
        float64, numeric factors as float64 and categorical factors, policy ids and periods as
        text; the optional columns None when the spec does not name them.
    """
    c = spec.columns
    expo, bad = to_number(chunk[c.exposure])
    out.add("error", c.exposure, "with a non-numeric exposure", bad, offset)
    out.add("error", c.exposure, "with a missing exposure", np.isnan(expo) & ~bad, offset)
    out.add("error", c.exposure, "with a non-finite exposure", np.isinf(expo), offset)
    out.add("error", c.exposure, "with exposure <= 0", np.isfinite(expo) & (expo <= 0), offset)
    out.add("warning", c.exposure, f"with exposure above {TERM:g} term", np.isfinite(expo) & (expo > TERM), offset)

    count, bad = to_number(chunk[c.claim_count])
    out.add("error", c.claim_count, "with a non-numeric claim count", bad, offset)
    out.add("error", c.claim_count, "with a missing or non-finite claim count", ~np.isfinite(count) & ~bad, offset)
    out.add("error", c.claim_count, "with a negative claim count", count < 0, offset)
    out.add(
        "error", c.claim_count, "with a fractional claim count", np.isfinite(count) & (count != np.round(count)), offset
    )
    out.add(
        "error",
        c.claim_count,
        f"with a claim count above {COUNT_LIMIT:g} (check the column)",
        np.isfinite(count) & (count > COUNT_LIMIT),
        offset,
    )

    amount = None
    if c.claim_amount is not None:
        amount, bad = to_number(chunk[c.claim_amount])
        out.add("error", c.claim_amount, "with a non-numeric claim amount", bad, offset)
        out.add(
            "error", c.claim_amount, "with a missing or non-finite claim amount", ~np.isfinite(amount) & ~bad, offset
        )
        out.add("error", c.claim_amount, "with a negative claim amount", amount < 0, offset)
        out.add(
            "error",
            c.claim_amount,
            f"with a claim amount of {MONEY_LIMIT:g} or more (check the units)",
            np.isfinite(amount) & (amount >= MONEY_LIMIT),
            offset,
        )
        out.add(
            "error",
            c.claim_amount,
            f"with a positive amount but zero claims in '{c.claim_count}'",
            (amount > 0) & (count == 0),
            offset,
        )
        out.add(
            "warning",
            c.claim_amount,
            "with nil claims (claims but amount 0; excluded from severity)",
            (amount == 0) & (count > 0),
            offset,
        )

    premium = None
    if c.current_premium is not None:
        premium, bad = to_number(chunk[c.current_premium])
        out.add("error", c.current_premium, "with a non-numeric current premium", bad, offset)
        out.add(
            "error",
            c.current_premium,
            "with a missing, non-finite or non-positive current premium",
            ~(np.isfinite(premium) & (premium > 0)) & ~bad,
            offset,
        )
        out.add(
            "error",
            c.current_premium,
            f"with a current premium of {MONEY_LIMIT:g} or more (check the units)",
            np.isfinite(premium) & (premium >= MONEY_LIMIT),
            offset,
        )

    factors: dict[str, np.ndarray] = {}
    for f in spec.factors:
        factors[f.name] = _check_factor(chunk[f.name], f, offset, out)
    policy: np.ndarray | None = None
    if c.policy_id:
        policy = as_text(chunk[c.policy_id])
        out.add("error", c.policy_id, "with a missing policy id", policy == "", offset)
    period: np.ndarray | None = None
    if c.period:
        period = as_text(chunk[c.period])
        out.add("error", c.period, "with a missing period", period == "", offset)
    return TypedChunk(expo, count, amount, premium, factors, policy, period)


def _check_factor(values: pd.Series, f: Factor, offset: int, out: FindingCollector) -> np.ndarray:
    """A factor's values typed (numeric: float64, NaN where missing; categorical: text, "" where
    missing) and its findings: a missing value is an error only when the spec refuses it."""
    refuse = f.missing == "refuse"
    if f.type == "numeric":
        num, bad = to_number(values)
        out.add("error", f.name, "with a non-numeric value in a numeric factor", bad, offset)
        if refuse:
            out.add(
                "error",
                f.name,
                "with a missing value (the spec refuses them: missing = 'refuse')",
                np.isnan(num) & ~bad,
                offset,
            )
        out.add("error", f.name, "with an infinite value", np.isinf(num), offset)
        return num
    text = as_text(values)
    if refuse:
        out.add("error", f.name, "with a missing value (the spec refuses them: missing = 'refuse')", text == "", offset)
    out.add(
        "error",
        f.name,
        f"with the level '{MISSING_LABEL}', the label premiumlab gives missing values; rename it",
        text == MISSING_LABEL,
        offset,
    )
    if f.levels is not None:
        unknown = ~pd.Series(text).isin(f.levels).to_numpy() & (text != "") & (text != MISSING_LABEL)
        out.add("error", f.name, f"with a level not in the spec's levels ({', '.join(f.levels)})", unknown, offset)
    return text
