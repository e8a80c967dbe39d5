"""`fit`: book + spec -> run directory (docs/run-directory.md): GLM baselines, boosted models, predictions.

With [experience] adjustments set, one step between loading and modelling adjusts counts and amounts
(premiumlab.experience) and writes what it used to RUN/experience.json; every model is fitted on the
adjusted figures. predictions.parquet keeps `claim_count` and `claim_amount` as observed and adds
`claim_count_adjusted` and `claim_amount_adjusted`, the figures the models were fitted to and that
metrics.json compares with.
"""
from __future__ import annotations

import os
import platform
import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab.experience.cautions import cautions_for
from premiumlab._core.cluster import TaskRunner, parse_cluster, tasks_on
from premiumlab.book.scan import load_book
from premiumlab.book.data import Book, Levels, categorise, factor_levels
from premiumlab._core.errors import InputError
from premiumlab.experience.adjustments import latest_period_holdout, read_text_column
from premiumlab._core.jsonio import plain, read_json, write_json
from premiumlab._core.outputs import atomic_output, check_target
from premiumlab._core.progress import Progress
from premiumlab.book.spec import Spec, load_spec, parse_spec

MODEL_KINDS = ("glm", "gbm")
TARGETS = ("frequency", "severity", "pure_premium")


@dataclass(frozen=True)
class Run:
    """A run directory read back: its manifest, factor levels and predictions."""

    path: Path
    manifest: dict
    spec: Spec
    levels: dict[str, Levels]

    def to_dict(self) -> dict:
        """The run as JSON-able data: its folder, run.json (the spec included) and levels."""
        return plain({"path": self.path, "manifest": self.manifest, "levels": self.levels})

    def predictions(self) -> pd.DataFrame:
        return pd.read_parquet(self.path / "predictions.parquet")

    def model_json(self, name: str) -> dict:
        return read_json(self.path / "models" / f"{name}.json")

    def load_book(self, path: str | Path | None = None) -> Book:
        """The run's book (recorded relative to the run folder, or `path`), checked by its sha256,
        with the run's split."""
        p = Path(path) if path is not None else self.path / self.manifest["book"]["path_from_run"]
        book = load_book(p, self.spec)
        recorded = self.manifest["book"]["sha256"]
        if book.sha256 != recorded:
            raise InputError(f"{p}: sha256 {book.sha256} differs from the book the run was fitted on "
                             f"({recorded}, {self.path / 'run.json'} key 'book.sha256')")
        if self.spec.split.out_of_time:
            book.holdout = latest_period_holdout(read_text_column(p, self.spec.columns.period))
        return book


def parse_models(text: str) -> list[str]:
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
    return {"premiumlab": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "pandas": pd.__version__, "scipy": scipy.__version__, "statsmodels": statsmodels.__version__,
            "scikit-learn": sklearn.__version__, "lightgbm": lightgbm.__version__}


def glm_inputs(book: Book, cats: pd.DataFrame, levels: dict[str, Levels], rows: np.ndarray,
               count_multiplier: np.ndarray | None = None, control: list[str] = ()):
    """GLM inputs on the selected rows.

    `count_multiplier` m (adjusted counts are the book's integer counts x m) enters as exposure / m
    with the amount / m: the frequency count / (exposure / m) and the severity (amount / m) / count
    are then the adjusted ones (the Poisson weight of a row becomes exposure / m). For the pure
    premium, pass no multiplier. `control` names factors in `cats` fitted but never tabled.
    """
    from premiumlab.models.glm.fit import GlmInputs
    m = 1.0 if count_multiplier is None else count_multiplier[rows]
    return GlmInputs(factors=cats.loc[rows].reset_index(drop=True),
                     base_levels={k: v.base for k, v in levels.items()},
                     exposure=book.exposure[rows] / m, claim_count=book.claim_count[rows],
                     claim_amount=None if book.claim_amount is None else book.claim_amount[rows] / m,
                     control=list(control))


def fit(book_path: str | Path, spec_path: str | Path, out: str | Path, models: str = "glm,gbm",
        force: bool = False, progress: Progress | None = None, cluster: str | None = None) -> Path:
    """Fit the requested models on the training part of the book and write the run directory.

    `progress`: told the experience step's totals (None: nothing is said). `cluster`: where the
    boosted-model search runs (premiumlab.cluster: None for this process, local:N or a Dask
    scheduler address)."""
    kinds = parse_models(models)
    if cluster is not None:
        parse_cluster(cluster)
    spec = load_spec(spec_path)
    out = Path(out)
    check_target(out, force, inputs=(book_path, spec_path))
    with tasks_on(cluster if "gbm" in kinds else None) as runner:  # reached before any work is done
        return _fit_run(book_path, spec_path, spec, out, kinds, force, progress, runner)


