"""`validate`: every finding in a book, its profile per level or band, and its missing values."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from premiumlab._core.cautions import VALIDATION
from premiumlab._core.cluster import parse_cluster, tasks_on
from premiumlab._core.jsonio import plain
from premiumlab.book.levels import is_missing
from premiumlab.book.reading import read_columns
from premiumlab.book.rows import Finding
from premiumlab.book.scan import BookSummary, parquet_slices, profile, scan_book, with_quantile_bands
from premiumlab.book.spec import Spec, load_spec
from rating_tables import MISSING_LABEL

#: Coverage of the interval of the frequency ratio of rows with a missing value to the others.
RATIO_COVERAGE = 0.95


def frequency_ratio(
    claims_missing: float, exposure_missing: float, claims_others: float, exposure_others: float
) -> tuple[float, float, float]:
    """The claim frequency of rows with a missing value over that of the others, with its exact
    conditional 95 % interval (Poisson).

    With N1 claims on exposure E1 (missing) and N0 on E0 (the others), independent Poisson with
    rates l1 and l0, the ratio is r = (N1 / E1) / (N0 / E0). Given N = N1 + N0, N1 is binomial
    (N, p) with p = r E1 / (r E1 + E0); the Clopper-Pearson interval (p_lo, p_hi) of p (central,
    each tail 2.5 %) gives the interval r = p / (1 - p) x E0 / E1 at its ends. It holds its
    coverage at any claim count (0 claims in a group included), at the price of being wider than
    the Wald interval exp(log r +- 1.96 sqrt(1 / N1 + 1 / N0)) of a Poisson GLM with an indicator,
    which it approaches when both counts are large.

    Parameters
    ----------
    claims_missing, exposure_missing : float
        Claims (whole numbers >= 0) and exposure (exposure units, > 0) of the rows with the value
        missing.
    claims_others, exposure_others : float
        The same for the rows with a value.

    Returns
    -------
    tuple of (float, float, float)
        The ratio, the lower and the upper end of its interval; NaN for all three without claims
        or without exposure in either group; the upper end is inf when every claim is in the
        missing group, the ratio and lower end 0 when none is.
    """
    n1, n0 = round(float(claims_missing)), round(float(claims_others))
    if n1 + n0 == 0 or not (exposure_missing > 0 and exposure_others > 0):
        return np.nan, np.nan, np.nan
    scale = exposure_others / exposure_missing
    ratio = np.inf if n0 == 0 else n1 / n0 * scale
    low, high = stats.binomtest(n1, n1 + n0).proportion_ci(RATIO_COVERAGE, method="exact")
    upper = np.inf if high >= 1.0 else high / (1.0 - high) * scale
    return float(ratio), float(low / (1.0 - low) * scale), float(upper)


def missing_experience(summary: BookSummary, spec: Spec) -> pd.DataFrame:
    """Per factor: the rows and exposure with the value missing, and whether their claim frequency
    differs from that of the other rows (`frequency_ratio`).

    Parameters
    ----------
    summary : BookSummary
        The book's sums per distinct value or band, the missing values apart (`scan_book`, then
        `with_quantile_bands`, so that every numeric factor has its sums).
    spec : Spec
        The pricing spec with every numeric factor banded (`with_quantile_bands`).

    Returns
    -------
    pandas.DataFrame
        Indexed by factor, in spec order: rows_missing, share_of_rows, exposure_missing (exposure
        units), share_of_exposure, claims_missing, frequency_missing and frequency_others (claims
        per exposure unit), frequency_ratio with ratio_lower and ratio_upper (its 95 % interval;
        NaN without missing values) and differs (the interval excludes 1).
    """
    records = []
    for f in spec.factors:
        lv = summary.levels[f.name]
        missing = is_missing(lv.values)
        lost, kept = lv.sums[missing].sum(axis=0), lv.sums[~missing].sum(axis=0)
        rows, exposure, claims = lost[0], lost[1], lost[2]
        ratio, low, high = frequency_ratio(claims, exposure, kept[2], kept[1]) if rows else (np.nan,) * 3
        records.append(
            {
                "factor": f.name,
                "rows_missing": int(rows),
                "share_of_rows": rows / summary.totals[0],
                "exposure_missing": exposure,
                "share_of_exposure": exposure / summary.totals[1] if summary.totals[1] > 0 else np.nan,
                "claims_missing": claims,
                "frequency_missing": claims / exposure if exposure > 0 else np.nan,
                "frequency_others": kept[2] / kept[1] if kept[1] > 0 else np.nan,
                "frequency_ratio": ratio,
                "ratio_lower": low,
                "ratio_upper": high,
                "differs": bool(low > 1.0 or high < 1.0),
            }
        )
    return pd.DataFrame.from_records(records, index="factor")


def _missing_findings(table: pd.DataFrame, source: str) -> list[Finding]:
    """A warning for each factor whose rows with a missing value claim differently from the others."""
    return [
        Finding(
            "warning",
            name,
            f"{source}: factor '{name}': the {int(row.rows_missing)} rows with a missing value "
            f"({row.share_of_exposure:.1%} of exposure, priced as '{MISSING_LABEL}') claim "
            f"{row.frequency_ratio:.3g} times as often as the others "
            f"({RATIO_COVERAGE:.0%} interval {row.ratio_lower:.3g} to {row.ratio_upper:.3g})",
        )
        for name, row in table.iterrows()
        if row.differs
    ]


@dataclass(frozen=True)
class ValidationReport:
    """Findings (errors and warnings) and, when the book is usable, its profile and its missing
    values per factor (`missing_experience`)."""

    path: str
    rows: int
    findings: list[Finding]
    profile: dict[str, pd.DataFrame] | None
    missing: pd.DataFrame | None = None

    @property
    def errors(self) -> list[Finding]:
        return [f for f in self.findings if f.level == "error"]

    @property
    def cautions(self) -> tuple[str, ...]:
        """The cautions of every validation: the draft, compliance and as-recorded cautions."""
        return VALIDATION

    def to_dict(self) -> dict:
        """The report as JSON-able data: each profile table as rows of its level and figures."""
        profile = (
            None
            if self.profile is None
            else {
                name: table.rename_axis("level").reset_index().astype({"level": str}).to_dict(orient="records")
                for name, table in self.profile.items()
            }
        )
        return plain(
            {
                "path": self.path,
                "rows": self.rows,
                "findings": self.findings,
                "profile": profile,
                "missing": None if self.missing is None else self.missing.reset_index().to_dict(orient="records"),
                "cautions": self.cautions,
            }
        )


def validate_book(book_path: str | Path, spec_path: str | Path, cluster: str | None = None) -> ValidationReport:
    """Scan the whole book and report every finding; profile it when it has no errors.

    `cluster` (premiumlab.cluster: local:N or a Dask scheduler address): check the slices of a
    Parquet book on Dask workers, which must see the book at the same path.

    Parameters
    ----------
    book_path : str or Path
        A book file or a folder of book parts.
    spec_path : str or Path
        The pricing spec (TOML).
    cluster : str or None
        local:N or a Dask scheduler address; None checks the book in this process.

    Returns
    -------
    ValidationReport
        Every finding (with a warning for each factor whose missing values claim differently,
        `missing_experience`); the rows read; the profile (`scan.profile`) and the missing values
        per factor when no finding is an error, else None. A missing column gives one error finding per column, and no rows.

    Raises
    ------
    InputError
        For a spec or book that cannot be read, a bad `cluster` address, a CSV book with a
        cluster, or a cluster that cannot be reached.
    """
    if cluster is not None:
        parse_cluster(cluster)
    spec: Spec = load_spec(spec_path)
    header = read_columns(book_path)
    missing = [c for c in spec.columns.used() + spec.factor_names if c not in header]
    if missing:
        findings = [Finding("error", c, f"{book_path}: missing column '{c}'") for c in missing]
        return ValidationReport(str(book_path), 0, findings, None)
    if cluster is None:
        _, summary, findings = scan_book(book_path, spec, keep_rows=False)
    else:
        parquet_slices(book_path)  # a CSV book is refused before a cluster is started
        with tasks_on(cluster) as runner:
            _, summary, findings = scan_book(book_path, spec, keep_rows=False, runner=runner)
    if any(f.level == "error" for f in findings):
        return ValidationReport(str(book_path), summary.rows, findings, None)
    banded, summary = with_quantile_bands(book_path, spec, summary)
    missing = missing_experience(summary, banded)
    findings = findings + _missing_findings(missing, str(book_path))
    return ValidationReport(str(book_path), summary.rows, findings, profile(summary, banded), missing)
