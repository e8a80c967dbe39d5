"""`fit`: book + spec -> run directory (DESIGN 3.3): GLM baselines, boosted models, predictions."""
from __future__ import annotations

import os
import platform
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab.cautions import cautions_for
from premiumlab.data import Book, Levels, categorise, factor_levels, load_book
from premiumlab.errors import InputError
from premiumlab.jsonio import read_json, write_json
from premiumlab.outputs import atomic_output
from premiumlab.spec import Spec, load_spec, parse_spec

MODEL_KINDS = ("glm", "gbm")
TARGETS = ("frequency", "severity", "pure_premium")


@dataclass
class Run:
    """A run directory read back: its manifest, factor levels and predictions."""

    path: Path
    manifest: dict
    spec: Spec
    levels: dict[str, Levels]

    def predictions(self) -> pd.DataFrame:
        return pd.read_parquet(self.path / "predictions.parquet")

    def model_json(self, name: str) -> dict:
        return read_json(self.path / "models" / f"{name}.json")

    def load_book(self, path: str | Path | None = None) -> Book:
        """The run's book (recorded relative to the run folder, or `path`), checked by its sha256."""
        p = Path(path) if path is not None else self.path / self.manifest["book"]["path_from_run"]
        book = load_book(p, self.spec)
        if book.sha256 != self.manifest["book"]["sha256"]:
            raise InputError(f"{p}: this is not the book the run {self.path} was fitted on (sha256 differs)")
        return book


def parse_models(text: str) -> list[str]:
    """'glm,gbm' -> ['glm', 'gbm'], refusing unknown names."""
    names = [t.strip() for t in text.split(",") if t.strip()]
    bad = [n for n in names if n not in MODEL_KINDS]
    if bad or not names:
        raise InputError(f"--models: unknown model kind {', '.join(bad) or '(none)'}; use glm, gbm or glm,gbm")
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


def glm_inputs(book: Book, cats: pd.DataFrame, levels: dict[str, Levels], rows: np.ndarray):
    """GLM inputs on the selected rows."""
    from premiumlab.glm import GlmInputs
    return GlmInputs(factors=cats.loc[rows].reset_index(drop=True),
                     base_levels={k: v.base for k, v in levels.items()},
                     exposure=book.exposure[rows], claim_count=book.claim_count[rows],
                     claim_amount=None if book.claim_amount is None else book.claim_amount[rows])


def fit(book_path: str | Path, spec_path: str | Path, out: str | Path, models: str = "glm,gbm",
        force: bool = False, progress: bool = False) -> Path:
    """Fit the requested models on the training part of the book and write the run directory."""
    kinds = parse_models(models)
    spec = load_spec(spec_path)
    out = Path(out)
    from premiumlab.outputs import check_target
    check_target(out, force)
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    book = load_book(book_path, spec)
    timings["load_seconds"] = time.perf_counter() - t0
    train = ~book.holdout
    if train.sum() == 0:
        raise InputError(f"{book_path}: every row fell in the holdout; lower split.holdout")
    levels = factor_levels(book, spec, train)
    cats = categorise(book.frame, levels)
    has_amount = book.claim_amount is not None
    with atomic_output(out, force=force) as tmp:
        (tmp / "models").mkdir()
        preds = pd.DataFrame({"row": np.arange(book.n_rows, dtype=np.int64), "holdout": book.holdout,
                              "exposure": book.exposure, "claim_count": book.claim_count,
                              "policy_group": pd.factorize(book.policy)[0].astype(np.int64)})
        if has_amount:
            preds["claim_amount"] = book.claim_amount
        glm_power = None
        if "glm" in kinds:
            t = time.perf_counter()
            glm_power = _fit_glms(book, cats, levels, train, spec, tmp, preds, has_amount)
            timings["glm_seconds"] = time.perf_counter() - t
        if "gbm" in kinds:
            from premiumlab.boosting import fit_gbms
            t = time.perf_counter()
            fit_gbms(book, spec, train, glm_power, tmp, preds, progress=progress)
            timings["gbm_seconds"] = time.perf_counter() - t
        preds.to_parquet(tmp / "predictions.parquet", index=False)
        if book.holdout.any():
            from premiumlab.comparison import holdout_metrics
            write_json(tmp / "metrics.json", holdout_metrics(preds, glm_power or 1.5))
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
            "warnings": [str(w) for w in book.warnings],
            "versions": _versions(), "timings": timings,
            "cautions": cautions_for(spec),
        })
    return out


def _fit_glms(book: Book, cats: pd.DataFrame, levels: dict[str, Levels], train: np.ndarray, spec: Spec,
              tmp: Path, preds: pd.DataFrame, has_amount: bool) -> float | None:
    from premiumlab.glm import fit_frequency, fit_pure_premium, fit_severity
    inputs = glm_inputs(book, cats, levels, train)
    engine = spec.glm.engine
    results = {"frequency": fit_frequency(inputs, engine=engine)}
    if has_amount:
        results["severity"] = fit_severity(inputs, engine=engine)
        results["pure_premium"] = fit_pure_premium(inputs, power=spec.glm.tweedie_power, engine=engine)
    for target, res in results.items():
        write_json(tmp / "models" / f"glm_{target}.json", res.to_json_dict())
        preds[f"glm_{target}"] = res.predict(cats)
    if has_amount:
        preds["glm_freq_x_sev"] = preds["glm_frequency"] * preds["glm_severity"]
        return results["pure_premium"].power
    return None


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