def _fit_run(book_path: str | Path, spec_path: str | Path, spec: Spec, out: Path, kinds: list[str], force: bool,
             progress: Progress | None, runner: TaskRunner) -> Path:
    """`fit` once its inputs are checked and the boosted-model search's `runner` is ready."""
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    book = load_book(book_path, spec)
    exp = spec.experience
    periods = None
    if exp.configured or exp.period_control or spec.split.out_of_time:
        periods = read_text_column(book_path, spec.columns.period) if spec.columns.period else None
    if spec.split.out_of_time:
        book.holdout = latest_period_holdout(periods)
    timings["load_seconds"] = time.perf_counter() - t0
    train = ~book.holdout
    if train.sum() == 0:
        raise InputError(f"{book_path}: every row fell in the holdout; lower split.holdout")
    levels = factor_levels(book, spec, train)
    cats = categorise(book.frame, levels)
    has_amount = book.claim_amount is not None
    observed = book
    adjustment = None
    if exp.configured:
        t = time.perf_counter()
        adjustment = adjust_book(book, spec, Path(spec_path).parent, periods, train)
        book = adjusted_book(book, adjustment)
        timings["experience_seconds"] = time.perf_counter() - t
        if progress is not None:
            totals = adjustment.record["totals"]["training"]
            progress.step(f"experience: training amounts {totals['amount_observed']:,.0f} -> "
                          f"{totals['amount_adjusted']:,.0f}, counts {totals['count_observed']:,.0f} -> "
                          f"{totals['count_adjusted']:,.1f}")
    control = None
    if exp.period_control:
        control = period_control(periods, book.exposure, train, spec.columns.period)
    with atomic_output(out, force=force) as tmp:
        (tmp / "models").mkdir()
        preds = pd.DataFrame({"row": np.arange(book.n_rows, dtype=np.int64), "holdout": book.holdout,
                              "exposure": book.exposure, "claim_count": observed.claim_count,
                              "policy_group": pd.factorize(book.policy)[0].astype(np.int64)})
        if has_amount:
            preds["claim_amount"] = observed.claim_amount
        if adjustment is not None:
            preds["claim_count_adjusted"] = book.claim_count
            if has_amount:
                preds["claim_amount_adjusted"] = book.claim_amount
            write_json(tmp / "experience.json", adjustment.record)
        glm_power = None
        if "glm" in kinds:
            t = time.perf_counter()
            glm_power = _fit_glms(book, cats, levels, train, spec, tmp, preds, has_amount, adjustment, control)
            timings["glm_seconds"] = time.perf_counter() - t
        if "gbm" in kinds:
            from premiumlab.runs.gbm_step import fit_gbms
            t = time.perf_counter()
            fit_gbms(book, spec, train, glm_power, tmp, preds, runner)
            timings["gbm_seconds"] = time.perf_counter() - t
        preds.to_parquet(tmp / "predictions.parquet", index=False)
        if book.holdout.any():
            from premiumlab.evaluation.holdout import holdout_metrics
            write_json(tmp / "metrics.json", holdout_metrics(fitted_basis(preds), glm_power or 1.5))
        write_json(tmp / "levels.json", {k: {"labels": list(v.labels), "base": v.base,
                                             "edges": None if v.edges is None else list(v.edges)}
                                         for k, v in levels.items()})
        write_json(tmp / "run.json", {
            "format": "premiumlab.run", "version": 1,
            "spec": spec.raw,
            "book": {"path_from_run": os.path.relpath(Path(book_path).resolve(), out.resolve()),
                     "sha256": book.sha256},
            "rows": {"total": book.n_rows, "train": int(train.sum()), "holdout": int(book.holdout.sum())},
            "seed": spec.split.seed, "threads": spec.gbm.threads, "models": kinds,
            **({"gbm_search_ran_on": runner.description} if "gbm" in kinds else {}),
            "warnings": [str(w) for w in book.warnings],
            "versions": _versions(), "timings": timings,
            "cautions": cautions_for(spec),
            **({"experience": "experience.json"} if adjustment is not None else {}),
        })
    return out


def adjust_book(book: Book, spec: Spec, spec_dir: Path, periods: np.ndarray | None, train: np.ndarray):
    """The experience step: adjusted counts and amounts of every row (premiumlab.experience)."""
    from premiumlab.experience.adjustments import prepare
    count = book.claim_count.astype(float)
    return prepare(spec, spec_dir, periods, book.policy, count, book.claim_amount, train)


