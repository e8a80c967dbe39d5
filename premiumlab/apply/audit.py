"""`audit` and `certify`: a table's checks and promises, and the boosted models' certificates
re-checked from their text files alone."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from premiumlab._core.defaults import PLAUSIBLE_RELATIVITY
from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError
from premiumlab.evaluation.diagnostics import check_bounds
from premiumlab.results import AuditResult, Certificate
from rating_tables.monotone import Monotone

if TYPE_CHECKING:
    from rating_tables import RatingTable, Violation


def audit_table(
    table_dir: str | Path,
    spec_path: str | Path | None,
    run_dir: str | Path | None,
    bounds: tuple[float, float] = PLAUSIBLE_RELATIVITY,
    no_bounds: bool = False,
) -> AuditResult:
    """Every violation as one line: the table's own checks, the spec's promises, the plausibility
    bounds, the run's certificate; and promises kept by flattening, as diagnostics.

    Parameters
    ----------
    table_dir : str or Path
        Rating table folder.
    spec_path : str or Path or None
        Spec whose monotone promises the table must keep.
    run_dir : str or Path or None
        Run whose constrained boosted models are re-certified.
    bounds : (float, float)
        Least and greatest plausible relativity, inclusive, for every factor and two-way table
        (default [0.2, 5], `PLAUSIBLE_RELATIVITY`: a common-practice default, not a rule).
    no_bounds : bool
        Check no bounds.

    Returns
    -------
    AuditResult
        The violations, in the order found; the `flattened_promise` diagnostics
        (`rating_tables.flattened`: adjacent bands or levels of a promised factor with one
        relativity after rounding), which are no violation; the bounds checked (None with
        `no_bounds`); and the draft caution (a clean audit is not an approval).

    Raises
    ------
    InputError
        Bounds that are not 0 < least < greatest, a bad spec, or a folder that is no run.
    """
    import rating_tables
    from premiumlab._core.cautions import DRAFT
    from rating_tables.errors import TableError

    checked = None if no_bounds else check_bounds(bounds)
    limits: dict[str, tuple[float | None, float | None]] | None = None if checked is None else {"*": checked}
    promises = None
    if spec_path is not None:
        from premiumlab.book.spec import load_spec

        spec = load_spec(spec_path)
        promises = {f.name: f.monotone for f in spec.factors if f.monotone != "none"}
    try:
        table = rating_tables.load(table_dir)
    except TableError:  # audit_path reports why, as a violation
        found = [str(v) for v in rating_tables.audit_path(table_dir, promises=promises, bounds=limits)]
        flat = []
    else:
        found = [_with_selections(v, table) for v in rating_tables.audit(table, promises=promises, bounds=limits)]
        flat = rating_tables.flattened(table, promises=promises)
    if run_dir is not None:
        found += _certificate_violations(run_dir)
    return AuditResult(
        table=Path(table_dir),
        violations=tuple(found),
        diagnostics=tuple(
            Diagnostic("flattened_promise", "table", f.remark, f.factor, "; ".join(f.levels)) for f in flat
        ),
        bounds=checked,
        cautions=(DRAFT,),
    )


def _with_selections(violation: Violation, table: RatingTable) -> str:
    """The violation as one line; on a selected table, with the selections made on its factor
    (an indicated table's relativities are the model's, a selected table's may break a promise
    the model kept)."""
    made = [s["rule"] for s in table.selections if s["factor"] == violation.factor]
    return str(violation) + (f" (selections on '{violation.factor}': {', '.join(made)})" if made else "")


def _certificate_violations(run_dir: str | Path) -> list[str]:
    """Re-certify the run's constrained boosted models from their text files alone."""
    from premiumlab._core.jsonio import read_json
    from premiumlab.models.trees.certificate import certify
    from premiumlab.runs.rundir import RunDir, model_name

    run = RunDir(Path(run_dir))
    if not run.models.is_dir():
        raise InputError(f"{run_dir}: not a run directory (no models/)")
    out = []
    for target in run.model_targets("gbm"):
        meta = read_json(run.model_json("gbm", target))
        text = run.model_text("gbm", target).read_text(encoding="utf-8")
        for name, direction in meta.get("monotone", {}).items():
            cert = certify(text, name, int(direction))
            if cert["violation_count"]:
                out.append(
                    f"certificate: {model_name('gbm', target)} breaks the {name} promise in "
                    f"{cert['violation_count']} leaf pairs (largest reversal {cert['max_violation']:.6g})"
                )
    return out


def certify_model_file(model: str | Path, factor: str | int, direction: str) -> Certificate:
    """Certify from a LightGBM text model file alone that its raw score is monotone in `factor`.

    Parameters
    ----------
    model : str or Path
        A LightGBM model in text format.
    factor : str or int
        Feature name, or its 0-based index (an int or a string of digits).
    direction : str
        "increasing" or "decreasing".

    Returns
    -------
    Certificate
        The certificate (`premiumlab.models.trees.certificate.certify`) and the draft caution.
    """
    from premiumlab._core.cautions import DRAFT
    from premiumlab.models.trees.certificate import certify

    if direction not in (Monotone.INCREASING, Monotone.DECREASING):
        raise InputError(f"--direction: '{direction}' must be increasing or decreasing")
    model = Path(model)
    try:
        text = model.read_text(encoding="utf-8")
    except (FileNotFoundError, IsADirectoryError, UnicodeDecodeError):
        raise InputError(f"{model}: not a readable LightGBM text model") from None
    feature = int(factor) if isinstance(factor, str) and factor.isdigit() else factor
    try:
        cert = certify(text, feature, Monotone(direction).sign)
    except InputError as e:
        raise InputError(f"{model}: {e}") from None
    return Certificate(
        model=model,
        feature=cert["feature"],
        feature_index=cert["feature_index"],
        direction=cert["direction"],
        monotone=cert["monotone"],
        trees_checked=cert["trees_checked"],
        trees_splitting_on_feature=cert["trees_splitting_on_feature"],
        leaf_pairs_checked=cert["leaf_pairs_checked"],
        violation_count=cert["violation_count"],
        max_violation=cert["max_violation"],
        trees_with_violations=tuple(cert["trees_with_violations"]),
        violations=tuple(cert["violations"]),
        cautions=(DRAFT,),
    )
