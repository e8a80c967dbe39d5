"""The numbers of the report, read from a run, its comparison and its tables into plain dicts.

Everything here is a pure reading or computation (no HTML, no figures): `report_context` gathers
what `premiumlab.review.report` renders. Each section is a dict; a section whose inputs the run or
table does not have says so in `absent` (words), so that the report states plainly what is missing.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import read_json
from premiumlab.runs.diagnostics import merge_diagnostics, model_warnings
from premiumlab.runs.rundir import Run, model_name

#: The file of a table folder where `tabulate` writes its fidelity and diagnostics.
FIDELITY_FILE = "fidelity.json"
#: Two-sided normal quantile of the relativities' 95 % confidence intervals.
Z_95 = 1.959963984540054
#: Policies in the exposure-weighted sample of the boosted effect curves.
EFFECT_SAMPLE = 400
#: The targets in the report's order, in words.
TARGET_WORDS = {"frequency": "frequency", "severity": "severity", "pure_premium": "pure premium"}
#: Holdout metrics shown per model: key, heading, format.
METRIC_COLUMNS = (
    ("mean_deviance", "mean deviance", ".6g"),
    ("d2", "D^2", ".4f"),
    ("gini", "Gini", ".4f"),
    ("balance", "expected / actual", ".4f"),
    ("deviance_to_null", "deviance / null model's", ".4g"),
)


def _number(value: Any, fmt: str = ".4g") -> str:
    """A figure as text in `fmt`; "n/a" for None, NaN or infinity (a figure never shown as nan)."""
    if value is None:
        return "n/a"
    value = float(value)
    return format(value, fmt) if math.isfinite(value) else "n/a"


@dataclass
class FactorView:
    """One rating factor as the report shows it: its levels in order, the base, training exposure,
    claims and losses per level, and the relativity of each series (`actual`, `glm`, `gbm`,
    `table`, `current`; NaN where a series has no value) relative to the base level."""

    name: str
    labels: list[str]
    base: str
    exposure: np.ndarray
    claims: np.ndarray
    losses: np.ndarray | None
    series: dict[str, np.ndarray] = field(default_factory=dict)


def _relative(values: np.ndarray, labels: list[str], base: str) -> np.ndarray:
    """`values` divided by the base level's value (NaN when the base has none or 0)."""
    at = values[labels.index(base)] if base in labels else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        return values / at if np.isfinite(at) and at > 0 else np.full(values.shape, np.nan)


