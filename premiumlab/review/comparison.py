"""`compare` (docs/run-directory.md, comparison.json): deviance, D^2, Gini, lift, double lift and A/E on the holdout.

Targets on the holdout, each with its actual, prediction, weight and deviance power:
frequency (claims per exposure; weight exposure; Poisson, power 1), severity (amount per claim on
rows with claims and a positive amount; weight claims; Gamma, power 2) and pure premium (amount per
exposure; weight exposure; Tweedie at the GLM's power). Pure premium is also compared as frequency x
severity against the direct Tweedie model.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pandas as pd

from premiumlab._core.defaults import FALLBACK_TWEEDIE_POWER, PLAUSIBLE_RELATIVITY
from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import write_json
from premiumlab._core.outputs import atomic_files, atomic_output
from premiumlab.evaluation.diagnostics import check_bounds, metric_diagnostics, relativity_diagnostics
from premiumlab.evaluation.holdout import (
    holdout_metrics,
    model_columns,
    target_view,
)
from premiumlab.models.targets import TARGETS
from premiumlab.runs.diagnostics import merge_diagnostics, model_warnings
from premiumlab.runs.rundir import Run, model_name

N_BOOT = 200
#: The names of the comparison's outputs inside the run folder or `--out` (docs/run-directory.md).
COMPARISON, FIGURES = "comparison.json", "figures"


def compare(
    run_dir: str | Path,
    n_boot: int = N_BOOT,
    bounds: tuple[float, float] = PLAUSIBLE_RELATIVITY,
    out: str | Path | None = None,
    force: bool = False,
) -> dict:
    """Write comparison.json and figures/*.png (in the run, or in a new folder `out`), atomically;
    return the comparison.

    Parameters
    ----------
    run_dir : str or Path
        A run directory written by `fit` with GLM and GBM predictions and a holdout.
    n_boot : int
        Paired bootstrap resamples (of policies, when the run has policy groups) for the intervals
        of the deviance reduction and the Gini gain.
    bounds : (float, float)
        Plausibility bounds of the GLM relativities (default [0.2, 5], a common-practice default).
    out : str or Path or None
        A new folder for comparison.json and figures/ (None: RUN/comparison.json and RUN/figures/).
    force : bool
        Replace an existing `out` (or the run's earlier comparison.json and figures/).

    Returns
    -------
    dict
        The content of comparison.json (docs/run-directory.md): `holdout_rows`, `tweedie_power`,
        `diagnostics` (run.json's, the GLM models' `warnings` and the comparison's own: models worse
        than the null model or with absurd figures, GLM relativities outside `bounds`; each once, as
        Diagnostic), `metrics` per target and model, `differences` with their intervals, `lift`,
        `double_lift`, `actual_vs_expected` per factor and `cautions`.

    Raises
    ------
    InputError
        Not a run directory, a run without a holdout, without both GLM and GBM predictions,
        bounds that are not 0 < least < greatest, or a target that exists without `force` or is,
        holds or lies inside one of the files the comparison reads.
    """
    from premiumlab.runs.rundir import open_run

    bounds = check_bounds(bounds)
    run = open_run(run_dir)
    with _comparison_output(run, out, force) as (comparison_file, fig_dir):
        return _compare(run, n_boot, bounds, comparison_file, fig_dir)


@contextmanager
def _comparison_output(run: Run, out: str | Path | None, force: bool) -> Iterator[tuple[Path, Path]]:
    """(comparison.json, figures folder) to write, temporary paths moved into place on success:
    a new folder `out` holding both, or the run's own two targets. The inputs are the run's files
    that the comparison reads and its book, so that the default target (inside the run) is allowed
    and `--out` can replace none of them."""
    files = run.files
    inputs = (files.manifest, files.levels, files.predictions, files.models, run.book_path())
    if out is not None:
        with atomic_output(out, force=force, inputs=(*inputs, files.path)) as tmp:
            (tmp / FIGURES).mkdir()
            yield tmp / COMPARISON, tmp / FIGURES
        return
    with (
        atomic_output(files.figures, force=force, inputs=inputs) as fig_tmp,
        atomic_files([files.comparison], force=force, inputs=inputs) as json_tmp,
    ):
        yield json_tmp / COMPARISON, fig_tmp


def _compare(run: Run, n_boot: int, bounds: tuple[float, float], comparison_file: Path, fig_dir: Path) -> dict:
    """The comparison of `compare`, its JSON written to `comparison_file` and its figures into `fig_dir`."""
    from premiumlab.evaluation import figures
    from premiumlab.evaluation.metrics import (
        actual_vs_expected,
        deviance_difference,
        double_lift,
        gini_difference,
        lift_table,
        lorenz_curve,
    )
    from premiumlab.runs.experience_step import fitted_basis

    preds = fitted_basis(run.predictions())
    if not preds["holdout"].any():
        raise InputError(
            f"{run.path}: the run has no holdout (split.holdout = 0), so there is nothing to "
            f'compare on; refit with a holdout share above 0 or holdout = "latest_period"'
        )
    if not any(c.startswith("gbm_") for c in preds) or not any(c.startswith("glm_") for c in preds):
        raise InputError(f"{run.path}: compare needs both GLM and GBM predictions; fit with --models glm,gbm")
    power = run.model_json("glm", "pure_premium")["power"] if "glm_pure_premium" in preds else FALLBACK_TWEEDIE_POWER
    seed = run.spec.split.seed
    metrics = holdout_metrics(preds, power)
    result = {
        "holdout_rows": int(preds["holdout"].sum()),
        "tweedie_power": power,
        "diagnostics": _diagnostics(run, metrics, bounds),
        "metrics": metrics,
        "differences": {},
        "lift": {},
        "double_lift": {},
        "actual_vs_expected": {},
        "cautions": run.manifest["cautions"],
    }
    hold = preds[preds["holdout"]].reset_index(drop=True)
    groups = hold["policy_group"].to_numpy() if "policy_group" in hold else None
    for target in result["metrics"]:
        mask, actual, weight, y = target_view(hold, target)
        pw = TARGETS[target].deviance_power(power)
        g = None if groups is None else groups[mask.to_numpy()]
        col = {c: hold.loc[mask, c].to_numpy(float) for c in model_columns(hold, target)}
        pairs = [(f"glm_{target}", f"gbm_{target}")]
        if target == "pure_premium":
            pairs += [("glm_freq_x_sev", "glm_pure_premium"), ("gbm_freq_x_sev", "gbm_pure_premium")]
        for a, b in pairs:
            if a not in col or b not in col:
                continue
            dev = deviance_difference(y, col[a], col[b], weight, pw, n_boot=n_boot, seed=seed, groups=g)
            gin = gini_difference(actual, col[b], col[a], weight, n_boot=n_boot, seed=seed, groups=g)
            result["differences"][f"{b} vs {a}"] = {"deviance_reduction": dev.to_dict(), "gini_gain": gin.to_dict()}
        lifts = {c: lift_table(actual, v, weight) for c, v in col.items()}
        result["lift"][target] = {c: t.to_dict(orient="list") for c, t in lifts.items()}
        figures.plot_lift(lifts, fig_dir / f"lift_{target}.png", title=f"Lift, {target.replace('_', ' ')}")
        figures.plot_lorenz(
            {c: lorenz_curve(actual, v, weight) for c, v in col.items()},
            fig_dir / f"lorenz_{target}.png",
            ginis={c: m["gini"] for c, m in result["metrics"][target]["models"].items()},
        )
        a, b = f"gbm_{target}", f"glm_{target}"
        dl = double_lift(actual, col[a], col[b], weight)
        result["double_lift"][target] = dl.to_dict(orient="list")
        figures.plot_double_lift(dl, fig_dir / f"double_lift_{target}.png", name_a=a, name_b=b)
    _actual_vs_expected(run, hold, result, fig_dir, actual_vs_expected, figures)
    _cv_figures(run, fig_dir, figures)
    write_json(comparison_file, result)
    return result


def _diagnostics(run, metrics: dict, bounds: tuple[float, float]) -> list[Diagnostic]:
    """run.json's diagnostics, the GLM models' warnings and the comparison's own, each once."""
    own = metric_diagnostics(metrics)
    for target in run.files.model_targets("glm"):
        model = run.model_json("glm", target)
        own += relativity_diagnostics(
            model_name("glm", target), model["relativities"], bounds, model.get("control", [])
        )
    return merge_diagnostics(run.manifest.get("diagnostics", []), model_warnings(run.files), own)


def _actual_vs_expected(run, hold: pd.DataFrame, result: dict, fig_dir: Path, ave, figures) -> None:
    from premiumlab.book.levels import categorise

    if "pure_premium" not in result["metrics"]:
        return
    book = run.load_book()
    cats = categorise(book.frame, run.levels).iloc[hold["row"].to_numpy()].reset_index(drop=True)
    _mask, actual, weight, _ = target_view(hold, "pure_premium")
    cols = [c for c in ("glm_pure_premium", "gbm_pure_premium") if c in hold]
    for factor in run.levels:
        seen = cats[factor].notna().to_numpy()  # a level met only outside the training rows has no label
        tables = {c: ave(actual[seen], hold[c].to_numpy(float)[seen], weight[seen], cats[factor][seen]) for c in cols}
        result["actual_vs_expected"][factor] = {
            c: t.astype({"level": str}).to_dict(orient="list") for c, t in tables.items()
        }
        figures.plot_actual_vs_expected(tables, fig_dir / f"ave_{factor}.png", factor=factor)


def _cv_figures(run, fig_dir: Path, figures) -> None:
    for target in run.files.model_targets("gbm"):
        meta = run.model_json("gbm", target)
        table = pd.DataFrame(meta["cv"]["table"])
        if table.empty:
            continue
        leaves = table["setting"].map(lambda s: s.get("num_leaves", 31))
        table["leaves_x_rounds"] = leaves * table["rounds"]
        figures.plot_cv_curve(
            table, fig_dir / f"cv_{meta['target']}.png", complexity="leaves_x_rounds", chosen=meta["cv"]["chosen"]
        )
