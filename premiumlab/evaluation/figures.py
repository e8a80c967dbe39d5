"""Figures as PNG files: lift, double lift, ordered Lorenz curves, actual-versus-expected by factor
level, the cross-validation curve, and the dislocation of a rate change.

Each function takes tables already computed by `premiumlab.evaluation.metrics` (or the CV table of the boosted
model, or an impact result) and an output path, draws with matplotlib's Agg canvas (imported lazily, no pyplot and so no
global state) and returns the path. Every figure carries the review caution as a footer.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab._core.plotting import (
    ACTUAL_COLOUR,
    BAR_COLOUR,
    SERIES_COLOURS,
    SERIES_WORDS,
    level_ticks,
    new_figure,
    plain_axes,
    save_figure,
    series_colour,
    series_kind,
)

#: What a target's actual and predicted figures are, per what (the axis label of lift charts).
TARGET_AXIS = {
    "frequency": "claims per exposure year",
    "severity": "loss per claim (weighted by claim count)",
    "pure_premium": "loss per exposure year",
}
#: What a target's Lorenz curve accumulates along each axis.
LORENZ_AXES = {
    "severity": ("share of claim count, lowest predicted first", "share of actual loss"),
    "frequency": ("share of exposure, lowest predicted first", "share of actual claims"),
    "pure_premium": ("share of exposure, lowest predicted first", "share of actual loss"),
}
#: The complexity columns of a cross-validation table, in words.
COMPLEXITY_WORDS = {
    "leaves_x_rounds": "leaves per tree x boosting rounds",
    "rounds": "boosting rounds",
    "num_leaves": "leaves per tree",
}


def _target_of(name: str) -> str | None:
    """The target of a model column (`glm_frequency` -> frequency, `gbm_freq_x_sev` -> pure_premium),
    None when the name is not a model column."""
    if name.endswith("_freq_x_sev"):
        return "pure_premium"
    kind, _, target = name.partition("_")
    return target if kind in ("glm", "gbm") and target in TARGET_AXIS else None


def _model_label(name: str) -> str:
    """A model column in words: `gbm_pure_premium` -> "boosted model, pure premium"; other names
    as they are."""
    target = _target_of(name)
    if target is None:
        return name
    words = SERIES_WORDS[series_kind(name)]
    return words if name.endswith("_freq_x_sev") else f"{words}, {target.replace('_', ' ')}"


def _common_target(names: Sequence[str]) -> str | None:
    targets = {_target_of(n) for n in names}
    return targets.pop() if len(targets) == 1 else None


def _require_columns(table: pd.DataFrame, columns: Sequence[str], what: str) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise InputError(f"{what}: missing column(s) {', '.join(missing)}")


def _require_models(tables: Mapping[str, object], what: str) -> None:
    if not tables:
        raise InputError(f"{what}: no models given")


def plot_lift(
    tables: Mapping[str, pd.DataFrame], path: str | Path, *, title: str | None = None, caution: bool = True
) -> Path:
    """One panel per model: mean actual and mean predicted per weight unit (exposure; claim count
    for severity) against the bin of that model's prediction (tables from `metrics.lift_table`).

    Parameters
    ----------
    tables : mapping of str to pandas.DataFrame
        Per model name, its lift table (`bin`, `mean_actual`, `mean_predicted`), one panel each in
        this order.
    path : str or Path
        The PNG file to write; its folder must exist.
    title : str or None
        The figure's title; None for "Lift, TARGET" (the models' common target, in words).
    caution : bool
        Add the draft caution as a footer (False in a report that states it once).

    Returns
    -------
    Path
        `path`, written.
    """
    _require_models(tables, "plot_lift")
    for name, table in tables.items():
        _require_columns(table, ["bin", "mean_actual", "mean_predicted"], f"lift table of {name}")
    target = _common_target(list(tables))
    columns = min(len(tables), 2)
    rows = -(-len(tables) // columns)
    fig = new_figure(width=4.2 * columns + 0.6, height=3.4 * rows + 0.8)
    axes = fig.subplots(rows, columns, sharey=True, squeeze=False).ravel()
    for ax, (name, table) in zip(axes, tables.items()):
        ax.plot(table["bin"], table["mean_actual"], "o-", color=ACTUAL_COLOUR, label="actual")
        ax.plot(table["bin"], table["mean_predicted"], "s--", color=series_colour(name), label="predicted")
        ax.set_title(_model_label(name), fontsize=10)
        ax.set_xlabel("bin of the model's prediction (1 = lowest)")
        ax.set_xticks(table["bin"])
        ax.set_ylabel(TARGET_AXIS.get(target or "", "actual and predicted per weight unit"), fontsize=9)
        ax.legend(frameon=False, fontsize=8)
        plain_axes(ax)
    for ax in axes[len(tables) :]:
        ax.set_visible(False)
    words = "" if target is None else f", {target.replace('_', ' ')}"
    fig.suptitle(title or f"Lift{words}: mean actual and predicted by bin of prediction", fontsize=11)
    return save_figure(fig, path, caution=caution)


def plot_double_lift(table: pd.DataFrame, path: str | Path, *, name_a: str, name_b: str, caution: bool = True) -> Path:
    """Actual, model a and model b as indices to their own overall means against the bin of
    pred_a / pred_b (table from `metrics.double_lift`); the flatter mismatch ranks better.

    Parameters
    ----------
    table : pandas.DataFrame
        The double lift table (`bin`, `actual_index`, `a_index`, `b_index`).
    path : str or Path
        The PNG file to write; its folder must exist.
    name_a, name_b : str
        The model columns of a and b (`gbm_frequency`), named in words in the labels.
    caution : bool
        Add the draft caution as a footer.

    Returns
    -------
    Path
        `path`, written.
    """
    _require_columns(table, ["bin", "actual_index", "a_index", "b_index"], "double lift table")
    fig = new_figure()
    ax = fig.subplots()
    ax.axhline(1.0, color="#999999", linewidth=0.8)
    ax.plot(table["bin"], table["actual_index"], "o-", color=ACTUAL_COLOUR, label="actual")
    label_a, label_b = _model_label(name_a), _model_label(name_b)
    ax.plot(table["bin"], table["a_index"], "s--", color=series_colour(name_a), label=label_a)
    ax.plot(table["bin"], table["b_index"], "^--", color=series_colour(name_b), label=label_b)
    ax.set_xticks(table["bin"])
    ax.set_xlabel(f"bin of the ratio {label_a} / {label_b}\n(1 = {label_a} lowest relative to {label_b})")
    ax.set_ylabel("bin mean / overall mean")
    ax.set_title(f"Double lift: {label_a} against {label_b}", fontsize=11)
    ax.legend(frameon=False, fontsize=8)
    plain_axes(ax)
    return save_figure(fig, path, caution=caution)


def plot_lorenz(
    curves: Mapping[str, pd.DataFrame],
    path: str | Path,
    *,
    ginis: Mapping[str, float] | None = None,
    caution: bool = True,
) -> Path:
    """Ordered Lorenz curves of several models on one chart with the line of equality (curves from
    `metrics.lorenz_curve`; `ginis` adds each model's Gini to its label).

    Parameters
    ----------
    curves : mapping of str to pandas.DataFrame
        Per model name, its ordered Lorenz curve (`exposure_share`, `loss_share`).
    path : str or Path
        The PNG file to write; its folder must exist.
    ginis : mapping of str to float or None
        Gini per model name, shown to three decimals; models not in it are labelled by name only.
    caution : bool
        Add the draft caution as a footer.

    Returns
    -------
    Path
        `path`, written.
    """
    _require_models(curves, "plot_lorenz")
    for name, curve in curves.items():
        _require_columns(curve, ["exposure_share", "loss_share"], f"Lorenz curve of {name}")
    fig = new_figure(width=5.8, height=5.8)
    ax = fig.subplots()
    ax.plot([0, 1], [0, 1], color="#999999", linewidth=0.8, linestyle=":", label="no ranking")
    for name, curve in curves.items():
        label = _model_label(name)
        label = label if ginis is None or name not in ginis else f"{label} (Gini {ginis[name]:.3f})"
        ax.plot(curve["exposure_share"], curve["loss_share"], color=series_colour(name), label=label)
    target = _common_target(list(curves))
    x_label, y_label = LORENZ_AXES.get(target or "", ("share of weight, lowest predicted first", "share of actual"))
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_aspect("equal")
    ax.set_xlabel(x_label)
    ax.set_ylabel(y_label)
    words = "" if target is None else f", {target.replace('_', ' ')}"
    ax.set_title(f"Ordered Lorenz curves{words}", fontsize=11)
    ax.legend(frameon=False, fontsize=8, loc="upper left")
    plain_axes(ax)
    return save_figure(fig, path, caution=caution)


def plot_actual_vs_expected(
    tables: Mapping[str, pd.DataFrame], path: str | Path, *, factor: str, caution: bool = True
) -> Path:
    """Actual / expected per level of one factor, a line per model, over bars of exposure on a
    second axis (tables from `metrics.actual_vs_expected`, same levels in the same order); with
    `lower` and `upper` columns (`metrics.claims_actual_to_expected`) each point has its interval.

    Parameters
    ----------
    tables : mapping of str to pandas.DataFrame
        Per model name, its A/E table (`level`, `exposure`, `actual_to_expected`, optionally
        `lower` and `upper`); the exposure bars come from the first.
    path : str or Path
        The PNG file to write; its folder must exist.
    factor : str
        The factor's name, for the axis and title.
    caution : bool
        Add the draft caution as a footer.

    Returns
    -------
    Path
        `path`, written.
    """
    _require_models(tables, "plot_actual_vs_expected")
    for name, table in tables.items():
        _require_columns(table, ["level", "exposure", "actual_to_expected"], f"A/E table of {name}")
    first_name, first = next(iter(tables.items()))
    labels = [str(level) for level in first["level"]]
    for name, table in tables.items():
        if [str(level) for level in table["level"]] != labels:
            raise InputError(f"A/E table of {name}: levels of {factor} differ from those of {first_name}")
    positions = np.arange(len(labels))
    fig = new_figure(width=max(6.5, 0.55 * len(labels) + 3), height=4.8)
    ax = fig.subplots()
    bars = ax.twinx()
    bars.bar(positions, first["exposure"], color=BAR_COLOUR, width=0.7)
    bars.set_ylabel("exposure (years, bars)")
    bars.spines["top"].set_visible(False)
    ax.set_zorder(bars.get_zorder() + 1)
    ax.patch.set_visible(False)
    ax.axhline(1.0, color="#999999", linewidth=0.8)
    step = 0.3 / len(tables)
    for k, (name, table) in enumerate(tables.items()):
        ratio = table["actual_to_expected"].to_numpy(float)
        if {"lower", "upper"} <= set(table.columns):
            shift = positions + (k - (len(tables) - 1) / 2) * step  # side by side, not on top of each other
            spread = np.vstack([ratio - table["lower"].to_numpy(float), table["upper"].to_numpy(float) - ratio])
            ax.errorbar(
                shift, ratio, yerr=spread, fmt="o-", capsize=3, color=series_colour(name), label=_model_label(name)
            )
        else:
            ax.plot(positions, ratio, "o-", color=series_colour(name), label=_model_label(name))
    level_ticks(ax, positions, labels)
    ax.set_xlabel(factor)
    intervals = all({"lower", "upper"} <= set(t.columns) for t in tables.values())
    ax.set_ylabel(
        "actual / expected (A/E, 1 = on target)" + ("\nwhiskers: 95 % exact Poisson interval" if intervals else "")
    )
    target = _common_target(list(tables))
    words = "" if target is None else f" of the {target.replace('_', ' ')}"
    ax.set_title(f"Actual / expected{words} by {factor}", fontsize=11, pad=22)
    ax.legend(frameon=False, fontsize=8, loc="lower left", bbox_to_anchor=(0, 1), ncol=len(tables))
    plain_axes(ax)
    return save_figure(fig, path, caution=caution)


def plot_cv_curve(
    cv_table: pd.DataFrame | Sequence[Mapping[str, object]],
    path: str | Path,
    *,
    complexity: str,
    chosen: int,
    mean: str = "mean_deviance",
    sd: str = "sd_deviance",
    target: str | None = None,
    caution: bool = True,
) -> Path:
    """Mean cross-validated deviance with +-1 sd bars against a complexity measure, one point per
    setting; the setting at row position `chosen` is marked.

    Parameters
    ----------
    cv_table : pandas.DataFrame or sequence of mappings
        One row per setting with the columns named by `complexity`, `mean` and `sd`.
    path : str or Path
        The PNG file to write; its folder must exist.
    complexity : str
        The column to plot along the x axis (e.g. the number of trees).
    chosen : int
        Row position (0-based) of the chosen setting.
    mean, sd : str
        The columns of the mean and standard deviation of the deviance over the folds.
    target : str or None
        The boosted model's target (`frequency`), named in the title and the axis.
    caution : bool
        Add the draft caution as a footer.

    Returns
    -------
    Path
        `path`, written.
    """
    table = pd.DataFrame(cv_table)
    _require_columns(table, [complexity, mean, sd], "CV table")
    if table.empty:
        raise InputError("CV table: no settings")
    if not 0 <= chosen < len(table):
        raise InputError(f"chosen: row {chosen} is outside the CV table's {len(table)} settings")
    fig = new_figure()
    ax = fig.subplots()
    ax.errorbar(
        table[complexity],
        table[mean],
        yerr=table[sd],
        fmt="o",
        color=SERIES_COLOURS["gbm"],
        ecolor="#e0b59f",
        capsize=3,
        label="setting (mean +- 1 sd over folds)",
    )
    best = table.iloc[chosen]
    ax.plot(
        [best[complexity]],
        [best[mean]],
        "o",
        markersize=13,
        markerfacecolor="none",
        markeredgecolor=ACTUAL_COLOUR,
        markeredgewidth=1.8,
        label="chosen",
    )
    ax.set_xlabel(COMPLEXITY_WORDS.get(complexity, complexity.replace("_", " ")))
    words = "" if target is None else f" {target.replace('_', ' ')}"
    ax.set_ylabel(f"mean{words} deviance on the held-out folds")
    model = "boosted model" if target is None else f"boosted{words} model"
    ax.set_title(f"Cross-validation of the {model}: deviance against complexity", fontsize=11)
    ax.legend(frameon=False, fontsize=8)
    plain_axes(ax)
    return save_figure(fig, path, caution=caution)


def plot_impact(result: Mapping[str, Any], path: str | Path, *, factor: str | None = None) -> Path:
    """Left: share of policies and of current premium in each change band; right: the
    premium-weighted mean change (sum proposed / sum current - 1) by level of `factor`, by default
    the factor whose levels' changes spread widest (`result` from `rating_tables.impact`).

    Parameters
    ----------
    result : mapping
        The impact summary as `rating_tables.impact` returns it (`ImpactResult.to_dict()`):
        `bands`, `by_factor`, `policies` and `overall_change` are drawn.
    path : str or Path
        The PNG file to write; its folder must exist.
    factor : str or None
        The factor of the right panel; None for the one whose level changes have the widest
        range (max - min), and no right panel when the result has no factor.

    Returns
    -------
    Path
        `path`, written.
    """
    bands = pd.DataFrame(result["bands"])
    _require_columns(bands, ["band", "count_share", "premium_share"], "impact bands")
    by_factor = {name: pd.DataFrame(levels) for name, levels in result["by_factor"].items() if levels}
    if factor is None and by_factor:
        factor = max(by_factor, key=lambda name: np.ptp(by_factor[name]["change"].to_numpy()))
    if factor is not None and factor not in by_factor:
        raise InputError(f"plot_impact: factor '{factor}' is not in the impact result")
    fig = new_figure(width=11.0 if factor else 6.5, height=4.8)
    axes = fig.subplots(1, 2 if factor else 1, squeeze=False)[0]
    positions = np.arange(len(bands))
    ax = axes[0]
    ax.bar(positions - 0.2, bands["count_share"], width=0.4, color=SERIES_COLOURS["glm"], label="policies")
    ax.bar(positions + 0.2, bands["premium_share"], width=0.4, color=BAR_COLOUR, label="current premium")
    ax.set_xticks(positions)
    ax.set_xticklabels(bands["band"], rotation=40, ha="right", fontsize=8)
    ax.set_xlabel("change of premium, proposed / current - 1")
    ax.set_ylabel("share")
    ax.set_title(f"Dislocation: {result['policies']:,} policies, overall {result['overall_change']:+.2%}", fontsize=11)
    ax.legend(frameon=False, fontsize=8)
    plain_axes(ax)
    if factor:
        levels = by_factor[factor]
        ax = axes[1]
        spots = np.arange(len(levels))
        ax.axhline(0.0, color="#999999", linewidth=0.8)
        ax.bar(
            spots,
            levels["change"],
            width=0.7,
            color=[SERIES_COLOURS["gbm"] if c > 0 else SERIES_COLOURS["glm"] for c in levels["change"]],
        )
        level_ticks(ax, spots, [str(v) for v in levels["level"]], fontsize=8)
        ax.set_xlabel(factor)
        ax.set_ylabel("premium-weighted mean change")
        ax.set_title(f"Mean change by {factor}", fontsize=11)
        plain_axes(ax)
    return save_figure(fig, path)


#: The series of a per-factor chart in drawing order, with their marker style and legend words.
FACTOR_SERIES = {
    "actual": ("o-", "observed one-way (training rows)"),
    "glm": ("s-", "GLM relativity"),
    "gbm": ("^-", "boosted model effect"),
    "table": ("_-", "rating table"),
    "current": ("x--", "current table"),
}


def plot_factor_chart(
    labels: Sequence[str],
    exposure: Sequence[float] | np.ndarray,
    series: Mapping[str, Sequence[float] | np.ndarray],
    path: str | Path,
    *,
    factor: str,
    caution: bool = True,
) -> Path:
    """One rating factor on one axis: exposure per level as bars (second axis) and, as lines, the
    relativities of the series given, each relative to the factor's base level (1 = base).

    Parameters
    ----------
    labels : sequence of str
        The factor's levels or bands, in order.
    exposure : sequence of float or np.ndarray
        Training exposure per level, in exposure years.
    series : mapping of str to sequence of float or np.ndarray
        Per series key of FACTOR_SERIES (`actual`, `glm`, `gbm`, `table`, `current`), one relativity
        per level (NaN where the series has none); drawn in FACTOR_SERIES order in the fixed palette.
    path : str or Path
        The PNG file to write; its folder must exist.
    factor : str
        The factor's name, for the axis and title.
    caution : bool
        Add the draft caution as a footer.

    Returns
    -------
    Path
        `path`, written.
    """
    unknown = [key for key in series if key not in FACTOR_SERIES]
    if unknown:
        raise InputError(f"plot_factor_chart: unknown series {', '.join(unknown)}")
    if len(exposure) != len(labels) or any(len(v) != len(labels) for v in series.values()):
        raise InputError(f"plot_factor_chart: {factor}: every series needs one value per level")
    positions = np.arange(len(labels))
    fig = new_figure(width=min(12.0, max(7.0, 0.5 * len(labels) + 3.5)), height=4.6)
    ax = fig.subplots()
    bars = ax.twinx()
    bars.bar(positions, exposure, color=BAR_COLOUR, width=0.7)
    bars.set_ylabel("exposure, training rows (years; bars)")
    bars.spines["top"].set_visible(False)
    ax.set_zorder(bars.get_zorder() + 1)
    ax.patch.set_visible(False)
    ax.axhline(1.0, color="#999999", linewidth=0.8)
    for key, (style, words) in FACTOR_SERIES.items():
        if key in series:
            values = np.asarray(series[key], dtype=float)
            ax.plot(positions, values, style, color=series_colour(key), label=words, markersize=6, linewidth=1.4)
    level_ticks(ax, positions, [str(label) for label in labels])
    ax.set_xlabel(factor)
    ax.set_ylabel("relativity to the base level (1 = base)")
    ax.legend(frameon=False, fontsize=8, loc="lower left", bbox_to_anchor=(0, 1.01), ncol=min(len(series), 3))
    fig.suptitle(f"{factor}: observed, models and table, relative to the base level", fontsize=11)
    plain_axes(ax)
    return save_figure(fig, path, caution=caution)
