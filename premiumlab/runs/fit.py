"""`fit`: book + spec -> run directory (docs/run-directory.md): GLM baselines, boosted models, predictions.

With [experience] adjustments set, one step between loading and modelling adjusts counts and amounts
(premiumlab.runs.experience_step) and writes what it used to RUN/experience.json; every model is
fitted on the adjusted figures, and predictions.parquet keeps the observed ones beside them.
"""

from __future__ import annotations

import os
import platform
import time
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab._core.cluster import TaskRunner, parse_cluster, tasks_on
from premiumlab._core.defaults import FALLBACK_TWEEDIE_POWER
from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import write_json
from premiumlab._core.outputs import atomic_output, check_target, write_parquet_in_slices
from premiumlab._core.progress import Progress, Silent
from premiumlab.book.levels import categorise, factor_levels, unseen_at_base
from premiumlab.book.reading import CHUNK_ROWS
from premiumlab.book.scan import load_book
from premiumlab.book.spec import Spec, load_spec
from premiumlab.experience.adjustments import latest_period_holdout, read_text_column
from premiumlab.experience.cautions import cautions_for
from premiumlab.runs.book_diagnostics import book_diagnostics
from premiumlab.runs.diagnostics import merge_diagnostics, model_warnings
from premiumlab.runs.experience_step import add_adjusted_columns, adjust_book, adjusted_book, fitted_basis
from premiumlab.runs.glm_step import fit_glms, period_control
from premiumlab.runs.rundir import RunDir

MODEL_KINDS = ("glm", "gbm")


def _parse_models(text: str) -> list[str]:
    """'glm,gbm' -> ['glm', 'gbm'], refusing unknown or repeated names."""
    names = [t.strip() for t in text.split(",") if t.strip()]
    bad = [n for n in names if n not in MODEL_KINDS]
    if bad or not names:
        raise InputError(f"--models: unknown model kind {', '.join(bad) or '(none)'}; use glm, gbm or glm,gbm")
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise InputError(f"--models: model kind {', '.join(twice)} named more than once; use glm, gbm or glm,gbm")
    return names


def _versions() -> dict[str, str]:
    import lightgbm
    import scipy
    import sklearn
    import statsmodels

    from premiumlab import __version__

    return {
        "premiumlab": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pd.__version__,
        "scipy": scipy.__version__,
        "statsmodels": statsmodels.__version__,
        "scikit-learn": sklearn.__version__,
        "lightgbm": lightgbm.__version__,
    }


def fit(
    book_path: str | Path,
    spec_path: str | Path,
    out: str | Path,
    models: str = "glm,gbm",
    force: bool = False,
    progress: Progress | None = None,
    cluster: str | None = None,
) -> Path:
    """Fit the requested models on the training part of the book and write the run directory.

    Parameters
    ----------
    book_path : str or Path
        The book (.csv, .parquet or a folder of parts).
    spec_path : str or Path
        The pricing spec (TOML, docs/spec.md); files it names are resolved against its folder.
    out : str or Path
        The run directory to write (docs/run-directory.md), atomically.
    models : str
        Model kinds separated by commas: "glm", "gbm" or "glm,gbm".
    force : bool
        Replace an existing `out`.
    progress : Progress or None
        Told as each step is done (book read, experience totals, each model fitted, holdout
        metrics) (None: nothing is said).
    cluster : str or None
        Where the boosted-model search and the GLMs' passes over the rows (cells' sums, row
        statistics) run (premiumlab._core.cluster): None for this process, local:N for N local
        worker processes, or a Dask scheduler address. The GLMs' Newton steps run here.

    Returns
    -------
    Path
        The run directory `out`.

    Raises
    ------
    InputError
        On an unknown or repeated model kind, a bad cluster address, spec or book, an existing
        `out` without `force`, or a split that leaves no training rows.
    """
    kinds = _parse_models(models)
    if cluster is not None:
        parse_cluster(cluster)
    spec = load_spec(spec_path)
    out = Path(out)
    check_target(out, force, inputs=(book_path, spec_path))
    with tasks_on(cluster) as runner:  # reached before any work is done
        return _fit_run(book_path, spec_path, spec, out, kinds, force, progress, runner)


