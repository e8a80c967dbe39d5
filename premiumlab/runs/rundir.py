"""The run directory (docs/run-directory.md): every path in it, its manifest and factor levels, and reading a run back.

RUN/
    run.json              manifest: spec, book (path from the run and sha256), rows, seed, versions, ...
    levels.json           factor levels, bases and numeric band edges fixed on the training rows
    predictions.parquet   one row per book row: split, observed (and adjusted) figures, model predictions
    metrics.json          holdout metrics (when the run has a holdout)
    experience.json       what the experience step used (with [experience] adjustments)
    certificate.json      monotonicity certificate of the boosted models
    interactions.json     two-factor interactions of the main boosted model, tested against noise
    models/KIND_TARGET.json (and .txt, the LightGBM text of a boosted model)
    comparison.json, figures/*.png   written by `compare`
    report.html           written by `report`
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import plain, read_json, write_json
from premiumlab.book.levels import Levels
from premiumlab.book.reading import unreadable_parquet
from premiumlab.book.rows import Book
from premiumlab.book.scan import load_book
from premiumlab.book.spec import Spec, parse_spec
from premiumlab.experience.adjustments import latest_period_holdout, read_text_column

MANIFEST_FORMAT = "premiumlab.run"
MANIFEST_VERSION = 1
#: The keys of run.json that commands read, with their JSON types (docs/run-directory.md);
#: `book.path_from_run` is checked where the book is looked for (`Run.book_path`).
MANIFEST_KEYS: dict[str, type] = {
    "spec": dict,
    "book.sha256": str,
    "rows.total": int,
    "rows.train": int,
    "rows.holdout": int,
    "warnings": list,
    "cautions": list,
}
MANIFEST_KINDS = {dict: "a table", str: "a string", int: "an integer", list: "a list"}


def model_name(kind: str, target: str) -> str:
    """A fitted model's name, e.g. "gbm_pure_premium": its file stem in models/ and its column in
    predictions.parquet.

    Parameters
    ----------
    kind : str
        The model kind: "glm" or "gbm".
    target : str
        The target: "frequency", "severity" or "pure_premium" (`premiumlab.models.targets`).

    Returns
    -------
    str
        "KIND_TARGET".
    """
    return f"{kind}_{target}"


@dataclass(frozen=True)
class RunDir:
    """The paths of one run directory (module docstring); nothing is read or checked on construction."""

    path: Path

    @property
    def manifest(self) -> Path:
        return self.path / "run.json"

    @property
    def levels(self) -> Path:
        return self.path / "levels.json"

    @property
    def predictions(self) -> Path:
        return self.path / "predictions.parquet"

    @property
    def metrics(self) -> Path:
        return self.path / "metrics.json"

    @property
    def experience(self) -> Path:
        return self.path / "experience.json"

    @property
    def certificate(self) -> Path:
        return self.path / "certificate.json"

    @property
    def interactions(self) -> Path:
        return self.path / "interactions.json"

    @property
    def comparison(self) -> Path:
        return self.path / "comparison.json"

    @property
    def report(self) -> Path:
        return self.path / "report.html"

    @property
    def models(self) -> Path:
        return self.path / "models"

    @property
    def figures(self) -> Path:
        return self.path / "figures"

    def model_json(self, kind: str, target: str) -> Path:
        """models/KIND_TARGET.json: a fitted model's parameters (GLM) or metadata (boosted)."""
        return self.models / f"{model_name(kind, target)}.json"

    def model_text(self, kind: str, target: str) -> Path:
        """models/KIND_TARGET.txt: a boosted model in LightGBM's text format."""
        return self.models / f"{model_name(kind, target)}.txt"

    def model_targets(self, kind: str) -> list[str]:
        """The targets that have a model of this kind in models/ (a KIND_TARGET.json file), sorted."""
        prefix = model_name(kind, "")
        return sorted(path.stem[len(prefix) :] for path in self.models.glob(f"{prefix}*.json"))

    def read_manifest(self) -> dict:
        """run.json, refused with a one-line error when the folder is not a run directory or a key
        that commands read is missing or of the wrong type (`MANIFEST_KEYS`: a hand-edited file)."""
        if not self.manifest.is_file():
            raise InputError(f"{self.path}: not a run directory (no run.json); make one with `premiumlab fit`")
        manifest = read_json(self.manifest)
        for key, kind in MANIFEST_KEYS.items():
            value: object = manifest
            for part in key.split("."):
                value = value.get(part) if isinstance(value, dict) else None
            if not isinstance(value, kind) or isinstance(value, bool):
                raise self.edited(key, kind)
        return manifest

    def edited(self, key: str, kind: type) -> InputError:
        """The refusal of run.json's `key`, missing or not of JSON type `kind`."""
        return InputError(
            f"{self.manifest}: key '{key}' is missing or not {MANIFEST_KINDS[kind]}; the run folder was edited: fit again"
        )

    def write_manifest(self, contents: dict) -> None:
        """run.json: the format and version, then `contents`."""
        write_json(self.manifest, {"format": MANIFEST_FORMAT, "version": MANIFEST_VERSION, **contents})

    def read_levels(self) -> dict[str, Levels]:
        """levels.json as Levels per factor (a file without its keys refused in one line)."""
        try:
            return {
                name: Levels(name, tuple(v["labels"]), v["base"], None if v["edges"] is None else tuple(v["edges"]))
                for name, v in read_json(self.levels).items()
            }
        except (KeyError, TypeError, AttributeError) as e:
            raise InputError(f"{self.levels}: not a levels file written by `fit` ({type(e).__name__}: {e})") from None

    def write_levels(self, levels: dict[str, Levels]) -> None:
        """levels.json: labels, base and numeric band edges (null for a categorical) per factor."""
        write_json(
            self.levels,
            {
                name: {"labels": list(v.labels), "base": v.base, "edges": None if v.edges is None else list(v.edges)}
                for name, v in levels.items()
            },
        )