def adjusted_book(book: Book, adjustment) -> Book:
    """The book with its counts and amounts replaced by the adjusted ones (what every model sees)."""
    amount = None if book.claim_amount is None else adjustment.amount
    return replace(book, claim_count=adjustment.count, claim_amount=amount)


def fitted_basis(preds: pd.DataFrame) -> pd.DataFrame:
    """Predictions with the adjusted counts and amounts, when there are any, in the observed columns:
    the figures the models were fitted to."""
    swap = {f"{name}_adjusted": name for name in ("claim_count", "claim_amount") if f"{name}_adjusted" in preds}
    return preds.drop(columns=list(swap.values())).rename(columns=swap) if swap else preds


@dataclass(frozen=True)
class PeriodControl:
    """The period as a control factor: its name, level of every row, base and training exposure."""

    name: str
    values: pd.Categorical
    base: str
    exposure: np.ndarray


def period_control(periods: np.ndarray, exposure: np.ndarray, train: np.ndarray, name: str) -> PeriodControl:
    """The period column as a control factor, its base the period with the largest training exposure."""
    from premiumlab.experience.adjustments import period_order
    order = period_order(periods[train].tolist())
    values = pd.Categorical(periods, categories=order, ordered=True)
    expo = np.bincount(values.codes[train], weights=exposure[train], minlength=len(order))
    return PeriodControl(name, values, order[int(np.argmax(expo))], expo)


def _fit_glms(book: Book, cats: pd.DataFrame, levels: dict[str, Levels], train: np.ndarray, spec: Spec,
              tmp: Path, preds: pd.DataFrame, has_amount: bool, adjustment=None,
              control: PeriodControl | None = None) -> float | None:
    """Fit the three GLMs on the training rows; with a period control, predict every row at the
    control's training-exposure-weighted mean relativity (the period is never tabled)."""
    from premiumlab.models.glm.fit import fit_frequency, fit_pure_premium, fit_severity
    names: list[str] = []
    if control is not None:
        cats = cats.assign(**{control.name: control.values})
        levels = {**levels, control.name: Levels(control.name, tuple(control.values.categories), control.base)}
        names = [control.name]
    multiplier = None if adjustment is None else adjustment.count_multiplier
    counts = book if adjustment is None else replace(book, claim_count=adjustment.count_base)
    inputs = glm_inputs(counts, cats, levels, train, multiplier, names)
    whole = glm_inputs(counts, cats, levels, train, None, names) if multiplier is not None else inputs
    engine = spec.glm.engine
    results = {"frequency": fit_frequency(inputs, engine=engine)}
    if has_amount:
        results["severity"] = fit_severity(inputs, engine=engine)
        results["pure_premium"] = fit_pure_premium(whole, power=spec.glm.tweedie_power, engine=engine)
    for target, res in results.items():
        write_json(tmp / "models" / f"glm_{target}.json", res.to_json_dict())
        preds[f"glm_{target}"] = res.predict(cats) if control is None else _at_mean_control(res, cats, control)
    if has_amount:
        preds["glm_freq_x_sev"] = preds["glm_frequency"] * preds["glm_severity"]
        return results["pure_premium"].power
    return None


def _at_mean_control(res, cats: pd.DataFrame, control: PeriodControl) -> np.ndarray:
    """Predictions with the control factor at its base, times the training-exposure-weighted mean of
    its relativities."""
    rel = res.relativities[control.name]
    mean = sum(rel[level] * e for level, e in zip(control.values.categories, control.exposure)) / control.exposure.sum()
    at_base = cats.assign(**{control.name: pd.Categorical(np.full(len(cats), control.base),
                                                          categories=control.values.categories)})
    return res.predict(at_base) * mean


def open_run(path: str | Path) -> Run:
    """Read a run directory written by `fit`."""
    p = Path(path)
    if not (p / "run.json").is_file():
        raise InputError(f"{p}: not a run directory (no run.json); make one with `premiumlab fit`")
    manifest = read_json(p / "run.json")
    spec = parse_spec(manifest["spec"], source=f"{p}/run.json")
    raw_levels = read_json(p / "levels.json")
    levels = {k: Levels(k, tuple(v["labels"]), v["base"], None if v["edges"] is None else tuple(v["edges"]))
              for k, v in raw_levels.items()}
    return Run(p, manifest, spec, levels)
