"""What the commands return: one frozen dataclass per command, each with `to_dict()`.

`validate` returns `premiumlab.book.validate.ValidationReport` and `fit` the run it wrote
(`premiumlab.runs.fit.Run`, as `open_run` gives it); the other commands' results are here. Nested
figures (metrics, bands, relativities) are the plain dicts and lists the commands also write to JSON.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.jsonio import plain

if TYPE_CHECKING:
    from rating_tables import LevelCounts


class Result:
    """Base of the result types: `to_dict()` gives the fields as JSON-able data."""

    def to_dict(self) -> dict[str, Any]:
        """The fields in order as plain Python (paths as strings, numpy values as Python numbers,
        non-finite floats as None), ready for `json.dumps`.

        Returns
        -------
        dict
            Field name -> value.
        """
        return plain(self)


@dataclass(frozen=True)
class SimulationResult(Result):
    """`simulate`: the book and truth.json written, and the book's size.

    Attributes: book and truth (paths); policies, rows (a policy in a period), claims and
    large_claims (counts); exposure (policy-years); claim_amount (money, the book's total).
    """

    book: Path
    truth: Path
    policies: int
    rows: int
    claims: int
    large_claims: int
    exposure: float
    claim_amount: float


@dataclass(frozen=True)
class Comparison(Result):
    """`compare`: the holdout comparison of a run's models, as written to RUN/comparison.json.

    Attributes: holdout_rows; tweedie_power (the deviance power of the pure premium); diagnostics
    (warnings that a result is unreliable: the run's, its GLMs' and the comparison's own); metrics
    (target -> the null model and, per model, mean deviance, D^2, Gini, balance, deviance to the
    null's); differences (pair -> deviance reduction and Gini gain with paired bootstrap 95 %
    intervals); lift, double_lift, actual_vs_expected (tables as column -> list); cautions.
    """

    holdout_rows: int
    tweedie_power: float
    diagnostics: tuple[Diagnostic, ...]
    metrics: dict
    differences: dict
    lift: dict
    double_lift: dict
    actual_vs_expected: dict
    cautions: tuple[str, ...]

    @classmethod
    def from_summary(cls, summary: dict) -> Comparison:
        """The result of `premiumlab.review.comparison.compare`'s summary dict."""
        return cls(
            holdout_rows=summary["holdout_rows"],
            tweedie_power=summary["tweedie_power"],
            diagnostics=tuple(
                d if isinstance(d, Diagnostic) else Diagnostic.from_dict(d) for d in summary["diagnostics"]
            ),
            metrics=summary["metrics"],
            differences=summary["differences"],
            lift=summary["lift"],
            double_lift=summary["double_lift"],
            actual_vs_expected=summary["actual_vs_expected"],
            cautions=tuple(summary["cautions"]),
        )


@dataclass(frozen=True)
class TableResult(Result):
    """`tabulate`: the rating table folder written and its TABLE/fidelity.json figures.

    Attributes: table (the folder); provenance (run, model, book sha256); source (the model the
    table was made from, the criterion, each candidate's holdout deviance and Gini); fidelity
    (deviance and Gini of the table and every candidate, and the retention); attenuation (slope of
    the table's log relativities on the source's effect, per factor and overall); groups (level ->
    group of every categorical factor); diagnostics (warnings that a figure is unreliable);
    rate_level (base rate, totals in money, off-balances); distillation (how the factors were
    banded); cautions; seconds (wall time).
    """

    table: Path
    provenance: dict
    source: dict
    fidelity: dict
    attenuation: dict
    groups: dict
    diagnostics: tuple[Diagnostic, ...]
    rate_level: dict
    distillation: dict
    cautions: tuple[str, ...]
    seconds: float

    @classmethod
    def from_summary(cls, summary: dict) -> TableResult:
        """The result of `premiumlab.tabulation.from_run.tabulate`'s summary dict."""
        return cls(
            table=Path(summary["table"]),
            provenance=summary["provenance"],
            source=summary["source"],
            fidelity=summary["fidelity"],
            attenuation=summary["attenuation"],
            groups=summary["groups"],
            diagnostics=tuple(Diagnostic.from_dict(d) for d in summary["diagnostics"]),
            rate_level=summary["rate_level"],
            distillation=summary["distillation"],
            cautions=tuple(summary["cautions"]),
            seconds=summary["seconds"],
        )


@dataclass(frozen=True)
class SelectResult(Result):
    """`select`: the selected table written from an indicated table and a selections file.

    Attributes: table (the folder); table_id, indicated_table_id, current_table_id (None without a
    current table); selections (each rule applied: factor, rule, detail, reason, applies_to,
    off_balance); notes (what the current table could not give); rate_level (the off-balance of the
    selections at the indicated base rate and the base rate that corrects it); audit (the spec's
    promises and every violation with the selections on its factor); fidelity (holdout deviance
    and Gini of the selected and the indicated table); cautions; seconds (wall time).
    """

    table: Path
    table_id: str
    indicated_table_id: str
    current_table_id: str | None
    selections: tuple[dict, ...]
    notes: tuple[str, ...]
    rate_level: dict
    audit: dict
    fidelity: dict
    cautions: tuple[str, ...]
    seconds: float

    @classmethod
    def from_summary(cls, summary: dict) -> SelectResult:
        """The result of `premiumlab.tabulation.select.select`'s summary dict."""
        return cls(
            table=Path(summary["table"]),
            table_id=summary["table_id"],
            indicated_table_id=summary["indicated_table_id"],
            current_table_id=summary["current_table_id"],
            selections=tuple(summary["selections"]),
            notes=tuple(summary["notes"]),
            rate_level=summary["rate_level"],
            audit=summary["audit"],
            fidelity=summary["fidelity"],
            cautions=tuple(summary["cautions"]),
            seconds=summary["seconds"],
        )


@dataclass(frozen=True)
class AuditResult(Result):
    """`audit`: every violation found in a table (its own checks, the spec's promises, the
    plausibility bounds, the run's certificate), one line each; diagnostics: warnings that are no
    violation (a promise kept by flattening); bounds: the (least, greatest) relativity checked, None
    when none were; no violation is not an approval (see cautions)."""

    table: Path
    violations: tuple[str, ...]
    diagnostics: tuple[Diagnostic, ...]
    bounds: tuple[float, float] | None
    cautions: tuple[str, ...]


@dataclass(frozen=True)
class RateResult(Result):
    """`rate`: the priced file written, the rows priced, the rows not priced at a band or level of
    their own, and the table's cautions.

    `counts` holds a `rating_tables.LevelCounts` for each factor where some rows were rated at its
    missing row (`missing_rows`) or, holding a level the table does not list, at its fallback or
    base level (`fallback_rows`, `fallback_level`, the first `unknown_levels`), in table order.
    """

    priced: Path
    rows: int
    counts: tuple[LevelCounts, ...]
    cautions: tuple[str, ...]


@dataclass(frozen=True)
class ImpactResult(Result):
    """`impact`: the dislocation from the current to the proposed premiums.

    Attributes as `rating_tables.impact` returns them: rows (policy-period rows) and policies
    (distinct policy ids, else the rows); total_current and total_proposed (money); overall_change
    (total_proposed / total_current - 1); bands (change bands by rows and current premium);
    above_thresholds (share of rows and current premium above each increase); by_factor (change by
    level); largest_increases (each with its row, policy id and period); capping (None without a
    cap); cautions.
    `to_dict()` is what `--out` writes.
    """

    rows: int
    policies: int
    total_current: float
    total_proposed: float
    overall_change: float
    bands: tuple[dict, ...]
    above_thresholds: tuple[dict, ...]
    by_factor: dict
    largest_increases: tuple[dict, ...]
    capping: dict | None
    cautions: tuple[str, ...]


@dataclass(frozen=True)
class Certificate(Result):
    """`certify`: the monotonicity certificate of a LightGBM text model in one factor.

    Attributes: model (the file); the fields of `premiumlab.models.trees.certificate.certify`
    (feature, feature_index, direction +1/-1, monotone, trees and leaf pairs checked, violation
    count, largest reversal in raw-score units, the listed violations); cautions.
    """

    model: Path
    feature: str
    feature_index: int
    direction: int
    monotone: bool
    trees_checked: int
    trees_splitting_on_feature: int
    leaf_pairs_checked: int
    violation_count: int
    max_violation: float
    trees_with_violations: tuple[int, ...]
    violations: tuple[Mapping[str, Any], ...]
    cautions: tuple[str, ...]


@dataclass(frozen=True)
class TailFit(Result):
    """`tails`: the generalised Pareto fit above a threshold and the mean-excess table.

    Attributes: threshold u (money); exceedances (losses above u) of losses; shape xi and scale
    beta (money) of F(y) = 1 - (1 + xi y / beta)^(-1 / xi) for the excess y = x - u;
    share_of_losses and share_of_amount above u; basis (what the losses are);
    default_threshold (u was the default quantile); notes; mean_excess (rows of threshold,
    exceedances, mean excess, its standard_error and a mark: "threshold", "large_loss_cap" or "");
    cautions. Added later, with defaults: shape_se and scale_se (standard errors, inverse expected
    information); modified_scale beta - xi u (money) and its modified_scale_se; shape_interval
    (the 95 % profile-likelihood interval of xi, an end None when not found); large_loss_cap (the
    spec's, money, or None); stability (rows of threshold, exceedances, shape, shape_se,
    modified_scale, modified_scale_se at a range of thresholds).
    """

    threshold: float
    exceedances: int
    losses: int
    shape: float
    scale: float
    share_of_losses: float
    share_of_amount: float
    basis: str
    default_threshold: bool
    notes: tuple[str, ...]
    mean_excess: tuple[dict, ...]
    cautions: tuple[str, ...]
    shape_se: float = float("nan")
    scale_se: float = float("nan")
    modified_scale: float = float("nan")
    modified_scale_se: float = float("nan")
    shape_interval: tuple[float | None, float | None] = (None, None)
    large_loss_cap: float | None = None
    stability: tuple[dict, ...] = ()


@dataclass(frozen=True)
class ReportResult(Result):
    """`report`: the HTML report written (RUN/report.html)."""

    report: Path


@dataclass(frozen=True)
class DemoResult(Result):
    """`demo`: the demo folder, every file written in it (relative paths, sorted) and the
    cautions of its rating table."""

    out: Path
    files: tuple[str, ...]
    cautions: tuple[str, ...]
