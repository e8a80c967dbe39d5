"""`validate`: every finding in a book, and its profile per level or band."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from premiumlab._core.cautions import VALIDATION
from premiumlab._core.cluster import parse_cluster, tasks_on
from premiumlab._core.jsonio import plain
from premiumlab.book.reading import read_columns
from premiumlab.book.rows import Finding
from premiumlab.book.scan import parquet_slices, profile, scan_book, with_quantile_bands
from premiumlab.book.spec import Spec, load_spec


@dataclass(frozen=True)
class ValidationReport:
    """Findings (errors and warnings) and, when the book is usable, its profile."""

    path: str
    rows: int
    findings: list[Finding]
    profile: dict[str, pd.DataFrame] | None

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
        Every finding; the rows read; the profile (`scan.profile`) when no finding is an error,
        else None. A missing column gives one error finding per column, and no rows.

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
    return ValidationReport(str(book_path), summary.rows, findings, profile(summary, banded))
