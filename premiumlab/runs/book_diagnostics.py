"""The diagnostics `fit` records about the book itself (run.json `diagnostics`): missing values
priced as their own level or band, and levels met only outside the training rows.

Unseen levels are priced at their complement: the base level or band (relativity 1) in the GLMs,
and in the boosted models the branch LightGBM gives a category it did not see in training (the side
of each categorical split away from the listed categories) or, for a missing numeric value, the
split's default way for missing values.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from premiumlab._core.diagnostics import Diagnostic
from premiumlab.book.levels import Levels, is_missing
from rating_tables import MISSING_LABEL

#: Unseen levels named in a diagnostic's message (the count covers all of them).
SHOW_LEVELS = 5


def book_diagnostics(
    frame: pd.DataFrame, levels: dict[str, Levels], train: np.ndarray, exposure: np.ndarray
) -> list[Diagnostic]:
    """Per factor, a `missing_values` diagnostic when its levels have the missing label and an
    `unseen_levels` one when rows outside the training part hold a level (or a missing value) that
    the training rows do not.

    Parameters
    ----------
    frame : pd.DataFrame
        The factor columns of the typed book (`Book.frame`): float64 (NaN where missing) or text
        ("" where missing).
    levels : dict[str, Levels]
        The cut of each factor, fixed on the training rows (`factor_levels`).
    train : np.ndarray
        Boolean mask of the training rows.
    exposure : np.ndarray
        Exposure of every row, in the book's exposure unit.

    Returns
    -------
    list[Diagnostic]
        In factor order, model "book": `missing_values` (level `MISSING_LABEL`; the training and
        held-out rows with a missing value and the share of training exposure) and `unseen_levels`
        (level: the first unseen one; the number of unseen levels, their rows and the first
        `SHOW_LEVELS` of them in order of first appearance, and the complement they are priced at).
    """
    out = []
    for name, lv in levels.items():
        values = frame[name].to_numpy()
        missing = is_missing(values)
        if lv.missing:
            in_train = int((missing & train).sum())
            share = float(exposure[missing & train].sum() / exposure[train].sum())
            out.append(
                Diagnostic(
                    "missing_values",
                    "book",
                    f"{in_train} training rows ({share:.2%} of training exposure) and {int((missing & ~train).sum())} "
                    f"held-out rows have no value; priced as their own "
                    f"{'band' if lv.edges is not None else 'level'} '{MISSING_LABEL}' in every model",
                    factor=name,
                    level=MISSING_LABEL,
                )
            )
        unseen = lv.codes(values) < 0
        assert not (unseen & train).any(), "the levels are fixed on the training rows"
        if unseen.any():
            shown = pd.unique(np.where(missing[unseen], MISSING_LABEL, values[unseen].astype(str)))
            kind = "band" if lv.edges is not None else "level"
            listed = ", ".join(f"'{v}'" for v in shown[:SHOW_LEVELS]) + (", ..." if len(shown) > SHOW_LEVELS else "")
            out.append(
                Diagnostic(
                    "unseen_levels",
                    "book",
                    f"{len(shown)} {kind}{'s' if len(shown) != 1 else ''} met only outside the training rows, on "
                    f"{int(unseen.sum())} rows: {listed}; priced at their complement: the base {kind} "
                    f"'{lv.base}' (relativity 1) in the GLMs, LightGBM's way for categories or missing values "
                    f"unseen in training in the boosted models",
                    factor=name,
                    level=str(shown[0]),
                )
            )
    return out
