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
    """The experience step: adjusted counts and amounts of every row (premiumlab.experience).

    Parameters
    ----------
    book : Book
        The loaded book: observed claim counts and, when the spec names them, claim amounts (money).
    spec : Spec
        The pricing spec; its [experience] section says what is adjusted.
    spec_dir : Path
        The spec's folder, against which the development CSV and claims file are resolved.
    periods : np.ndarray or None
        Period label of every row (None when the spec names no period column).
    train : np.ndarray
        Boolean mask of the training rows.

    Returns
    -------
    Adjustment
        Per row: the count after catastrophe claims, the count multiplier (development and
        frequency trend; adjusted count = count_base x count_multiplier) and the adjusted amount;
        with the record written to RUN/experience.json.
    """
    count = book.claim_count.astype(float)
    return prepare(spec, spec_dir, periods, book.policy, count, book.claim_amount, train)


def adjusted_book(book: Book, adjustment: Adjustment) -> Book:
    """The book with its counts and amounts replaced by the adjusted ones (what every model sees).

    Parameters
    ----------
    book : Book
        The book as observed.
    adjustment : Adjustment
        The experience step's result for the same rows (`adjust_book`).

    Returns
    -------
    Book
        A copy with claim_count = count_base x count_multiplier and, when the book has amounts,
        claim_amount = the adjusted amounts (money); every other field as in `book`.
    """
    amount = None if book.claim_amount is None else adjustment.amount
    return replace(book, claim_count=adjustment.count, claim_amount=amount)


def add_adjusted_columns(preds: pd.DataFrame, adjusted: Book) -> None:
    """Add the adjusted counts (and amounts, when the book has them) to the predictions frame.

    Parameters
    ----------
    preds : pd.DataFrame
        The run's predictions frame, one row per book row, changed in place: it gains
        `claim_count_adjusted` and, with amounts, `claim_amount_adjusted`.
    adjusted : Book
        The book with adjusted figures (`adjusted_book`), in the frame's row order.
    """
    preds[_adjusted_column("claim_count")] = adjusted.claim_count
    if adjusted.claim_amount is not None:
        preds[_adjusted_column("claim_amount")] = adjusted.claim_amount


def fitted_basis(preds: pd.DataFrame) -> pd.DataFrame:
    """Predictions with the adjusted counts and amounts, when there are any, in the observed columns:
    the figures the models were fitted to.

    Parameters
    ----------
    preds : pd.DataFrame
        predictions.parquet as written by `fit`, with or without `*_adjusted` columns.

    Returns
    -------
    pd.DataFrame
        `preds` itself when it has no adjusted columns; else a copy in which `claim_count_adjusted`
        (and `claim_amount_adjusted`) replace `claim_count` (and `claim_amount`) under the observed
        names.
    """
    swap = {_adjusted_column(name): name for name in ADJUSTABLE if _adjusted_column(name) in preds}
    return preds.drop(columns=list(swap.values())).rename(columns=swap) if swap else preds
