"""Checking numeric arrays where they enter the numerics: one function, one message naming the first bad row.

`checked_array` turns values into a one-dimensional float64 array and refuses, with one
`InputError` line, values that are not numeric, the wrong shape or length, not finite, or that
break a `Rule` (such as `> 0`). The message names the array, how many values break the rule, and
the position (0-based) and value of the first, e.g.
``exposure: 2 value(s) not > 0, first at row 7 (value 0.0)``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TypeAlias

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError

ArrayLike: TypeAlias = np.ndarray | pd.Series | list


@dataclass(frozen=True)
class Rule:
    """A condition each value must meet besides being finite: `holds(array)` gives the mask of the
    values that meet it, `text` says it in a message ("not {text}")."""

    text: str
    holds: Callable[[np.ndarray], np.ndarray]

    def because(self, reason: str) -> Rule:
        """The same rule, its text followed by `(reason)`."""
        return Rule(f"{self.text} ({reason})", self.holds)


FINITE = Rule("finite", np.isfinite)
AT_LEAST_ZERO = Rule(">= 0", lambda values: values >= 0)
ABOVE_ZERO = Rule("> 0", lambda values: values > 0)
COUNT = Rule("a whole number >= 0", lambda values: (values >= 0) & (values == np.round(values)))


def checked_array(
    name: str, values: ArrayLike, rule: Rule = FINITE, rows: int | None = None, *, unit: str = "row"
) -> np.ndarray:
    """`values` as a one-dimensional float64 array whose values are all finite and meet `rule`.

    Parameters
    ----------
    name
        The array's name in messages (an argument or column name).
    values
        Array-like of numbers; a float64 array is used as is, not copied.
    rule
        The condition each finite value must meet (`FINITE`: none more).
    rows
        The exact length expected (0 allowed); None: any length of at least one.
    unit
        What one position is called in messages: `row`, or e.g. `point` for a curve.

    Returns
    -------
    numpy.ndarray
        The values, float64, shape (n,).

    Raises InputError naming `name`: values not numeric; not one-dimensional or not `rows` long
    (with the shape given); no values; values not finite; values breaking `rule` (with the count
    of such values and the position and value of the first).
    """
    try:
        array = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as error:
        raise InputError(f"{name}: values are not numeric ({error})") from None
    if rows is not None and array.shape != (rows,):
        raise InputError(f"{name}: expected {rows} {unit}s, got shape {array.shape}")
    if array.ndim != 1:
        raise InputError(f"{name}: expected a one-dimensional array, got shape {array.shape}")
    if rows is None and array.size == 0:
        raise InputError(f"{name}: no {unit}s")
    for check in (FINITE,) if rule is FINITE else (FINITE, rule):
        bad = np.flatnonzero(~check.holds(array))
        if bad.size:
            raise InputError(
                f"{name}: {bad.size} value(s) not {check.text}, first at {unit} {bad[0]} "
                f"(value {float(array[bad[0]])!r})"
            )
    return array


def checked_arrays(**named: ArrayLike) -> list[np.ndarray]:
    """Each named array through `checked_array` (finite), then one check that they have the same
    length; InputError `length mismatch: a has n, b has m rows` otherwise."""
    arrays = [checked_array(name, values) for name, values in named.items()]
    lengths = {name: array.size for name, array in zip(named, arrays)}
    if len(set(lengths.values())) > 1:
        listed = ", ".join(f"{name} has {size}" for name, size in lengths.items())
        raise InputError(f"length mismatch: {listed} rows")
    return arrays


def checked_weights(name: str, values: ArrayLike) -> np.ndarray:
    """Weights (exposure, counts): `checked_array` with every value >= 0, and a positive total."""
    weights = checked_array(name, values, AT_LEAST_ZERO)
    if weights.sum() <= 0:
        raise InputError(f"{name}: the total is 0; at least one row needs a positive value")
    return weights
