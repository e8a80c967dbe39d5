"""The Python API: one function per command, named and called as on the command line.

What the command line takes as arguments is positional here, every option keyword-only with the
command line's default, so ``premiumlab.fit("book.parquet", spec="spec.toml", out="run")`` is
``premiumlab fit book.parquet --spec spec.toml --out run``. Each function returns a frozen dataclass
with ``to_dict()`` (`premiumlab.results`, `ValidationReport`, `Run`); none prints. Bad input raises
`premiumlab._core.errors.InputError` (or `rating_tables.TableError`) with one line naming the file,
column, row or key.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from premiumlab._core.defaults import PLAUSIBLE_RELATIVITY
from premiumlab.results import (
    AuditResult,
    Certificate,
    Comparison,
    DemoResult,
    ImpactResult,
    RateResult,
    ReportResult,
    SelectResult,
    SimulationResult,
    TableResult,
    TailFit,
)

if TYPE_CHECKING:
    from premiumlab._core.progress import Progress
    from premiumlab.book.validate import ValidationReport
    from premiumlab.runs.rundir import Run

__all__ = [
    "audit",
    "certify",
    "compare",
    "demo",
    "fit",
    "impact",
    "rate",
    "report",
    "simulate",
    "tabulate",
    "tails",
    "validate",
]


def simulate(
    scenario: str | Path, *, out: str | Path, policies: int | None = None, seed: int | None = None, force: bool = False
) -> SimulationResult:
    """Write a synthetic book from an invented scenario, with truth.json beside it.

    Parameters
    ----------
    scenario : str or Path
        Scenario TOML file.
    out : str or Path
        Book to write (.csv or .parquet); truth.json (the true effects) goes in the same folder.
    policies : int or None
        Number of policies (None: the scenario's).
    seed : int or None
        Random seed (None: the scenario's).
    force : bool
        Replace existing outputs.

    Returns
    -------
    SimulationResult
        The paths written and the book's policies, rows, claims, exposure and claim amount.
    """
    from premiumlab._core.outputs import atomic_files
    from premiumlab.simulation.simulator import TRUTH_FILE
    from premiumlab.simulation.simulator import simulate as simulate_book

    out = Path(out)
    truth = out.parent / TRUTH_FILE
    with atomic_files([out, truth], force=force, inputs=(scenario,)) as tmp:
        summary = simulate_book(scenario, tmp / out.name, policies=policies, seed=seed)
    return SimulationResult(
        book=out,
        truth=truth,
        policies=summary["policies"],
        rows=summary["rows"],
        claims=summary["claims"],
        large_claims=summary["large_claims"],
        exposure=summary["exposure"],
        claim_amount=summary["claim_amount"],
    )


def validate(book: str | Path, *, spec: str | Path, cluster: str | None = None) -> ValidationReport:
    """Check a book against a spec: every finding, and a profile when the book has no errors.

    Parameters
    ----------
    book : str or Path
        Book (.csv, .parquet or a folder of parts).
    spec : str or Path
        Pricing spec TOML.
    cluster : str or None
        Check the slices of a Parquet book on Dask: local:N or a scheduler address.

    Returns
    -------
    ValidationReport
        Findings (`.errors` the errors among them) and the profile per level or band (exposure,
        claims, amount, frequency = claims / exposure, severity = amount / claims, loss cost =
        amount / exposure), None when the book has errors.
    """
    from premiumlab.book.validate import validate_book

    return validate_book(book, spec, cluster=cluster)


def fit(
    book: str | Path,
    *,
    spec: str | Path,
    out: str | Path,
    models: str = "glm,gbm",
    cluster: str | None = None,
    force: bool = False,
    progress: Progress | None = None,
) -> Run:
    """Fit GLM baselines and boosted models on the training part; write the run directory.

    Parameters
    ----------
    book : str or Path
        Book (.csv, .parquet or a folder of parts).
    spec : str or Path
        Pricing spec TOML.
    out : str or Path
        Run directory to write.
    models : str
        Model kinds, comma separated: glm, gbm.
    cluster : str or None
        Run the GLMs' passes over the rows and the boosted-model search on Dask: local:N or a
        scheduler address.
    force : bool
        Replace an existing run directory.
    progress : Progress or None
        Told the experience step's totals (None: nothing is said).

    Returns
    -------
    Run
        The run directory read back (as `open_run` gives it).
    """
    from premiumlab.runs.fit import fit as fit_run
    from premiumlab.runs.rundir import open_run

    return open_run(fit_run(book, spec, out, models=models, force=force, progress=progress, cluster=cluster))


def compare(
    run: str | Path,
    *,
    bounds: tuple[float, float] = PLAUSIBLE_RELATIVITY,
    out: str | Path | None = None,
    force: bool = False,
) -> Comparison:
    """Compare GLM and GBM on the holdout; write comparison.json and figures/ (in the run, or `out`).

    Parameters
    ----------
    run : str or Path
        Run directory written by `fit`.
    bounds : (float, float)
        Plausibility bounds of the GLM relativities, (least, greatest); default (0.2, 5), a
        common-practice default.
    out : str or Path or None
        A new folder for comparison.json and figures/ (None: RUN/comparison.json and RUN/figures/).
    force : bool
        Replace existing outputs (the run's earlier comparison, or `out`).

    Returns
    -------
    Comparison
        Holdout metrics against the null model, paired bootstrap differences, lift, double lift,
        actual vs expected, and the diagnostics (models worse than the null model or with absurd
        figures, GLM relativities outside the bounds, and the run's own).
    """
    from premiumlab.review.comparison import compare as compare_run

    return Comparison.from_summary(compare_run(run, bounds=bounds, out=out, force=force))


def tabulate(
    run: str | Path, *, out: str | Path, model: str = "auto", book: str | Path | None = None, force: bool = False
) -> TableResult:
    """Distil a run's model into a banded multiplicative rating table, with its fidelity.

    Parameters
    ----------
    run : str or Path
        Run directory written by `fit`.
    out : str or Path
        Rating table folder to write.
    model : str
        The source: auto (the candidate with the lowest holdout mean Tweedie deviance), gbm (the
        boosted Tweedie model), gbm_freq_sev (boosted frequency x severity), glm (the Tweedie
        GLM's relativities) or glm_freq_sev (the frequency x severity GLMs' relativities).
    book : str or Path or None
        The run's book, if it has moved.
    force : bool
        Replace an existing table folder.

    Returns
    -------
    TableResult
        The folder, the source and why, the fidelity (deviance, Gini, retention), the attenuation,
        the level -> group map, the diagnostics, the rate level and the cautions.
    """
    from premiumlab.tabulation.from_run import tabulate as tabulate_run

    return TableResult.from_summary(tabulate_run(run, out, model=model, force=force, book=book))


def select(
    table: str | Path,
    *,
    selections: str | Path,
    run: str | Path,
    out: str | Path,
    current: str | Path | None = None,
    book: str | Path | None = None,
    force: bool = False,
) -> SelectResult:
    """Apply an actuary's selections to an indicated table: rebanded, credibility-weighted, smoothed,
    capped or overridden factors, each with its reason and off-balance, the base rate rebalanced.

    Parameters
    ----------
    table : str or Path
        The indicated table folder (`tabulate`).
    selections : str or Path
        The selections file (TOML, docs/commands.md).
    run : str or Path
        The run the table was made from (training rows for the off-balances, holdout for fidelity).
    out : str or Path
        The selected table folder to write.
    current : str or Path or None
        The table in force: needed to cap changes, keep current relativities or weight towards them.
    book : str or Path or None
        The run's book, if it has moved.
    force : bool
        Replace an existing table folder.

    Returns
    -------
    SelectResult
        The folder, its id, every selection with its off-balance, the base-rate correction, the
        audit of the spec's promises, the fidelity beside the indicated table's and the cautions.
    """
    from premiumlab.tabulation.select import select as select_table

    return SelectResult.from_summary(select_table(table, selections, run, out, current=current, force=force, book=book))


def audit(
    table: str | Path,
    *,
    spec: str | Path | None = None,
    run: str | Path | None = None,
    bounds: tuple[float, float] = PLAUSIBLE_RELATIVITY,
    no_bounds: bool = False,
) -> AuditResult:
    """Check promised directions, bands, relativities within plausibility bounds and base levels.

    Parameters
    ----------
    table : str or Path
        Rating table folder.
    spec : str or Path or None
        Spec whose monotone promises to check.
    run : str or Path or None
        Run whose boosted models to re-certify.
    bounds : (float, float)
        Least and greatest plausible relativity (default (0.2, 5), a common-practice default).
    no_bounds : bool
        Check no bounds.

    Returns
    -------
    AuditResult
        Every violation as one line (none: the checks passed, which is not an approval), and the
        promises kept by flattening as diagnostics (warnings, not violations).
    """
    from premiumlab.apply.audit import audit_table

    return audit_table(table, spec, run, bounds=bounds, no_bounds=no_bounds)


def rate(
    table: str | Path,
    book: str | Path,
    *,
    out: str | Path,
    exposure: str | None = None,
    annual: bool = False,
    strict_levels: bool = False,
    force: bool = False,
    cluster: str | None = None,
) -> RateResult:
    """Rate policies with a table: pure and gross premium and the build-up columns.

    A missing value takes the factor's missing row; a level the table does not list takes the
    factor's fallback level, else its base level (docs/rating-table.md, Rating algorithm).

    Parameters
    ----------
    table : str or Path
        Rating table folder.
    book : str or Path
        Book to rate (.csv, .parquet or a folder of parts; with `cluster`, a folder of Parquet parts).
    out : str or Path
        Priced file to write (.csv or .parquet); with `cluster`, a folder of Parquet parts, one
        per part of the book, of the same names.
    exposure : str or None
        The book's exposure column (years); the premium is the full-term premium x exposure.
        None: the column the table remembers (`book_columns`), else `exposure`.
    annual : bool
        Price one full term per policy.
    strict_levels : bool
        Refuse a level the table does not list, even where a fallback or base level exists.
    force : bool
        Replace an existing priced file.
    cluster : str or None
        Rate the book's parts on a Dask cluster (local:N or a scheduler address) whose workers
        share this machine's file system; None: in this process.

    Returns
    -------
    RateResult
        The priced file, the rows priced, the per-factor counts of rows rated at a missing row or
        at a fallback level, and the table's cautions.
    """
    from premiumlab.apply.rate import rate_book

    return rate_book(table, book, out, exposure, annual, force=force, strict_levels=strict_levels, cluster=cluster)


def impact(
    book: str | Path,
    *,
    current: str | Path,
    proposed: str | Path,
    cap: float | None = None,
    exposure: str | None = None,
    policy_id: str | None = None,
    period: str | None = None,
    annual: bool = False,
    thresholds: str | Sequence[float] = "0.05,0.10,0.25",
    out: str | Path | None = None,
    figure: str | Path | None = None,
    force: bool = False,
    cluster: str | None = None,
) -> ImpactResult:
    """Premium dislocation from the current to the proposed rates, optionally capped.

    Parameters
    ----------
    book : str or Path
        Book of policies (no claim columns needed).
    current : str or Path
        Current table folder, or column:NAME for a premium column of the book.
    proposed : str or Path
        Proposed table folder.
    cap : float or None
        Cap each policy's change at +-cap (0.15 = 15 %).
    exposure : str or None
        The book's exposure column (years). None: the proposed table's remembered column, else
        `exposure`.
    policy_id : str or None
        The book's policy id column, which identifies the rows listed and counts the policies.
        None: the proposed table's remembered column, if any.
    period : str or None
        The book's period column, shown beside the policy id. None: the table's, if any.
    annual : bool
        Compare one full term per policy (both sides rated by tables; refused with a current
        premium column).
    thresholds : str or sequence of float
        Increases to count, comma separated or as numbers (0.1 = 10 %).
    out : str or Path or None
        Also write the summary as JSON.
    figure : str or Path or None
        Also write the dislocation figure (.png).
    force : bool
        Replace existing outputs.
    cluster : str or None
        Rate a Parquet dataset's parts on a Dask cluster (local:N or a scheduler address); the
        summary is computed here on the premiums they return, equal to the one-process impact.

    Returns
    -------
    ImpactResult
        Totals, overall change = total proposed / total current - 1, change bands, shares above
        the thresholds, change by factor level, the largest increases and the capping figures.
    """
    from premiumlab.apply.impact import dislocation, parse_thresholds, write_impact

    result = dislocation(
        str(current),
        str(proposed),
        book,
        exposure,
        annual,
        cap,
        parse_thresholds(thresholds),
        policy_id=policy_id,
        period=period,
        cluster=cluster,
    )
    write_impact(
        result,
        None if out is None else Path(out),
        None if figure is None else Path(figure),
        force,
        inputs=(book, proposed, current),
    )
    return result


def certify(model: str | Path, *, factor: str | int, direction: str) -> Certificate:
    """Certify from the model file alone that the raw score is monotone in a factor.

    Parameters
    ----------
    model : str or Path
        A LightGBM model in text format.
    factor : str or int
        Feature name (or 0-based index) promised monotone.
    direction : str
        increasing or decreasing.

    Returns
    -------
    Certificate
        Trees and leaf pairs checked and every violation (none: the score is monotone for every
        possible input).
    """
    from premiumlab.apply.audit import certify_model_file

    return certify_model_file(model, factor, direction)


def tails(
    book: str | Path,
    *,
    spec: str | Path,
    threshold: float | None = None,
    figure: str | Path | None = None,
    force: bool = False,
) -> TailFit:
    """Large-loss threshold aid: mean excess by threshold and a generalised Pareto fit above U.

    Parameters
    ----------
    book : str or Path
        Book (.csv, .parquet or a folder of parts).
    spec : str or Path
        Pricing spec TOML (its claims file, if any, gives single claims).
    threshold : float or None
        Threshold U (money); None for the 90th percentile of the losses.
    figure : str or Path or None
        Also write the mean-excess and tail figure (.png).
    force : bool
        Replace an existing figure.

    Returns
    -------
    TailFit
        Shape xi and scale beta of the excesses over U, exceedances, and the mean-excess table
        e(u) = mean of (x - u) over the losses x > u.
    """
    from premiumlab.experience.tails import threshold_aid

    return threshold_aid(book, spec, threshold, figure=figure, force=force)


def report(
    run: str | Path,
    *,
    table: str | Path | None = None,
    current: str | Path | None = None,
    book: str | Path | None = None,
    tails: str | Path | None = None,
    out: str | Path | None = None,
    force: bool = False,
) -> ReportResult:
    """Write one self-contained HTML report reviewing a run and its rating table.

    Parameters
    ----------
    run : str or Path
        Run directory written by `fit` (run `compare` first for the holdout section).
    table : str or Path or None
        A rating table made from the run: its factors, fidelity, audit and bands in the charts.
    current : str or Path or None
        The current rating table: current relativities and the change per band or level.
    book : str or Path or None
        A book for the impact section.
    tails : str or Path or None
        The JSON object `tails --json` printed, saved to a file: the large-loss tail section.
    out : str or Path or None
        HTML file to write; None for RUN/report.html.
    force : bool
        Replace an existing file.

    Returns
    -------
    ReportResult
        The report's path.
    """
    from premiumlab.review.report import write_report

    return ReportResult(report=write_report(run, table, current=current, book=book, tails=tails, out=out, force=force))


def demo(
    *,
    out: str | Path = "demo-output",
    policies: int | None = None,
    cluster: str | None = None,
    force: bool = False,
    progress: Progress | None = None,
) -> DemoResult:
    """Run the whole job on the built-in motor scenario.

    Parameters
    ----------
    out : str or Path
        Folder for the demo outputs.
    policies : int or None
        Policies in the demo book (None: the scenario's).
    cluster : str or None
        Run the GLMs' passes over the rows and the boosted-model search on Dask: local:N or a
        scheduler address.
    force : bool
        Replace an existing folder.
    progress : Progress or None
        Told each step and the comparison, table and impact results (None: nothing is said).

    Returns
    -------
    DemoResult
        The folder, the files written in it and the table's cautions.
    """
    from premiumlab.demo_job import run_demo

    return run_demo(out, policies=policies, force=force, progress=progress, cluster=cluster)
