"""The compact book of `fit --models glm` (categorical factors as codes, policy ids as 64-bit keys)
gives the run the typed book gives: the same files, coefficients to 1e-10, predictions.parquet and
run.json equal apart from timings.

This is an equivalence of two code paths of premiumlab, not a check of the figures against an
outside source (the GLMs are checked against statsmodels in tests/external/); the book is invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import premiumlab
import premiumlab.runs.fit as fit_module
from premiumlab.book.scan import load_book
from premiumlab.book.spec import load_spec

from _builders import SPEC_TEXT, small_book, write_book


def _book(n: int = 1500) -> pd.DataFrame:
    """small_book with missing regions, a region met on one row only and policies with two rows."""
    frame = small_book(n, seed=11)
    frame.loc[frame.index % 37 == 0, "region"] = ""
    frame.loc[5, "region"] = "Farholt"
    second = frame.index % 5 == 1
    frame.loc[second, "policy_id"] = frame["policy_id"].shift(1)
    frame.loc[second, "year"] = 2024
    return frame


def _files(run: Path) -> dict[str, object]:
    """Every file of a run: JSON as data (run.json without timings), Parquet as a frame, else bytes."""
    out: dict[str, object] = {}
    for path in sorted(run.rglob("*")):
        if path.is_dir():
            continue
        name = str(path.relative_to(run))
        if path.suffix == ".json":
            data = json.loads(path.read_text())
            if name == "run.json":
                data.pop("timings")
            out[name] = data
        elif path.suffix == ".parquet":
            out[name] = pd.read_parquet(path)
        else:
            out[name] = path.read_bytes()
    return out


def _coefficients(files: dict[str, object]) -> dict[str, np.ndarray]:
    return {
        name: np.array([c["estimate"] for c in data["coefficients"]], dtype=float)  # type: ignore[index]
        for name, data in files.items()
        if name.startswith("models/")
    }


@pytest.mark.parametrize("policy_column", [True, False])
def test_compact_run_equals_the_typed_run(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, policy_column: bool) -> None:
    frame = _book()
    spec_text = SPEC_TEXT
    if not policy_column:
        frame = frame.drop(columns="policy_id")
        spec_text = spec_text.replace('policy_id = "policy_id"\n', "")
    book = write_book(frame, tmp_path / "book.parquet")
    spec = tmp_path / "spec.toml"
    spec.write_text(spec_text)
    premiumlab.fit(book, spec=spec, out=tmp_path / "compact", models="glm")
    monkeypatch.setattr(fit_module, "load_book", lambda path, spec, compact: load_book(path, spec))
    premiumlab.fit(book, spec=spec, out=tmp_path / "typed", models="glm")
    compact, typed = _files(tmp_path / "compact"), _files(tmp_path / "typed")
    assert sorted(compact) == sorted(typed)
    for name, beta in _coefficients(typed).items():
        np.testing.assert_allclose(_coefficients(compact)[name], beta, rtol=0, atol=1e-10)
    pd.testing.assert_frame_equal(compact.pop("predictions.parquet"), typed.pop("predictions.parquet"))  # type: ignore[arg-type]
    assert compact == typed


def test_compact_book_keeps_the_split_and_the_policies(tmp_path: Path) -> None:
    frame = _book(600)
    book = write_book(frame, tmp_path / "book.csv")
    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC_TEXT)
    typed = load_book(book, load_spec(spec))
    compact = load_book(book, load_spec(spec), compact=True)
    np.testing.assert_array_equal(compact.holdout, typed.holdout)
    np.testing.assert_array_equal(pd.factorize(compact.policy)[0], pd.factorize(typed.policy)[0])
    assert compact.policy.dtype == np.uint64
    for name in ("region", "bonus"):
        assert isinstance(compact.frame[name].dtype, pd.CategoricalDtype)
        np.testing.assert_array_equal(compact.frame[name].to_numpy(dtype=object), typed.frame[name].to_numpy())
    np.testing.assert_array_equal(compact.frame["age"].to_numpy(), typed.frame["age"].to_numpy())
    assert compact.current_premium is None and typed.current_premium is None
