"""Command glue for the filed table: rate a book, measure dislocation, audit (with the certificate)."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError

COLUMN_PREFIX = "column:"


def read_frame(path: str | Path) -> pd.DataFrame:
    """A whole book as a DataFrame (CSV values as strings, so "01" stays "01"), for `impact`."""
    from premiumlab.book.data import iter_book, read_columns
    columns = read_columns(path)
    parts = [chunk for _, chunk in iter_book(path, columns)]
    if not parts:
        raise InputError(f"{path}: the book has no rows")
    return pd.concat(parts, ignore_index=True)


def rate_book(table_dir: str | Path, book: str | Path, out: str | Path, exposure: str | None,
              annual: bool, force: bool = False) -> tuple[str, ...]:
    """Rate `book` with the table into `out` (CSV or Parquet by extension), atomically."""
    import rating_tables
    from premiumlab._core.outputs import atomic_files
    table = rating_tables.load(table_dir)
    out = Path(out)
    with atomic_files([out], force=force, inputs=(book, table_dir)) as tmp:
        return rating_tables.rate_file(table, book, tmp / out.name, exposure_column=None if annual else exposure,
                                       annual=annual)


def column_premiums(source: str, frame: pd.DataFrame) -> np.ndarray:
    """Premiums per policy from the book column named by `source` (`column:NAME`), all > 0."""
    name = source[len(COLUMN_PREFIX):]
    if name not in frame.columns:
        raise InputError(f"{source}: the book has no column '{name}'")
    values = pd.to_numeric(frame[name], errors="coerce").to_numpy(float)
    bad = np.flatnonzero(~(np.isfinite(values) & (values > 0)))
    if bad.size:
        raise InputError(f"column '{name}': {bad.size} rows with a missing or non-positive premium "
                         f"(rows {', '.join(map(str, bad[:5]))})")
    return values


def gross_premiums(table, frame: pd.DataFrame, exposure: str | None, annual: bool) -> np.ndarray:
    """Gross premiums per policy rated with a loaded table."""
    import rating_tables
    return rating_tables.rate(table, frame, None if annual else exposure, annual=annual)["gross_premium"].to_numpy()


def dislocation(current: str, proposed: str, book: str | Path, exposure: str | None, annual: bool,
                cap: float | None, thresholds: tuple[float, ...]) -> dict:
    """Per-policy change from `current` to `proposed` premiums (tables or `column:NAME`); each
    table is loaded once."""
    import rating_tables
    if proposed.startswith(COLUMN_PREFIX):
        raise InputError(f"--proposed {proposed}: the proposed premium must come from a table folder")
    frame = read_frame(book)
    table = rating_tables.load(proposed)
    if current.startswith(COLUMN_PREFIX):
        tables, now = [table], column_premiums(current, frame)
    else:
        current_table = rating_tables.load(current)
        tables, now = [table, current_table], gross_premiums(current_table, frame, exposure, annual)
    groups = impact_groups(frame, tables)
    result = rating_tables.impact(now, gross_premiums(table, frame, exposure, annual), groups,
                                  list(groups.columns), thresholds=thresholds, cap=cap)
    result["cautions"] = list(table.cautions)
    return result


def impact_groups(frame: pd.DataFrame, tables: list) -> pd.DataFrame:
    """The factor columns the impact is broken down by: every main factor of the tables (the
    proposed first, so a factor the proposed table drops is still shown), a numeric factor cut into
    the bands of the first table that has it, a categorical factor as it is."""
    from rating_tables.table import NumericFactor, band_index
    columns = {}
    for table in tables:
        for f in table.main_factors:
            if f.name in columns:
                continue
            if isinstance(f, NumericFactor):
                values = pd.to_numeric(frame[f.name], errors="coerce").to_numpy(float)
                columns[f.name] = pd.Categorical.from_codes(band_index(f.lower, values), categories=f.labels(),
                                                            ordered=True)
            else:
                columns[f.name] = frame[f.name].to_numpy()
    return pd.DataFrame(columns)


def write_impact(result: dict, out: Path | None, figure: Path | None, force: bool,
                 inputs: tuple[str | Path, ...]) -> None:
    """Write the impact summary as JSON to `out` and its figure (`figures.plot_impact`) to `figure`,
    both or neither."""
    from premiumlab.evaluation.figures import plot_impact
    from premiumlab._core.jsonio import write_json
    from premiumlab._core.outputs import atomic_files
    targets = [t for t in (out, figure) if t is not None]
    if not targets:
        return
    if figure is not None and figure.suffix.lower() != ".png":
        raise InputError(f"{figure}: the figure must be a .png file")
    if out is not None and figure is not None and out.name == figure.name:
        raise InputError(f"{figure}: give the figure and the JSON summary different names")
    with atomic_files(targets, force=force, inputs=inputs) as tmp:
        if out is not None:
            write_json(tmp / out.name, result)
        if figure is not None:
            plot_impact(result, tmp / figure.name)


def parse_thresholds(text: str) -> tuple[float, ...]:
    """'0.05,0.1' -> (0.05, 0.1): the increases whose shares `impact` reports."""
    try:
        values = tuple(float(t) for t in text.split(",") if t.strip())
    except ValueError:
        raise InputError(f"--thresholds: '{text}' must be numbers separated by commas, e.g. 0.05,0.10") from None
    if not values or not all(np.isfinite(values)):
        raise InputError(f"--thresholds: '{text}' must name at least one finite number")
    return values


def impact_lines(result: dict) -> list[str]:
    """A compact text summary of a dislocation result."""
    lines = [f"policies {result['policies']}: current total {result['total_current']:,.2f}, proposed "
             f"{result['total_proposed']:,.2f}, overall change {result['overall_change']:+.2%}",
             "change band          policies   share"]
    for b in result["bands"]:
        lines.append(f"  {b['band']:<18} {b['count']:>8}  {b['count_share']:>6.1%}")
    for t in result["above_thresholds"]:
        lines.append(f"increase above {t['threshold']:.0%}: {t['count']} policies ({t['count_share']:.1%})")
    if result["largest_increases"]:
        top = result["largest_increases"][0]
        lines.append(f"largest increase: row {top['row']}, {top['current']:,.2f} -> {top['proposed']:,.2f} "
                     f"({top['change']:+.1%})")
    if result["capping"]:
        c = result["capping"]
        lines.append("capping: " + ", ".join(f"{k} {v:.6g}" if isinstance(v, float) else f"{k} {v}"
                                             for k, v in c.items() if not isinstance(v, (list, dict))))
    return lines


def audit_table(table_dir: str | Path, spec_path: str | Path | None, run_dir: str | Path | None) -> list[str]:
    """Every violation as one line: the table's own checks, the spec's promises, the run's certificate."""
    import rating_tables
    promises = None
    if spec_path is not None:
        from premiumlab.book.spec import load_spec
        spec = load_spec(spec_path)
        promises = {f.name: f.monotone for f in spec.factors if f.monotone != "none"}
    found = [str(v) for v in rating_tables.audit_path(table_dir, promises=promises)]
    if run_dir is not None:
        found += certificate_violations(run_dir)
    return found