def _fit_run(
    book_path: str | Path,
    spec_path: str | Path,
    spec: Spec,
    out: Path,
    kinds: list[str],
    force: bool,
    progress: Progress | None,
    runner: TaskRunner,
) -> Path:
    """`fit` once its inputs are checked and the boosted-model search's `runner` is ready."""
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    exp = spec.experience
    # compact rows (codes and policy keys) unless the boosted models or the experience step need the text
    book = load_book(book_path, spec, compact=kinds == ["glm"] and not exp.configured)
    periods = None
    if exp.configured or exp.period_control or spec.split.out_of_time:
        periods = read_text_column(book_path, spec.columns.period) if spec.columns.period else None
    if spec.split.out_of_time:
        assert periods is not None, "the spec refuses split.holdout = 'latest_period' without columns.period"
        book.holdout = latest_period_holdout(periods)
    timings["load_seconds"] = time.perf_counter() - t0
    report = progress if progress is not None else Silent()
    report.step(f"fit: read the book, {book.n_rows:,} rows of which {int(book.holdout.sum()):,} held out")
    train = ~book.holdout
    if train.sum() == 0:
        raise InputError(f"{book_path}: every row fell in the holdout; lower split.holdout")
    levels = factor_levels(book, spec, train)
    diagnostics = book_diagnostics(book.frame, levels, train, book.exposure)
    cats = unseen_at_base(categorise(book.frame, levels), levels)
    has_amount = book.claim_amount is not None
    observed = book
    adjustment = None
    if exp.configured:
        t = time.perf_counter()
        adjustment = adjust_book(book, spec, Path(spec_path).parent, periods, train)
        book = adjusted_book(book, adjustment)
        timings["experience_seconds"] = time.perf_counter() - t
        totals = adjustment.record["totals"]["training"]
        report.step(
            f"experience: training amounts {totals['amount_observed']:,.0f} -> "
            f"{totals['amount_adjusted']:,.0f}, counts {totals['count_observed']:,.0f} -> "
            f"{totals['count_adjusted']:,.1f}"
        )
    control = None
    if exp.period_control:
        period = spec.columns.period
        assert periods is not None and period is not None, "the spec refuses period_control without columns.period"
        control = period_control(periods, book.exposure, train, period)
    with atomic_output(out, force=force, inputs=(book_path, spec_path)) as tmp:
        run = RunDir(tmp)
        run.models.mkdir()
        preds = pd.DataFrame(
            {
                "row": np.arange(book.n_rows, dtype=np.int64),
                "holdout": book.holdout,
                "exposure": book.exposure,
                "claim_count": observed.claim_count,
                "policy_group": pd.factorize(book.policy)[0].astype(np.int64),
            },
            copy=False,  # the book's arrays, not copies of them (columns are only ever added)
        )
        if has_amount:
            preds["claim_amount"] = observed.claim_amount
        if adjustment is not None:
            add_adjusted_columns(preds, book)
            write_json(run.experience, adjustment.record)
        glm_power = None
        if "glm" in kinds:
            t = time.perf_counter()
            glm_power = fit_glms(
                book, cats, levels, train, spec, run, preds, has_amount, adjustment, control, runner, progress=report
            )
            timings["glm_seconds"] = time.perf_counter() - t
        if "gbm" in kinds:
            from premiumlab.runs.gbm_step import fit_gbms

            t = time.perf_counter()
            fit_gbms(book, spec, train, glm_power, run, preds, runner, progress=report)
            timings["gbm_seconds"] = time.perf_counter() - t
        write_parquet_in_slices(preds, run.predictions, CHUNK_ROWS)
        if book.holdout.any():
            from premiumlab.evaluation.holdout import holdout_metrics

            write_json(run.metrics, holdout_metrics(fitted_basis(preds), glm_power or FALLBACK_TWEEDIE_POWER))
            report.step("fit: holdout metrics written")
        run.write_levels(levels)
        run.write_manifest(
            {
                "spec": spec.raw,
                "book": {
                    "path_from_run": os.path.relpath(Path(book_path).resolve(), out.resolve()),
                    "sha256": book.sha256,
                },
                "rows": {"total": book.n_rows, "train": int(train.sum()), "holdout": int(book.holdout.sum())},
                "seed": spec.split.seed,
                "threads": spec.gbm.num_threads,
                "models": kinds,
                **({"glm_passes_ran_on": runner.description} if "glm" in kinds else {}),
                **({"gbm_search_ran_on": runner.description} if "gbm" in kinds else {}),
                "warnings": [str(w) for w in book.warnings],
                "diagnostics": merge_diagnostics(diagnostics, model_warnings(run)),
                "versions": _versions(),
                "timings": timings,
                "cautions": cautions_for(spec),
                **({"experience": run.experience.name} if adjustment is not None else {}),
            }
        )
    return out