def one_way(
    codes: np.ndarray, n_levels: int, exposure: np.ndarray, claims: np.ndarray, losses: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Exposure, claim count and loss per level: sums over the rows with that level code.

    Parameters
    ----------
    codes : np.ndarray
        Level code (0 .. n_levels-1) of each row; -1 for a row without a level (left out).
    n_levels : int
        Number of levels.
    exposure, claims : np.ndarray
        Exposure (years) and claim count of each row.
    losses : np.ndarray or None
        Claim amount of each row, None without amounts.

    Returns
    -------
    (np.ndarray, np.ndarray, np.ndarray or None)
        Per level: sum exposure, sum claims, sum losses (None without amounts).
    """
    keep = codes >= 0
    sums = [np.bincount(codes[keep], weights=v[keep], minlength=n_levels) for v in (exposure, claims)]
    lost = None if losses is None else np.bincount(codes[keep], weights=losses[keep], minlength=n_levels)
    return sums[0], sums[1], lost


def _observed_relativity(
    exposure: np.ndarray, claims: np.ndarray, losses: np.ndarray | None, labels: list[str], base: str
) -> np.ndarray:
    """The observed one-way relativity per level: its loss cost (losses / exposure; claim frequency,
    claims / exposure, without amounts) over the base level's; NaN for a level without exposure."""
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = (losses if losses is not None else claims) / np.where(exposure > 0, exposure, np.nan)
    return _relative(rate, labels, base)


def glm_rows(model: dict, exposure: dict[str, np.ndarray], labels: dict[str, list[str]]) -> list[dict]:
    """The relativities of one GLM with their 95 % intervals, base levels at 1.

    relativity = exp(estimate); interval = exp(estimate -+ Z_95 x std_error) (a Wald interval on the
    log scale; none without a standard error). Every level of `labels` is listed, the base and the
    levels the GLM did not estimate at 1.

    Parameters
    ----------
    model : dict
        A RUN/models/glm_*.json (coefficients, relativities, base_levels).
    exposure : dict of str to np.ndarray
        Training exposure per level of each factor, in `labels` order.
    labels : dict of str to list of str
        The levels of each factor (levels.json).

    Returns
    -------
    list of dict
        One row per factor and level: factor, level, relativity, lower, upper, exposure, base (bool),
        estimated (bool).
    """
    coefficients = {c["term"]: c for c in model["coefficients"]}
    rows = []
    for factor, rel in model["relativities"].items():
        if factor not in labels:
            continue
        for k, level in enumerate(labels[factor]):
            c = coefficients.get(f"{factor}[{level}]")
            se = None if c is None else c.get("std_error")
            estimate = None if c is None else c["estimate"]
            lower = upper = None
            if estimate is not None and se is not None:
                lower, upper = math.exp(estimate - Z_95 * se), math.exp(estimate + Z_95 * se)
            rows.append(
                {
                    "factor": factor,
                    "level": level,
                    "relativity": float(rel.get(level, 1.0)),
                    "lower": lower,
                    "upper": upper,
                    "exposure": float(exposure[factor][k]),
                    "base": level == model["base_levels"].get(factor),
                    "estimated": c is not None,
                }
            )
    return rows


def factor_tests(model: dict) -> dict:
    """The whole-factor Wald test of each factor of one GLM, from its JSON alone.

    For factor f with non-base coefficients b_f and their covariance V_f (`factor_covariance`):
    chi-square = b_f' V_f^-1 b_f on df = the number of those coefficients; p = P(chi2(df) > chi-square).
    A small p says the factor as a whole is needed. Levels without a standard error (no claims)
    are left out of the test and counted.

    Parameters
    ----------
    model : dict
        A RUN/models/glm_*.json.

    Returns
    -------
    dict
        `rows`: per factor [factor, chi-square, df, p-value, levels left out], as text;
        `absent`: words when the JSON has no `factor_covariance` (a run fitted before it), else None.
    """
    from premiumlab.models.glm.wald import factor_wald_test

    blocks = model.get("factor_covariance")
    if blocks is None:
        return {
            "absent": "this model file has no factor_covariance (fitted by an older premiumlab): fit again.",
            "rows": [],
        }
    estimate = {c["term"]: c["estimate"] for c in model["coefficients"]}
    rows = []
    for name in model["relativities"]:
        block = blocks.get(name)
        if block is None:
            rows.append([name, "n/a", "0", "n/a", "every level (none has a standard error)"])
            continue
        try:
            test = factor_wald_test([estimate[t] for t in block["terms"]], block["matrix"])
        except InputError as error:
            rows.append([name, "n/a", str(len(block["terms"])), "n/a", str(error)])
            continue
        left_out = sum(1 for level in model["relativities"][name] if level != model["base_levels"].get(name)) - test.df
        rows.append(
            [name, _number(test.chi_square, ",.2f"), str(test.df), _p_value(test.p_value), str(max(left_out, 0))]
        )
    return {"absent": None, "rows": rows}


def _p_value(p: float) -> str:
    """A p-value as text: four decimals, or "< 0.0001"."""
    return "< 0.0001" if p < 1e-4 else _number(p, ".4f")


def spec_exposure_unit(run: Run) -> str:
    """The run's exposure unit in the plural for table headers.

    Parameters
    ----------
    run : Run
        The run (its spec's `[table] exposure_unit`, "policy-year" by default).

    Returns
    -------
    str
        The unit with an "s" added unless it ends in one ("policy-years").
    """
    unit = run.spec.table.exposure_unit
    return unit if unit.endswith("s") else unit + "s"


def _spec_hash(spec: dict) -> str:
    """sha256 of the run's spec as canonical JSON (keys sorted, no spaces): the same spec, the same hash."""
    text = json.dumps(spec, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _diagnostics_rows(
    run: Run, comparison: dict | None, fidelity: dict | None, table_name: str | None
) -> tuple[list[dict], list[str]]:
    """Every diagnostic of the run, its GLMs, its comparison and the table, once each with the file
    that first lists it; and the files looked at."""
    sources: list[tuple[str, list]] = [
        ("run.json", run.manifest.get("diagnostics", [])),
        ("models/glm_*.json", model_warnings(run.files)),
    ]
    if comparison is not None:
        sources.append(("comparison.json", comparison.get("diagnostics", [])))
    if fidelity is not None:
        sources.append((f"{table_name}/{FIDELITY_FILE}", fidelity.get("diagnostics", [])))
    first: dict[Diagnostic, str] = {}
    for name, found in sources:
        for d in merge_diagnostics(found):
            first.setdefault(d, name)
    rows = [
        {"kind": d.kind, "model": d.model, "factor": d.factor or "", "level": d.level or "", "message": d.message}
        | {"file": where}
        for d, where in first.items()
    ]
    return rows, [name for name, _ in sources]


#: Units added to the shown header of a factor file's column (the file keeps its own names).
TABLE_COLUMN_UNITS = {"exposure": "exposure units", "change": "%"}


def _table_rows(frame: pd.DataFrame) -> dict:
    """A factor file as a table to show: its columns as written, with the unit of the exposure and
    change columns in brackets (an added column shows up as it is), and its rows as text; numbers
    of the relativity columns to three decimals."""
    shown = frame.copy()
    for column in shown.columns:
        if pd.api.types.is_float_dtype(shown[column]):
            digits = ".3f" if column in ("relativity", "indicated", "current", "credibility") else ".6g"
            digits = {"exposure": ",.1f", "change": "+.1%", "lower": "g", "upper": "g"}.get(column, digits)
            shown[column] = [
                "" if pd.isna(v) else "open" if column in ("lower", "upper") and math.isinf(v) else _number(v, digits)
                for v in shown[column]
            ]
        else:
            shown[column] = shown[column].map(lambda v: "" if pd.isna(v) else str(v))
    columns = [f"{c} ({TABLE_COLUMN_UNITS[c]})" if c in TABLE_COLUMN_UNITS else str(c) for c in shown.columns]
    return {"columns": columns, "rows": shown.to_numpy(dtype=object).tolist()}


def _lift_words(differences: dict, name: str) -> dict | None:
    """One comparison of comparison.json's `differences` in numbers: the deviance reduction and
    the Gini gain with their bootstrap 95 % intervals, and whether the deviance interval lies above 0 (`beats_glm`)."""
    d = differences.get(name)
    if d is None:
        return None
    dev, gin = d["deviance_reduction"], d["gini_gain"]
    return {
        "name": name,
        "deviance": _number(dev["estimate"], ".5g"),
        "deviance_interval": f"[{_number(dev['lower'], '.5g')}, {_number(dev['upper'], '.5g')}]",
        "gini": _number(gin["estimate"], ".4f"),
        "gini_interval": f"[{_number(gin['lower'], '.4f')}, {_number(gin['upper'], '.4f')}]",
        "beats_glm": dev["lower"] is not None and dev["lower"] > 0,
    }


#: The keys of comparison.json the report reads.
COMPARISON_KEYS = ("metrics", "differences", "holdout_rows", "lift", "double_lift", "actual_vs_expected")
#: The keys of a GLM model JSON the report reads, and of each of its coefficients.
GLM_KEYS = ("family", "deviance", "df_resid", "null_deviance", "aic", "coefficients", "relativities")
COEFFICIENT_KEYS = ("term", "estimate")


def _require(
    document: dict, keys: tuple[str, ...], path: Path, advice: str = "the run folder was edited: fit or compare again"
) -> dict:
    """`document` when it holds every key of `keys`; else the one-line refusal of a hand-edited file."""
    missing = [k for k in keys if not isinstance(document, dict) or k not in document]
    if missing:
        raise InputError(f"{path}: key '{missing[0]}' is missing; {advice}")
    return document


def _glm_model(run: Run, target: str) -> dict:
    """A GLM model JSON of the run, with the keys the report reads checked (coefficients too)."""
    path = run.files.model_json("glm", target)
    model = _require(run.model_json("glm", target), GLM_KEYS, path)
    for i, c in enumerate(model["coefficients"]):
        missing = [k for k in COEFFICIENT_KEYS if not isinstance(c, dict) or k not in c]
        if missing:
            raise InputError(f"{path}: coefficients[{i}] has no '{missing[0]}'; the run folder was edited: fit again")
    return model


#: The format of a selected table's fidelity.json (`premiumlab select`).
SELECTED_FORMAT = "premiumlab.selected-fidelity"


def _selections_section(table: Any, selected: dict | None) -> dict:
    """The selections of a selected table: each rule with what it changed, its off-balance and
    reason; the base-rate correction; the audit of the promises; the holdout fidelity of the
    selected and the indicated table."""
    if table is None:
        return {"absent": "a rating table (`report --table TABLE`)."}
    if table.stage != "selected" or selected is None:
        return {"note": "The table is indicated: its relativities are the model's, rounded; no selections were made."}
    rows = [
        [
            s["factor"],
            s["rule"],
            ", ".join(s["applies_to"][:6])
            + (f" and {len(s['applies_to']) - 6} more" if len(s["applies_to"]) > 6 else ""),
            f"{s['off_balance']:+.3%}",
            s["reason"],
        ]
        for s in table.selections
    ]
    level, fid = selected["rate_level"], selected["fidelity"]
    return {
        "header": ["factor", "rule", "bands or levels changed", "off-balance (% of pure premium)", "reason"],
        "rows": rows,
        "off_balance": f"{level['off_balance']:+.3%}",
        "rounding": f"{level['rounding_off_balance']:+.3%}",
        "base_rate": f"{level['indicated_base_rate']:,.4f} -> {level['base_rate']:,.4f}",
        "indicated_id": selected["indicated_table_id"],
        "current_id": selected["current_table_id"],
        "violations": [
            f"{v['violation']} (selections: {', '.join(v['selections']) or 'none'})"
            for v in selected["audit"]["violations"]
        ],
        "promises": ", ".join(f"{k} {v}" for k, v in selected["audit"]["promises"].items()) or "none",
        "fidelity": [
            [name, _number(fid[name]["mean_deviance"], ".6g"), _number(fid[name]["gini"], ".4f")]
            for name in ("selected", "indicated")
        ],
        "notes": selected["notes"],
    }


def _impact_section(table_dir: Path | None, current_dir: Path | None, book: Path | None) -> dict:
    """The premium dislocation of moving `book` from the current to the reviewed table
    (`premiumlab impact`): totals, change bands, the largest increases by policy."""
    if table_dir is None or current_dir is None or book is None:
        return {"absent": "the impact needs `--table`, `--current` and `--book` (or run `premiumlab impact`)."}
    from premiumlab.apply.impact import dislocation

    result = dislocation(str(current_dir), str(table_dir), book, None, False, None, (0.05, 0.10, 0.25))
    return {
        "book": book.name,
        "rows": f"{result.rows:,}",
        "policies": f"{result.policies:,}",
        "total_current": _number(result.total_current, ",.2f"),
        "total_proposed": _number(result.total_proposed, ",.2f"),
        "overall_change": f"{result.overall_change:+.2%}",
        "bands": [
            [b["band"], f"{b['count']:,}", f"{b['count_share']:.1%}", f"{b['premium_share']:.1%}"] for b in result.bands
        ],
        "largest": [
            [
                ", ".join(f"{k} {v}" for k, v in top["id"].items()) or f"row {top['row']}",
                _number(top["current"], ",.2f"),
                _number(top["proposed"], ",.2f"),
                f"{top['change']:+.1%}",
            ]
            for top in result.largest_increases
        ],
    }


def _read_fidelity(table: Path | None) -> dict | None:
    """TABLE/fidelity.json, or None without a table."""
    return None if table is None else read_json(table / FIDELITY_FILE)


def _model_title(kind: str, target: str) -> str:
    """A model in words: ("gbm", "pure_premium") -> "boosted model, pure premium"."""
    words = {"glm": "GLM", "gbm": "boosted model"}[kind]
    return f"{words}, {TARGET_WORDS.get(target, target)} ({model_name(kind, target)})"


def _table_value(factor: Any, label: str, representative: float | None) -> float:
    """The relativity a rating-table factor gives a run level: a categorical's level (its missing
    row for "(missing)"), a numeric factor's band holding the level's representative value."""
    from rating_tables import MISSING_LABEL
    from rating_tables.table import band_index

    if label == MISSING_LABEL:
        return float(factor.missing.relativity) if factor.missing is not None else float("nan")
    if hasattr(factor, "levels"):
        return float(factor.relativity[factor.levels.index(label)]) if label in factor.levels else float("nan")
    if representative is None or not math.isfinite(representative):
        return float("nan")
    return float(factor.relativity[band_index(factor.lower, np.array([representative]))[0]])


def _boosted_effects(run: Run, book: Any, train: np.ndarray, views: list[FactorView], codes: pd.DataFrame) -> None:
    """Add series `gbm` to each view: the boosted model's partial dependence per level, relative
    to the base level: the mean prediction over an exposure-weighted sample of training policies
    with the factor set to the level (a numeric band at its exposure-weighted mean value)."""
    from premiumlab.models.gbm.features import features_from_spec
    from premiumlab.models.gbm.fit import load_model
    from premiumlab.tabulation.effects import exposure_sample

    targets = run.files.model_targets("gbm")
    if not targets:
        return
    target = "pure_premium" if "pure_premium" in targets else targets[0]
    model = load_model(run.files.model_text("gbm", target), run.files.model_json("gbm", target))
    features = features_from_spec(book.frame, run.spec)
    rows = np.flatnonzero(train)
    sample = features.iloc[rows[exposure_sample(book.exposure[rows], EFFECT_SAMPLE, run.spec.split.seed)]]
    sample = sample.reset_index(drop=True)
    spec_factors = {f.name: f for f in run.spec.factors}
    for view in views:
        f = spec_factors[view.name]
        column = sample[view.name]
        means = np.full(len(view.labels), np.nan)
        values = book.frame[view.name].to_numpy()[rows]
        level_codes = codes[view.name].to_numpy()[rows]
        for k, label in enumerate(view.labels):
            changed = sample.copy()
            if f.type == "numeric":
                inside = (level_codes == k) & ~np.isnan(values.astype(float))
                weights = book.exposure[rows][inside]
                if label.startswith("(") or weights.sum() <= 0:
                    at = np.nan
                else:
                    at = float(np.average(values[inside].astype(float), weights=weights))
                changed[view.name] = at
            elif isinstance(column.dtype, pd.CategoricalDtype):
                if label not in column.cat.categories:
                    continue
                changed[view.name] = pd.Categorical([label] * len(sample), categories=column.cat.categories)
            else:
                position = list(f.levels).index(label) if f.levels is not None and label in f.levels else np.nan
                changed[view.name] = float(position)
            means[k] = float(np.mean(model.predict(changed)))
        view.series["gbm"] = _relative(means, view.labels, view.base)


def factor_views(run: Run, table: Any | None, current: Any | None) -> list[FactorView]:
    """Per rating factor of the run (levels.json order): training exposure, claims and losses per
    level and the series observed one-way, GLM relativity (pure premium, else frequency), boosted
    effect, and the table's and current table's effect at the level: the exposure-weighted
    geometric mean over the level's training rows of the factor's main relativity times its
    two-way relativities (`tabulation.row_effects`), so tables that split an effect differently
    between main and two-way relativities draw the same line.

    Parameters
    ----------
    run : Run
        The run (its book is read and checked against the run's digest).
    table, current : RatingTable or None
        The rating table reviewed, and the current table.

    Returns
    -------
    list of FactorView
    """
    from premiumlab.book.levels import categorise
    from premiumlab.tabulation.from_run import rating_frame
    from premiumlab.tabulation.row_effects import effect_parts
    from premiumlab.tabulation.selection import banded_relativity

    book = run.load_book()
    preds = run.predictions()
    train = ~preds["holdout"].to_numpy(bool)
    cats = categorise(book.frame, run.levels)
    codes = pd.DataFrame({name: cats[name].cat.codes.to_numpy() for name in cats.columns})
    exposure = book.exposure
    claims = book.claim_count
    losses = preds["claim_amount"].to_numpy(float) if "claim_amount" in preds else None
    glm_target = next((t for t in ("pure_premium", "frequency") if t in run.files.model_targets("glm")), None)
    glm = None if glm_target is None else _glm_model(run, glm_target)
    views = []
    for name, lv in run.levels.items():
        labels = list(lv.labels)
        level_codes = codes[name].to_numpy()
        code = np.where(train, level_codes, -1)
        e, c, loss = one_way(code, len(labels), exposure, claims, losses)
        view = FactorView(name, labels, lv.base, e, c, loss)
        view.series["actual"] = _observed_relativity(e, c, loss, labels, lv.base)
        if glm is not None and name in glm["relativities"]:
            view.series["glm"] = np.array([float(glm["relativities"][name].get(label, 1.0)) for label in labels])
        views.append(view)
    _boosted_effects(run, book, train, views, codes)
    rows = np.flatnonzero(train)
    for which, rating in (("table", table), ("current", current)):
        if rating is None:
            continue
        main, two_way = effect_parts(rating, rating_frame(book, run.spec, rows), exposure[rows])
        for view in views:
            if view.name not in main:
                continue
            level = codes[view.name].to_numpy()[rows]
            known = level >= 0
            log_effect = (main[view.name] + two_way[view.name])[known]
            values, _ = banded_relativity(level[known], log_effect, exposure[rows][known], len(view.labels))
            view.series[which] = _relative(values, view.labels, view.base)
    return views


def _representatives(values: np.ndarray, codes: np.ndarray, exposure: np.ndarray, train: np.ndarray) -> dict:
    """Per level code, the exposure-weighted mean of the numeric training values (empty for text)."""
    if values.dtype.kind not in "fi":
        return {}
    out = {}
    for k in np.unique(codes[train & (codes >= 0)]):
        inside = train & (codes == k) & ~np.isnan(values)
        if exposure[inside].sum() > 0:
            out[int(k)] = float(np.average(values[inside], weights=exposure[inside]))
    return out


def _holdout_section(run: Run, comparison: dict | None) -> dict:
    """Holdout metrics rows per target and the paired differences; Lorenz curves from the
    predictions (they are not stored in comparison.json)."""
    if comparison is None:
        return {"absent": "The run has no comparison.json: run `premiumlab compare RUN` for the holdout checks."}
    from premiumlab.evaluation.holdout import model_columns, target_view
    from premiumlab.evaluation.metrics import lorenz_curve
    from premiumlab.runs.experience_step import fitted_basis

    rows = []
    for target, block in comparison["metrics"].items():
        if "null" in block:
            rows.append(
                [TARGET_WORDS[target], "null model (constant rate)", _number(block["null"]["mean_deviance"], ".6g")]
            )
        for name, m in block["models"].items():
            rows.append([TARGET_WORDS[target], name] + [_number(m.get(k), f) for k, _, f in METRIC_COLUMNS])
    preds = fitted_basis(run.predictions())
    hold = preds[preds["holdout"]].reset_index(drop=True)
    lorenz = {}
    for target in comparison["metrics"]:
        mask, actual, weight, _ = target_view(hold, target)
        lorenz[target] = {
            c: lorenz_curve(actual, hold.loc[mask, c].to_numpy(float), weight) for c in model_columns(hold, target)
        }
    return {
        "absent": None,
        "claims_ave": claims_ave_tables(run, hold),
        "header": ["target", "model"] + [h for _, h, _ in METRIC_COLUMNS],
        "rows": rows,
        "differences": [_lift_words(comparison["differences"], n) for n in comparison["differences"]],
        "lorenz": lorenz,
        "ginis": {t: {c: m["gini"] for c, m in b["models"].items()} for t, b in comparison["metrics"].items()},
        "holdout_rows": comparison["holdout_rows"],
    }


def claims_ave_tables(run: Run, hold: pd.DataFrame) -> dict:
    """Actual over expected claim counts per level of each factor on the holdout, per frequency
    model, with the exact (Garwood) 95 % interval of the actual count over the expected count.

    Parameters
    ----------
    run : Run
        The run (its book, levels and spec).
    hold : pandas.DataFrame
        The holdout rows of predictions.parquet (with `row`, exposure, claim count and the
        glm_/gbm_frequency columns).

    Returns
    -------
    dict
        `{factor: {"tables": {model: DataFrame from metrics.claims_actual_to_expected},
        "header": [...], "rows": [[text, ...], ...]}}`; `{}` without a frequency model.
    """
    from premiumlab.book.levels import categorise
    from premiumlab.evaluation.holdout import model_columns
    from premiumlab.evaluation.metrics import claims_actual_to_expected
    from premiumlab.models.targets import CLAIM_COUNT, EXPOSURE

    models = model_columns(hold, "frequency")
    if not models:
        return {}
    cats = categorise(run.load_book().frame, run.levels).iloc[hold["row"].to_numpy()].reset_index(drop=True)
    claims, exposure = hold[CLAIM_COUNT].to_numpy(float), hold[EXPOSURE].to_numpy(float)
    unit = spec_exposure_unit(run)
    out = {}
    for factor in run.levels:
        seen = cats[factor].notna().to_numpy()  # a level met only outside the training rows has no label
        tables = {
            m: claims_actual_to_expected(
                claims[seen], hold[m].to_numpy(float)[seen], exposure[seen], cats[factor][seen]
            )
            for m in models
        }
        first = next(iter(tables.values()))
        header = ["level", f"exposure ({unit})", "actual claims (count)"]
        for m in models:
            header += [f"{m}: expected claims (count)", f"{m}: actual / expected", f"{m}: 95 % interval"]
        rows = []
        for i, level in enumerate(first["level"]):
            row = [str(level), _number(first["exposure"].iloc[i], ",.1f"), _number(first["actual"].iloc[i], ",.0f")]
            for t in tables.values():
                row += [
                    _number(t["expected"].iloc[i], ",.1f"),
                    _number(t["actual_to_expected"].iloc[i], ".3f"),
                    f"[{_number(t['lower'].iloc[i], '.3f')}, {_number(t['upper'].iloc[i], '.3f')}]",
                ]
            rows.append(row)
        out[factor] = {"tables": tables, "header": header, "rows": rows}
    return out


#: The keys of experience.json the report reads, and of each of its totals.
EXPERIENCE_KEYS = ("order", "applied", "not_applied", "periods", "large_losses", "catastrophe", "totals")
TOTAL_KEYS = (
    "rows",
    "count_observed",
    "amount_observed",
    "amount_developed_trended",
    "count_adjusted",
    "amount_adjusted",
)


def _share(value: Any) -> str:
    """A share (0.05) as a percentage with two decimals; "n/a" when missing."""
    return "n/a" if value is None else _number(100 * float(value), ".2f") + " %"


def experience_section(run: Run) -> dict:
    """What the experience adjustments did (RUN/experience.json, docs/run-directory.md): the totals
    observed -> developed and trended -> adjusted on the training and all rows, the factors applied
    per period, the large-loss cap and its excess load, the catastrophe load.

    Parameters
    ----------
    run : Run
        The run (its experience.json, when the spec set adjustments).

    Returns
    -------
    dict
        `absent` (words) without experience.json; else `order`, `applied`, `not_applied`,
        `totals` (header and rows), `periods` (header and rows), `loads` (header and rows).
    """
    path = run.files.experience
    if not path.is_file():
        return {
            "absent": "the run made no experience adjustments (spec [experience]): claim counts and amounts "
            "were taken as given, not developed, trended or capped."
        }
    record = _require(read_json(path), EXPERIENCE_KEYS, path)
    for block in record["totals"].values():
        _require(block, TOTAL_KEYS, path)
    totals = [
        [
            name,
            f"{block['rows']:,}",
            _number(block["count_observed"], ",.0f"),
            _number(block["count_adjusted"], ",.1f"),
            _number(block["amount_observed"], ",.0f"),
            _number(block["amount_developed_trended"], ",.0f"),
            _number(block["amount_adjusted"], ",.0f"),
            _number(block["amount_adjusted"] / block["amount_observed"], ".4f") if block["amount_observed"] else "n/a",
        ]
        for name, block in record["totals"].items()
    ]
    period_keys = (
        ("rows", ",.0f"),
        ("years_to_future", ".3f"),
        ("development", ".4f"),
        ("count_development", ".4f"),
        ("severity_trend", ".4f"),
        ("frequency_trend", ".4f"),
        ("amount_multiplier", ".4f"),
        ("count_multiplier", ".4f"),
    )
    periods = [[str(p)] + [_number(v.get(k), f) for k, f in period_keys] for p, v in record["periods"].items()]
    large, cat = record["large_losses"], record["catastrophe"]
    loads = [
        ["large-loss cap (money)", "n/a" if large["cap"] is None else _number(large["cap"], ",.0f"), large["basis"]],
        ["losses capped (count)", _number(large["losses_capped"], ",.0f"), ""],
        ["excess over the cap, training (money)", _number(large["excess_training"], ",.0f"), ""],
        ["excess load (share of capped losses)", _share(large["excess_load"]), f"from {large['excess_load_from']}"],
        ["catastrophe claims (count)", _number(cat["claims"], ",.0f"), cat["column"] or "no catastrophe column"],
        ["catastrophe amount, training (money)", _number(cat["amount_training"], ",.0f"), ""],
        ["catastrophe load (share of non-catastrophe losses)", _share(cat["load"]), ""],
    ]
    return {
        "absent": None,
        "order": record["order"],
        "applied": record["applied"],
        "not_applied": record["not_applied"],
        "totals": {
            "header": [
                "which rows",
                "rows (count)",
                "claims observed (count)",
                "claims adjusted (count)",
                "losses observed (money)",
                "losses developed and trended (money)",
                "losses adjusted (money)",
                "adjusted / observed losses",
            ],
            "rows": totals,
        },
        "periods": {
            "header": [
                "period",
                "rows (count)",
                "years to the future period",
                "development factor",
                "count development factor",
                "severity trend factor",
                "frequency trend factor",
                "amount multiplier",
                "count multiplier",
            ],
            "rows": periods,
        },
        "loads": {"header": ["adjustment", "value", "note"], "rows": loads},
    }


#: The keys of a `tails --json` result the report reads.
TAILS_KEYS = (
    "threshold",
    "exceedances",
    "losses",
    "shape",
    "shape_se",
    "shape_interval",
    "scale",
    "scale_se",
    "modified_scale",
    "modified_scale_se",
    "basis",
    "notes",
    "mean_excess",
    "stability",
    "large_loss_cap",
    "share_of_losses",
    "share_of_amount",
)


#: What to do about a file that is not a `tails --json` result.
TAILS_ADVICE = "give the JSON that `premiumlab tails BOOK --spec SPEC --json` prints, saved to a file"


def tails_section(path: Path | None) -> dict:
    """A `tails --json` result given to `report --tails FILE.json`: the fit above the threshold
    with standard errors and the shape's profile interval, the mean-excess table with standard
    errors, the threshold-stability table (docs/commands.md, tails).

    Parameters
    ----------
    path : Path or None
        The JSON object `premiumlab tails BOOK --spec SPEC --json` printed, saved to a file.

    Returns
    -------
    dict
        `absent` (words) without a file; else `result` (the JSON, for the figure), `basis`, `fit`
        (header and rows), `mean_excess` and `stability` (header and rows), `notes`.
    """
    if path is None:
        return {
            "absent": "no tails result was given (`premiumlab tails BOOK --spec SPEC --json > T.json`, then `report --tails T.json`)."
        }
    result = _require(read_json(path), TAILS_KEYS, path, TAILS_ADVICE)
    for key in ("mean_excess", "stability"):
        if not isinstance(result[key], list) or not result[key]:
            raise InputError(f"{path}: key '{key}' must be a non-empty list; {TAILS_ADVICE}")
    low, high = result["shape_interval"]
    fit = [
        ["threshold u (money)", _number(result["threshold"], ",.0f"), ""],
        [
            "losses above u (count)",
            f"{result['exceedances']:,} of {result['losses']:,}",
            _share(result["share_of_losses"]),
        ],
        ["share of the amount above u", _share(result["share_of_amount"]), ""],
        ["shape xi", _number(result["shape"], ".4f"), f"standard error {_number(result['shape_se'], '.4f')}"],
        ["shape xi, 95 % profile interval", f"[{_number(low, '.4f')}, {_number(high, '.4f')}]", ""],
        [
            "scale beta (money)",
            _number(result["scale"], ",.0f"),
            f"standard error {_number(result['scale_se'], ',.0f')}",
        ],
        [
            "modified scale beta - xi u (money)",
            _number(result["modified_scale"], ",.0f"),
            f"standard error {_number(result['modified_scale_se'], ',.0f')}",
        ],
        [
            "large-loss cap of the spec (money)",
            "none" if result["large_loss_cap"] is None else _number(result["large_loss_cap"], ",.0f"),
            "",
        ],
    ]
    mean_excess = [
        [
            _number(r["threshold"], ",.0f"),
            f"{r['exceedances']:,}",
            _number(r["mean_excess"], ",.0f"),
            _number(r["standard_error"], ",.0f"),
            r.get("mark") or "",
        ]
        for r in result["mean_excess"]
    ]
    stability = [
        [
            _number(r["threshold"], ",.0f"),
            f"{r['exceedances']:,}",
            _number(r["shape"], ".4f"),
            _number(r["shape_se"], ".4f"),
            _number(r["modified_scale"], ",.0f"),
            _number(r["modified_scale_se"], ",.0f"),
        ]
        for r in result["stability"]
    ]
    return {
        "absent": None,
        "file": path.name,
        "result": result,
        "basis": result["basis"],
        "notes": list(result["notes"]),
        "fit": {"header": ["quantity", "value", "standard error or note"], "rows": fit},
        "mean_excess": {
            "header": [
                "threshold u (money)",
                "losses above u (count)",
                "mean excess (money)",
                "standard error (money)",
                "mark",
            ],
            "rows": mean_excess,
        },
        "stability": {
            "header": [
                "threshold u (money)",
                "losses above u (count)",
                "shape xi",
                "standard error",
                "modified scale (money)",
                "standard error (money)",
            ],
            "rows": stability,
        },
    }


def _boosted_section(run: Run) -> list[dict]:
    """Per boosted model: the CV table, the chosen setting and rounds, gain importance per factor."""
    from premiumlab.models.gbm.fit import load_model

    out = []
    for target in run.files.model_targets("gbm"):
        meta = run.model_json("gbm", target)
        model = load_model(run.files.model_text("gbm", target), run.files.model_json("gbm", target))
        gain = np.asarray(model.booster.feature_importance(importance_type="gain"), dtype=float)
        share = gain / gain.sum() if gain.sum() > 0 else gain
        cv = pd.DataFrame(meta["cv"]["table"])
        chosen = meta["cv"]["chosen"]
        out.append(
            {
                "target": target,
                "title": _model_title("gbm", target),
                "cv": cv,
                "chosen": chosen,
                "setting": json.dumps(cv["setting"].iloc[chosen], sort_keys=True) if not cv.empty else "n/a",
                "rounds": meta["best_rounds"],
                "importance": sorted(
                    zip(meta["feature_names"], (_number(s, ".3f") for s in share), strict=True),
                    key=lambda pair: -float(pair[1]),
                ),
            }
        )
    return out


def report_context(
    run: Run,
    table_dir: Path | None = None,
    current_dir: Path | None = None,
    book: Path | None = None,
    tails: Path | None = None,
) -> dict:
    """Every number the report shows, section by section (docs/commands.md, report).

    Parameters
    ----------
    run : Run
        The run (open_run).
    table_dir : Path or None
        A rating table made from the run (its table.json, factor files and fidelity.json).
    current_dir : Path or None
        The current rating table, for the current relativities and the change per level.
    book : Path or None
        A book for the impact of moving from `current_dir` to `table_dir`.
    tails : Path or None
        A `tails --json` result saved to a file, for the tails section.

    Returns
    -------
    dict
        Keys `title`, `cautions`, `diagnostics`, `summary`, `book`, `experience`, `tails`, `glms`,
        `boosted`, `holdout`, `interactions`, `factors`, `table`, `audit`, `impact`, `provenance`.
    """
    import rating_tables

    manifest = run.manifest
    comparison = (
        _require(read_json(run.files.comparison), COMPARISON_KEYS, run.files.comparison)
        if run.files.comparison.exists()
        else None
    )
    table = None if table_dir is None else rating_tables.load(table_dir)
    current = None if current_dir is None else rating_tables.load(current_dir)
    fidelity = _read_fidelity(table_dir)
    selected = fidelity if fidelity is not None and fidelity.get("format") == SELECTED_FORMAT else None
    if selected is not None:  # a selected table: the source figures are the indicated table's
        fidelity = {
            "source": {"model": table.provenance.get("source") if table is not None else None},
            "fidelity": selected["fidelity"]["indicated_table_fidelity"] or {},
        }
    diagnostics, looked = _diagnostics_rows(run, comparison, fidelity, None if table_dir is None else table_dir.name)
    views = factor_views(run, table, current)
    glm_sections = []
    exposure = {v.name: v.exposure for v in views}
    labels = {v.name: v.labels for v in views}
    for target in run.files.model_targets("glm"):
        m = _glm_model(run, target)
        glm_sections.append(
            {
                "title": _model_title("glm", target),
                "family": m["family"],
                "power": m.get("power"),
                "fit": f"deviance {_number(m['deviance'], '.6g')} on {_number(m['df_resid'], ',.1f')} residual degrees of freedom; "
                f"null deviance {_number(m['null_deviance'], '.6g')}; AIC {_number(m['aic'], '.6g')}",
                "rows": glm_rows(m, exposure, labels),
                "factor_tests": factor_tests(m),
                "penalised": m.get("penalty") == "credibility",
                "power_profile": m.get("power_profile") or [],
                "notes": m.get("notes", []),
            }
        )
    holdout = _holdout_section(run, comparison)
    main = next((t for t in ("pure_premium", "frequency") if comparison and t in comparison["metrics"]), None)
    headline = (
        None
        if comparison is None or main is None
        else _lift_words(comparison["differences"], f"gbm_{main} vs glm_{main}")
    )
    interactions = read_json(run.files.interactions) if run.files.interactions.is_file() else None
    total_exposure = float(sum(v.exposure.sum() for v in views[:1]))
    spec = manifest["spec"]
    table_section = _table_section(table_dir, table, current, fidelity)
    unit = spec_exposure_unit(run)
    return {
        "unit": unit,
        "title": f"Pricing review of run '{run.path.name}'" + ("" if table is None else f", table {table.table_id}"),
        "cautions": list(manifest["cautions"]),
        "diagnostics": diagnostics,
        "looked_at": looked,
        "summary": {
            "rows": manifest["rows"],
            "models": manifest["models"],
            "targets": [TARGET_WORDS[t] for t in run.files.model_targets(manifest["models"][0])],
            "factors": [v.name for v in views],
            "exposure": _number(total_exposure, ",.1f"),
            "headline": headline,
            "main_target": None if main is None else TARGET_WORDS[main],
            "table_id": None if table is None else table.table_id,
            "measured_table": "it" if selected is None else f"the indicated table {selected['indicated_table_id']}",
            "source": None if fidelity is None else fidelity.get("source", {}).get("model"),
            "retention": None if fidelity is None else fidelity.get("fidelity", {}).get("retention"),
            "table_models": None if fidelity is None else fidelity.get("fidelity", {}).get("models"),
        },
        "book": {
            "exposure": _number(total_exposure, ",.1f"),
            "claims": _number(float(views[0].claims.sum()), ",.0f") if views else "n/a",
            "losses": _number(float(views[0].losses.sum()), ",.0f") if views and views[0].losses is not None else None,
            "sha256": manifest["book"]["sha256"],
            "warnings": manifest["warnings"],
            "factors": [_one_way_rows(v) for v in views],
        },
        "experience": experience_section(run),
        "tails": tails_section(tails),
        "glms": glm_sections,
        "boosted": _boosted_section(run),
        "holdout": holdout,
        "comparison": comparison,
        "interactions": interactions,
        "factors": views,
        "table": table_section,
        "audit": _audit_section(run, table_dir),
        "impact": _impact_section(table_dir, current_dir, book),
        "selections": _selections_section(table, selected),
        "provenance": {
            "versions": manifest["versions"],
            "spec_sha256": _spec_hash(spec),
            "book_sha256": manifest["book"]["sha256"],
            "seed": manifest["seed"],
            "table_id": None if table is None else table.table_id,
            "table_provenance": None if table is None else table.provenance,
            "current_id": None if current is None else current.table_id,
        },
    }


def _one_way_rows(view: FactorView) -> dict:
    """The one-way table of a factor: exposure, claims, frequency, loss cost, observed relativity."""
    rows = []
    for k, label in enumerate(view.labels):
        e = view.exposure[k]
        rows.append(
            [
                label + (" (base)" if label == view.base else ""),
                _number(e, ",.1f"),
                _number(view.claims[k], ",.0f"),
                _number(view.claims[k] / e if e > 0 else None, ".4f"),
                "" if view.losses is None else _number(view.losses[k] / e if e > 0 else None, ",.2f"),
                _number(view.series["actual"][k], ".3f"),
            ]
        )
    return {"name": view.name, "rows": rows}


def _table_section(table_dir: Path | None, table: Any, current: Any, fidelity: dict | None) -> dict:
    """The rating table as filed: base rate, loadings and each factor file with every column it has;
    with a current table, its relativity and the change per row (selected / current - 1)."""
    if table is None or table_dir is None:
        return {"absent": "No rating table was given (`report --table TABLE`)."}
    factors = []
    for factor in table.factors:
        frame = pd.read_csv(table_dir / factor.file, keep_default_na=False, na_values=[""])
        if current is not None and not hasattr(factor, "of"):
            old = {f.name: f for f in current.factors}.get(factor.name)
            if old is not None:
                if "level" in frame.columns:
                    keys = [None if pd.isna(v) else str(v) for v in frame["level"]]
                    reps: list[float | None] = [None] * len(keys)
                else:
                    keys = ["(missing)" if pd.isna(lo) else "" for lo in frame["lower"]]
                    reps = [_inside(lo, up) for lo, up in zip(frame["lower"], frame["upper"], strict=True)]
                frame["current"] = [
                    _table_value(old, k if k is not None else "(missing)", r) for k, r in zip(keys, reps, strict=True)
                ]
                frame["change"] = frame["relativity"] / frame["current"] - 1
        factors.append({"name": factor.name} | _table_rows(frame))
    return {
        "absent": None,
        "table_id": table.table_id,
        "effective_date": table.effective_date,
        "base_rate": _number(table.base_rate, ",.2f"),
        "exposure_unit": table.exposure_unit,
        "loadings": {k: _number(v, ".4g") for k, v in vars(table.loadings).items()},
        "current_id": None if current is None else current.table_id,
        "current_base_rate": None if current is None else _number(current.base_rate, ",.2f"),
        "factors": factors,
        "rate_level": None if fidelity is None else fidelity.get("rate_level"),
    }


def _inside(lower: float, upper: float) -> float | None:
    """A number inside the band [lower, upper): the midpoint, or the finite edge of an open band."""
    if pd.isna(lower) or pd.isna(upper):
        return None
    if math.isinf(lower) and math.isinf(upper):
        return 0.0
    if math.isinf(lower):
        return upper - 1.0
    if math.isinf(upper):
        return lower
    return (lower + upper) / 2


def _audit_section(run: Run, table_dir: Path | None) -> dict:
    """The audit of the table against the run (its own checks, promises, bounds, certificate)."""
    if table_dir is None:
        return {"absent": "No rating table was given, so no audit was run."}
    from premiumlab.apply.audit import audit_table

    result = audit_table(table_dir, None, run.path)
    return {
        "absent": None,
        "violations": list(result.violations),
        "flattened": [d.message for d in result.diagnostics],
        "bounds": result.bounds,
    }
