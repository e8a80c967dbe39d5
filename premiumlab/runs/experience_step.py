"""The experience step inside a run: adjusted counts and amounts, and the figures the models saw.

predictions.parquet keeps `claim_count` and `claim_amount` as observed; with [experience]
adjustments it adds `claim_count_adjusted` and `claim_amount_adjusted`, the figures every model is
fitted to and metrics.json compares with.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab.book.rows import Book
from premiumlab.book.spec import Spec
from premiumlab.experience.adjustments import Adjustment, prepare

#: The observed columns of predictions.parquet that the experience step adjusts.
ADJUSTABLE = ("claim_count", "claim_amount")


def _adjusted_column(name: str) -> str:
    """The predictions.parquet column of an adjusted figure, e.g. "claim_amount_adjusted"."""
    return f"{name}_adjusted"


def adjust_book(book: Book, spec: Spec, spec_dir: Path, periods: np.ndarray | None, train: np.ndarray) -> Adjustment:
    """The experience step: adjusted counts and amounts of every row (premiumlab.experience)."""
    count = book.claim_count.astype(float)
    return prepare(spec, spec_dir, periods, book.policy, count, book.claim_amount, train)


def adjusted_book(book: Book, adjustment: Adjustment) -> Book:
    """The book with its counts and amounts replaced by the adjusted ones (what every model sees)."""
    amount = None if book.claim_amount is None else adjustment.amount
    return replace(book, claim_count=adjustment.count, claim_amount=amount)


def add_adjusted_columns(preds: pd.DataFrame, adjusted: Book) -> None:
    """Add the adjusted counts (and amounts, when the book has them) to the predictions frame."""
    preds[_adjusted_column("claim_count")] = adjusted.claim_count
    if adjusted.claim_amount is not None:
        preds[_adjusted_column("claim_amount")] = adjusted.claim_amount


def fitted_basis(preds: pd.DataFrame) -> pd.DataFrame:
    """Predictions with the adjusted counts and amounts, when there are any, in the observed columns:
    the figures the models were fitted to."""
    swap = {_adjusted_column(name): name for name in ADJUSTABLE if _adjusted_column(name) in preds}
    return preds.drop(columns=list(swap.values())).rename(columns=swap) if swap else preds
