"""The text the command line prints for each command's result (the library returns data only)."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

from premiumlab._core.defaults import PLAUSIBLE_RELATIVITY
from premiumlab._core.diagnostics import Diagnostic
from premiumlab.evaluation.diagnostics import figure_text
from premiumlab.results import (
    AuditResult,
    Certificate,
    Comparison,
    DemoResult,
    ImpactResult,
    SelectResult,
    SimulationResult,
    TableResult,
    TailFit,
)

if TYPE_CHECKING:
    from rich.table import Table

    from premiumlab.book.validate import ValidationReport
    from rating_tables import LevelCounts


def caution_lines(cautions: Iterable[str]) -> list[str]:
    """One `caution: ...` line per caution.

    Parameters
    ----------
    cautions : iterable of str
        The cautions of a result.

    Returns
    -------
    list[str]
        The lines, in the order given.
    """
    return [f"caution: {c}" for c in cautions]


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def level_count_lines(counts: Iterable[LevelCounts]) -> list[str]:
    """`rate`: per factor, the rows rated at the fallback level and at the missing row.

    Parameters
    ----------
    counts : iterable of rating_tables.LevelCounts
        The counts of `RateResult.counts` (factors where some rows took the fallback level or the
        missing row).

    Returns
    -------
    list[str]
        One sentence per factor, e.g. `factor 'territory': 12 rows with a level the table does not
        list ('T301', 'T302') rated at the fallback level 'T001'; 3 rows with a missing value rated
        at the missing row`. With 5 unknown levels shown, they are the first 5 met.
    """
    from rating_tables.rate import UNKNOWN_SHOWN

    lines = []
    for c in counts:
        parts = []
        if c.fallback_rows:
            shown = ", ".join(repr(level) for level in c.unknown_levels)
            first = "first met: " if len(c.unknown_levels) >= UNKNOWN_SHOWN else ""
            parts.append(
                f"{_rows(c.fallback_rows)} with a level the table does not list ({first}{shown}) rated at the "
                f"fallback level {c.fallback_level!r}"
            )
        if c.missing_rows:
            parts.append(f"{_rows(c.missing_rows)} with a missing value rated at the missing row")
        if parts:
            lines.append(f"factor {c.factor!r}: " + "; ".join(parts))
    return lines


#: Diagnostics of one kind and model printed in full before "and N more".
DIAGNOSTICS_SHOWN = 3


def diagnostic_lines(
    diagnostics: Iterable[Diagnostic | Mapping[str, Any]],
    source: str | Path | None = None,
    shown: int = DIAGNOSTICS_SHOWN,
) -> list[str]:
    """One `warning: KIND: ...` line per diagnostic, grouped by kind then model; past `shown` of one
    kind and model, one line saying how many more.

    Parameters
    ----------
    diagnostics : iterable of Diagnostic or of its dict
        The diagnostics, e.g. run.json's `diagnostics` or a result's.
    source : str or Path or None
        The file that lists them all, named on an "and N more" line.
    shown : int
        Diagnostics of one kind and model shown in full.

    Returns
    -------
    list[str]
        Kinds in the order first met, models within a kind likewise; "warning: KIND: MODEL, factor
        'F', level 'L': message" for each shown, and "warning: KIND: MODEL: and N more (all in
        SOURCE)" for the rest of a group.
    """
    groups: dict[str, dict[str, list[Diagnostic]]] = {}
    for item in diagnostics:
        d = item if isinstance(item, Diagnostic) else Diagnostic.from_dict(dict(item))
        groups.setdefault(d.kind, {}).setdefault(d.model, []).append(d)
    where = "" if source is None else f" (all in {source})"
    lines = []
    for kind, models in groups.items():
        for model, found in models.items():
            lines += [f"warning: {kind}: {d}" for d in found[:shown]]
            if len(found) > shown:
                lines.append(f"warning: {kind}: {model}: and {len(found) - shown} more{where}")
    return lines


def simulation_line(result: SimulationResult) -> str:
    """`simulate`: the files written and the book's size.

    Parameters
    ----------
    result : SimulationResult
        What `simulate` returned.

    Returns
    -------
    str
        One line.
    """
    return f"wrote {result.book} ({result.rows} rows, {result.policies} policies) and {result.truth}"


def validation_text(report: ValidationReport) -> str:
    """`validate`: the counts and every finding, for a `premiumlab.book.validate.ValidationReport`
    (the profile is `validation_view`'s; the cautions go to stderr with every command's).

    Parameters
    ----------
    report : ValidationReport
        What `validate` returned.

    Returns
    -------
    str
        The lines joined by newlines.
    """
    lines = [
        f"{report.path}: {report.rows} rows, {len(report.errors)} error(s), "
        f"{len(report.findings) - len(report.errors)} warning(s)"
    ]
    lines += [f"  {f}" for f in report.findings]
    return "\n".join(lines)


def validation_view(report: ValidationReport) -> list[str | Table]:
    """`validate`: the counts and findings, a profile table per factor (when the book has no errors,
    `premiumlab.cli.tables.profile_table`) and the missing values.

    Parameters
    ----------
    report : ValidationReport
        What `validate` returned.

    Returns
    -------
    list of str or rich.table.Table
        Text and tables in the order printed.
    """
    from premiumlab.cli.tables import profile_table

    view: list[str | Table] = [validation_text(report)]
    if report.profile is not None:
        for name, frame in report.profile.items():
            view.append(profile_table(name, frame))
    if report.missing is not None:
        view += ["", *missing_value_view(report.missing)]
    return view


def missing_value_view(missing: Any) -> list[str | Table]:
    """`validate`: per factor with missing values, their share of rows and exposure and the claim
    frequency ratio of those rows to the others with its 95 % interval, flagged when it excludes 1.

    Parameters
    ----------
    missing : pandas.DataFrame
        `premiumlab.book.validate.missing_experience`: one row per factor.

    Returns
    -------
    list of str or rich.table.Table
        A heading and the table (`premiumlab.cli.tables.missing_values_table`), or one line saying
        there are none.
    """
    from premiumlab.cli.tables import missing_values_table

    lost = missing[missing["rows_missing"] > 0]
    if lost.empty:
        return ["missing values: none"]
    return [
        "missing values (claim frequency of the rows with the value missing over the others, "
        "exact conditional Poisson 95 % interval):",
        missing_values_table(lost),
    ]


def comparison_view(result: Comparison) -> list[str | Table]:
    """`compare`: the table of the holdout metrics and the differences with their intervals.

    Parameters
    ----------
    result : Comparison
        What `compare` returned.

    Returns
    -------
    list of str or rich.table.Table
        `premiumlab.cli.tables.comparison_table` (a model with a `worse_than_null` diagnostic
        marked "!", its warning on stderr; figures that are not finite shown as n/a), a line
        explaining the mark when one is set, then one line per difference with its 95 % interval.
    """
    from premiumlab.cli.tables import comparison_table

    lines = []
    if any(d.kind == "worse_than_null" for d in result.diagnostics):
        lines.append("! worse than the null model or absurd figures: see the warnings")
    lines.append("differences (paired bootstrap 95 % interval):")
    for name, d in result.differences.items():
        dev, gin = d["deviance_reduction"], d["gini_gain"]
        lines.append(
            f"  {name}: deviance reduction {figure_text(dev['estimate'], '.5g')} [{figure_text(dev['lower'], '.5g')}, "
            f"{figure_text(dev['upper'], '.5g')}]; Gini gain {figure_text(gin['estimate'], '.4f')} "
            f"[{figure_text(gin['lower'], '.4f')}, {figure_text(gin['upper'], '.4f')}]"
        )
    return [comparison_table(result), "\n".join(lines)]


def selection_lines(result: SelectResult) -> list[str]:
    """`select`: each selection with its off-balance, the base-rate correction, the audit and the
    fidelity of the selected table beside the indicated one.

    Parameters
    ----------
    result : SelectResult
        What `select` returned.

    Returns
    -------
    list[str]
        One line per selection (factor, rule, bands or levels changed, off-balance, reason); the
        total off-balance at the indicated base rate and the corrected base rate; one line per
        audit violation with the selections on its factor, or that the promises hold; the holdout
        deviance and Gini of both tables; the notes.
    """
    level, fid = result.rate_level, result.fidelity
    lines = [f"wrote {result.table} ({result.table_id}) from {result.indicated_table_id}"]
    for r in result.selections:
        changed = len(r["applies_to"])
        lines.append(
            f"  {r['factor']}: {r['rule']} ({changed} band{'s' if changed != 1 else ''} or level{'s' if changed != 1 else ''} "
            f"changed) off-balance {r['off_balance']:+.3%}; reason: {r['reason']}"
        )
    lines.append(
        f"off-balance of the selections at the indicated base rate: {level['off_balance']:+.3%} (rounding "
        f"{level['rounding_off_balance']:+.3%}); base rate {level['indicated_base_rate']:.4f} -> "
        f"{level['base_rate']:.4f} (x {level['base_rate_correction']:.5f}) to meet the target total pure premium "
        f"{level['target_total_pure_premium']:,.2f}"
    )
    promised = ", ".join(f"{k} {v}" for k, v in result.audit["promises"].items()) or "none"
    if result.audit["violations"]:
        for v in result.audit["violations"]:
            lines.append(
                f"audit: {v['violation']}; selections on '{v['factor']}': {', '.join(v['selections']) or 'none'}"
            )
    else:
        lines.append(f"audit: the selected table keeps every promise of the spec ({promised}) and has its bases at 1")
    s, i = fid["selected"], fid["indicated"]
    lines.append(
        f"holdout fidelity: selected mean deviance {s['mean_deviance']:.6g}, Gini {s['gini']:.4f}; "
        f"indicated {i['mean_deviance']:.6g}, Gini {i['gini']:.4f}"
    )
    lines += [f"note: {n}" for n in result.notes]
    return lines


def fidelity_view(result: TableResult) -> list[str | Table]:
    """`tabulate`: source, rate level, fidelity, retention, attenuation and warnings.

    Parameters
    ----------
    result : TableResult
        What `tabulate` returned.

    Returns
    -------
    list of str or rich.table.Table
        The source and why with every candidate's figures; the table written with its base rate,
        total pure premium (money) and rounding off-balance; the exhibit's path; the indicated change when there is
        one; the table of the mean deviance and Gini of the table and of each candidate
        (`premiumlab.cli.tables.fidelity_table`); the retention ratios that are defined; the
        attenuation per factor; then one `warning:` line per diagnostic and per factor flattened
        below the threshold.
    """
    from premiumlab.cli.tables import fidelity_table

    level, fid, src, att = result.rate_level, result.fidelity, result.source, result.attenuation
    chosen = "chosen" if src["requested"] == "auto" else "requested with --model"
    deviances = ", ".join(f"{name} {s['mean_deviance']:.6g}" for name, s in src["candidates"].items())
    lines = [f"source: {src['model']} ({chosen}; auto takes the {src['criterion']}: {deviances})"]
    lines.append(
        f"wrote {result.table}: base rate {level['base_rate']:.4f}, total pure premium "
        f"{level['total_pure_premium']:,.2f} ({level['target']['basis']}), rounding off-balance "
        f"{level['rounding_off_balance']:+.4%}"
    )
    lines.append(f"exhibit for filing: {(result.table / 'exhibit.xlsx').as_posix()}")
    if "indicated_overall_change" in level:
        lines.append(f"indicated overall change against the current premium: {level['indicated_overall_change']:+.2%}")
    lines.append(
        f"fidelity on the {fid['subset']} rows ({fid['rows']:,} rows, {fid['policies']:,} policies, "
        f"Tweedie power {fid['tweedie_power']:.2f}):"
    )
    view: list[str | Table] = ["\n".join(lines), fidelity_table(fid["models"], src["model"])]
    lines = []
    r = fid["retention"]
    if r.get("gini_table_over_source") is not None:
        lines.append(f"  retention G_table/G_{r['source']} = {r['gini_table_over_source']:.3f}")
    if r.get("source_lift_over_glm_kept") is not None:
        lines.append(f"  retention (G_table - G_glm)/(G_{r['source']} - G_glm) = {r['source_lift_over_glm_kept']:.3f}")
    slopes = ", ".join(f"{n} {'-' if b is None else f'{b:.2f}'}" for n, b in att["factors"].items())
    overall = "-" if att["overall"] is None else f"{att['overall']:.2f}"
    lines.append(f"attenuation (slope of the table's log relativities on the source's effect, 1 = kept): {slopes}")
    lines.append(f"  overall {overall}")
    lines += [f"warning: {d}" for d in result.diagnostics]
    lines += [
        f"warning: table, factor '{n}': attenuation {att['factors'][n]:.2f} is below {att['flattened_below']} "
        "(a common-practice threshold): the table flattens the source's effect"
        for n in att["flattened"]
    ]
    return [*view, "\n".join(lines)]


def audit_lines(
    result: AuditResult, promises: Mapping[str, str] | None = None, certificate_checked: bool = False
) -> list[str]:
    """`audit`: what was checked, every violation, then their count and the bounds checked.

    Parameters
    ----------
    result : AuditResult
        What `audit` returned.
    promises : mapping of str to str, or None
        The spec's promised directions checked, factor -> "increasing" or "decreasing" (None: no
        spec was given).
    certificate_checked : bool
        A run was given and its boosted models' monotonicity certificate re-checked.

    Returns
    -------
    list[str]
        "checked: ..." naming the table's own checks (bases at 1, bands in order), the promises,
        the bounds and the certificate; one line per violation; then the count with the
        plausibility bounds checked (or "no bounds"). The flattened promises are warnings:
        `diagnostic_lines` prints them.
    """
    if promises is None:
        promised = "no spec given, so no promised direction"
    elif promises:
        promised = "the spec's promised directions (" + ", ".join(f"{f} {d}" for f, d in promises.items()) + ")"
    else:
        promised = "the spec, which promises no direction"
    certificate = (
        "the run's monotonicity certificate re-checked"
        if certificate_checked
        else "no run given, so no certificate re-checked"
    )
    checked = f"checked: the table's structure (bases at 1, bands in order); {promised}; {certificate}"
    if result.bounds is None:
        bounds = "no relativity bounds checked"
    else:
        low, high = result.bounds
        default = ", a common-practice default" if result.bounds == PLAUSIBLE_RELATIVITY else ""
        bounds = f"relativity bounds [{low:g}, {high:g}]{default}"
    return [checked, *result.violations, f"audit: {len(result.violations)} violation(s) in {result.table} ({bounds})"]


def impact_view(result: ImpactResult) -> list[str | Table]:
    """`impact`: totals, change bands, increases above the thresholds, the largest increase, capping.

    Parameters
    ----------
    result : ImpactResult
        What `impact` returned.

    Returns
    -------
    list of str or rich.table.Table
        The totals (money) and the overall change; `premiumlab.cli.tables.impact_tables` (bands by
        rows and current premium, the increases above each threshold, with a cap the capping
        figures named in words and the bands after capping) with the largest increase after the
        threshold table.
    """
    from premiumlab.cli.tables import impact_tables

    bands, thresholds, *capping = impact_tables(result)
    view: list[str | Table] = [
        f"{result.rows:,} rows ({result.policies:,} policies): current total {result.total_current:,.2f}, "
        f"proposed {result.total_proposed:,.2f}, overall change {result.overall_change:+.2%}",
        bands,
        thresholds,
    ]
    if result.largest_increases:
        top = result.largest_increases[0]
        who = ", ".join(f"{k} {v}" for k, v in top["id"].items()) or f"row {top['row']} (0-based)"
        view.append(f"largest increase: {who}, {top['current']:,.2f} -> {top['proposed']:,.2f} ({top['change']:+.1%})")
    return view + capping


def interaction_line(ranking: dict) -> str:
    """`fit`: the interaction pairs that stand out from noise, offered for the spec's
    `[table] interactions` (RUN/interactions.json, docs/run-directory.md).

    Parameters
    ----------
    ranking : dict
        interactions.json as written by `fit`.

    Returns
    -------
    str
        One line: the candidate pairs with their strength and p-value and the spec line that would
        tabulate them, or that no pair of the factors measured stands out.
    """
    tested = len(ranking["pairs"])
    if not ranking["candidates"]:
        return (
            f"interactions: no pair of the {len(ranking['factors'])} top factors of the {ranking['model']} model "
            f"stands out from noise ({tested} pairs tested; interactions.json)"
        )
    found = [p for p in ranking["pairs"] if p["stands_out"]]
    listed = ", ".join(
        f"{a} x {b} (strength {p['strength']:.3f}, p {p['p_value']:.2g})" for p in found for a, b in [p["pair"]]
    )
    spec_line = "[" + ", ".join(f'["{a}", "{b}"]' for a, b in ranking["candidates"]) + "]"
    verb, them = ("stands", "it") if len(found) == 1 else ("stand", "them")
    return (
        f"interactions: {listed} {verb} out from noise among {tested} pairs; "
        f"to tabulate {them}, set [table] interactions = {spec_line}"
    )


def certificate_lines(result: Certificate) -> list[str]:
    """`certify`: what was checked and each listed violation.

    Parameters
    ----------
    result : Certificate
        What `certify` returned.

    Returns
    -------
    list[str]
        The trees and leaf pairs checked and the violation count; when more were found than listed,
        how many are not printed; then one line per listed violation with its two leaf values and
        the reversal (raw score units).
    """
    lines = [
        f"{result.model}: {result.trees_checked} trees checked, {result.trees_splitting_on_feature} split on "
        f"{result.feature}, {result.leaf_pairs_checked} leaf pairs checked, "
        f"{result.violation_count} violation(s)"
    ]
    if result.violation_count > len(result.violations):
        lines.append(
            f"  the {len(result.violations)} largest listed; {result.violation_count - len(result.violations):,} more "
            "not printed (each is counted above)"
        )
    for v in result.violations:
        low, high = v["leaves"]
        lines.append(
            f"  tree {v['tree']}: leaf {low} (lower {result.feature}) has value {v['values'][0]:.6g}, "
            f"leaf {high} (higher) has {v['values'][1]:.6g}; reversal {v['amount']:.6g}"
        )
    return lines


def tail_view(result: TailFit) -> list[str | Table]:
    """`tails`: the losses, the fit above the threshold, about ten rows of the mean-excess table and
    the threshold-stability table.

    Parameters
    ----------
    result : TailFit
        What `tails` returned.

    Returns
    -------
    list of str or rich.table.Table
        What the losses are (single claims or row totals), the threshold (money) with its
        exceedances and shares, the generalised Pareto shape and scale with their standard errors
        and the shape's profile interval, the modified scale beta - xi u; the mean-excess table
        (about ten rows: a step of len // 10 rows, at least 1, plus the rows of the threshold and
        the large-loss cap) with standard errors; the stability table; the notes.
    """
    import math

    from premiumlab.cli.tables import mean_excess_table, stability_table
    from premiumlab.experience.tails import DEFAULT_QUANTILE, INTERVAL_LEVEL, amount_text

    def number(value: float | None, fmt: str = "") -> str:
        if value is None or not math.isfinite(value):
            return "n/a"
        return amount_text(value) if not fmt else format(value, fmt)

    quantile = f" (the {DEFAULT_QUANTILE:.0%} quantile)" if result.default_threshold else ""
    low, high = result.shape_interval
    lines = [
        f"losses: {result.losses} ({result.basis})",
        f"threshold {amount_text(result.threshold)}{quantile}: "
        f"{result.exceedances} exceedances, {result.share_of_losses:.2%} of the losses and "
        f"{result.share_of_amount:.2%} of the amount",
        f"generalised Pareto above it: shape {result.shape:.4f} (standard error {number(result.shape_se, '.4f')}, "
        f"{INTERVAL_LEVEL:.0%} profile interval {number(low, '.4f')} to {number(high, '.4f')}), "
        f"scale {amount_text(result.scale)} (standard error {number(result.scale_se)})",
        f"modified scale beta - shape x threshold: {number(result.modified_scale)} "
        f"(standard error {number(result.modified_scale_se)})",
    ]
    rows = result.mean_excess
    step = max(1, len(rows) // 10)
    shown = [row for i, row in enumerate(rows) if i % step == 0 or i == len(rows) - 1 or row.get("mark")]
    view: list[str | Table] = ["\n".join(lines), mean_excess_table(shown)]
    if result.stability:
        view.append(stability_table(result.stability))
    if result.notes:
        view.append("\n".join(f"note: {n}" for n in result.notes))
    return view


def tail_json(result: TailFit) -> str:
    """`tails --json`: the fit and the mean-excess table on one line (the cautions go to stderr).

    Parameters
    ----------
    result : TailFit
        What `tails` returned.

    Returns
    -------
    str
        `result.to_dict()` without `cautions`, as JSON (non-finite numbers refused).
    """
    fields = result.to_dict()
    del fields["cautions"]
    return json.dumps(fields, allow_nan=False)


def _comparison_and_warnings(result: Comparison) -> list[str | Table]:
    return [*comparison_view(result), *diagnostic_lines(result.diagnostics)]


#: The text and tables of the results a long job (`demo`) reports as it goes.
_RESULT_VIEWS: dict[type, Callable[[Any], list[str | Table]]] = {
    Comparison: _comparison_and_warnings,
    TableResult: fidelity_view,
    ImpactResult: impact_view,
}


def result_view(value: object) -> list[str | Table]:
    """The text and tables of a step's result, for the results `demo` reports.

    Parameters
    ----------
    value : Comparison, TableResult or ImpactResult
        A step's result.

    Returns
    -------
    list of str or rich.table.Table
        As `comparison_view` (then the comparison's warnings, `diagnostic_lines`), `fidelity_view`
        or `impact_view` give them.
    """
    return _RESULT_VIEWS[type(value)](value)


#: What the demo writes that a reader opens first: label and path inside the demo folder.
DEMO_OUTPUTS = (
    ("report", "run/report.html"),
    ("exhibit", "table/exhibit.xlsx"),
    ("rating table", "table/"),
    ("GLM table", "glm_table/"),
    ("priced book", "priced.parquet"),
    ("impact", "impact.json"),
    ("impact figure", "impact.png"),
)


def _seconds_text(seconds: float) -> str:
    minutes, rest = divmod(round(seconds), 60)
    return f"{seconds:.1f} s" if seconds < 60 else f"{minutes} min {rest:02d} s"


def demo_summary_lines(result: DemoResult, steps: Iterable[tuple[str, float]] = ()) -> list[str]:
    """`demo`: what it wrote (with paths), the time of each numbered step and the commands to try next.

    Parameters
    ----------
    result : DemoResult
        What `demo` returned.
    steps : iterable of (str, float)
        Each step's first line and its wall time in seconds, as the command line measured them;
        the numbered `[k/n]` steps are listed.

    Returns
    -------
    list[str]
        A blank line, "the demo wrote, in OUT:" with one line per output that exists in `result.files` (label, path
        under `result.out`), the numbered steps' times and their total, and "next:" with commands
        that work on the demo's folder as they stand.
    """
    out = result.out
    written = set(result.files)
    lines = ["", f"the demo wrote, in {out}:"]
    for label, name in DEMO_OUTPUTS:
        if name in written or (name.endswith("/") and any(f.startswith(name) for f in written)):
            lines.append(f"  {label:<14} {(out / name).as_posix()}{'/' if name.endswith('/') else ''}")
    numbered = [(text.split("]", 1)[0] + "]", seconds) for text, seconds in steps if text.startswith("[")]
    if numbered:
        total = sum(seconds for _, seconds in numbered)
        lines.append(
            "time per step: "
            + ", ".join(f"{k} {_seconds_text(s)}" for k, s in numbered)
            + f"; in all {_seconds_text(total)}"
        )
    o = out.as_posix()
    lines += [
        "next:",
        f"  premiumlab report {o}/run --table {o}/table --current {o}/glm_table --book {o}/book.parquet "
        f"--out {o}/review.html",
        f"  premiumlab select {o}/table --selections YOUR_SELECTIONS.toml --run {o}/run --out {o}/selected",
        f"  premiumlab impact {o}/book.parquet --current {o}/glm_table --proposed {o}/table --cap 0.15",
        f"  premiumlab audit {o}/table --spec {o}/spec.toml --run {o}/run",
    ]
    return lines