def certificate_violations(run_dir: str | Path) -> list[str]:
    """Re-certify the run's constrained boosted models from their text files alone."""
    from premiumlab.models.trees.certificate import certify
    from premiumlab._core.jsonio import read_json
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
                out.append(f"certificate: {model_name('gbm', target)} breaks the {name} promise in "
                           f"{cert['violation_count']} leaf pairs (largest reversal {cert['max_violation']:.6g})")
    return out


def fidelity_lines(summary: dict) -> list[str]:
    """A compact text summary of `tabulate`: rate level, fidelity and retention."""
    level, fid = summary["rate_level"], summary["fidelity"]
    lines = [f"wrote {summary['table']}: base rate {level['base_rate']:.4f}, total pure premium "
             f"{level['total_pure_premium']:,.2f} ({level['target']['basis']}), rounding off-balance "
             f"{level['rounding_off_balance']:+.4%}"]
    if "indicated_overall_change" in level:
        lines.append(f"indicated overall change against the current premium: "
                     f"{level['indicated_overall_change']:+.2%}")
    lines.append(f"fidelity on the {fid['rows']} ({fid['policies']} rows, Tweedie power "
                 f"{fid['tweedie_power']:.2f}):")
    for name, s in fid["models"].items():
        lines.append(f"  {name:<6} mean deviance {s['mean_deviance']:.6g}  Gini {s['gini']:.4f}")
    r = fid["retention"]
    if r.get("gini_table_over_gbm") is not None:
        lines.append(f"  retention G_table/G_gbm = {r['gini_table_over_gbm']:.3f}")
    if r.get("gbm_lift_over_glm_kept") is not None:
        lines.append(f"  retention (G_table - G_glm)/(G_gbm - G_glm) = {r['gbm_lift_over_glm_kept']:.3f}")
    return lines