@dataclass(frozen=True)
class Run:
    """A run directory read back: its paths, manifest, spec and factor levels (what `fit` returns)."""

    files: RunDir
    manifest: dict
    spec: Spec
    levels: dict[str, Levels]

    def to_dict(self) -> dict:
        """The run as JSON-able data: its folder, run.json (the spec included) and levels."""
        return plain({"path": self.path, "manifest": self.manifest, "levels": self.levels})

    @property
    def path(self) -> Path:
        return self.files.path

    def predictions(self) -> pd.DataFrame:
        """predictions.parquet, refused in one line when it cannot be read whole (truncated, edited)."""
        try:
            return pd.read_parquet(self.files.predictions)
        except Exception as e:  # pyarrow raises several types for damaged files
            raise unreadable_parquet(self.files.predictions, e) from None

    def model_json(self, kind: str, target: str) -> dict:
        return read_json(self.files.model_json(kind, target))

    def book_path(self, path: str | Path | None = None) -> Path:
        """Where the run's book is: `path` when given, else run.json's `book.path_from_run` taken
        relative to the run folder."""
        if path is not None:
            return Path(path)
        recorded = self.manifest["book"].get("path_from_run")
        if not isinstance(recorded, str):
            raise self.files.edited("book.path_from_run", str)
        return self.path / recorded

    def inputs(self, book: str | Path | None = None) -> tuple[Path, ...]:
        """Everything a command that reads this run reads, for the output check
        (`premiumlab._core.outputs.check_target`): the run folder and its book (`book_path`), which
        is read through run.json and so is an input even when the command line does not name it.

        Parameters
        ----------
        book : str or Path or None
            The book given on the command line (None: the one run.json records).

        Returns
        -------
        tuple of Path
            The run folder, then the book.
        """
        return (self.path, self.book_path(book))

    def load_book(self, path: str | Path | None = None) -> Book:
        """The run's book (recorded relative to the run folder, or `path`), checked by its sha256,
        with the run's split."""
        p = self.book_path(path)
        book = load_book(p, self.spec)
        recorded = self.manifest["book"]["sha256"]
        if book.sha256 != recorded:
            raise InputError(
                f"{p}: sha256 {book.sha256} differs from the book the run was fitted on "
                f"({recorded}, {self.files.manifest} key 'book.sha256')"
            )
        if self.spec.split.out_of_time:
            period = self.spec.columns.period
            assert period is not None, "the spec refuses split.holdout = 'latest_period' without columns.period"
            book.holdout = latest_period_holdout(read_text_column(p, period))
        return book


def open_run(path: str | Path) -> Run:
    """Read a run directory written by `fit`.

    Parameters
    ----------
    path : str or Path
        The run directory.

    Returns
    -------
    Run
        Its paths, run.json, the spec stored in run.json and the factor levels of levels.json.

    Raises
    ------
    InputError
        When `path` has no run.json, or the stored spec is not a valid spec.
    """
    files = RunDir(Path(path))
    manifest = files.read_manifest()
    spec = parse_spec(manifest["spec"], source=str(files.manifest))
    return Run(files, manifest, spec, files.read_levels())
