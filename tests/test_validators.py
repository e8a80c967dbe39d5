"""The one array check (`premiumlab._core.validators`): what it refuses and how its message reads."""

from __future__ import annotations

import numpy as np
import pytest

from premiumlab._core.errors import InputError
from premiumlab._core.validators import ABOVE_ZERO, AT_LEAST_ZERO, COUNT, checked_array, checked_arrays, checked_weights


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: checked_array("x", ["1", "a"]), "x: values are not numeric (could not convert string to float: 'a')"),
        (lambda: checked_array("x", [[1.0, 2.0]]), "x: expected a one-dimensional array, got shape (1, 2)"),
        (lambda: checked_array("x", [1.0, 2.0], rows=3), "x: expected 3 rows, got shape (2,)"),
        (lambda: checked_array("x", []), "x: no rows"),
        (lambda: checked_array("x", [1.0, np.inf, np.nan]), "x: 2 value(s) not finite, first at row 1 (value inf)"),
        (lambda: checked_array("x", [1.0, 0.0, -1.0], ABOVE_ZERO), "x: 2 value(s) not > 0, first at row 1 (value 0.0)"),
        (
            lambda: checked_array("x", [1.0, -1.0], AT_LEAST_ZERO.because("why")),
            "x: 1 value(s) not >= 0 (why), first at row 1 (value -1.0)",
        ),
        (
            lambda: checked_array("n", [0.0, 2.5], COUNT),
            "n: 1 value(s) not a whole number >= 0, first at row 1 (value 2.5)",
        ),
        (
            lambda: checked_array("curve", [1.0, np.nan], unit="point"),
            "curve: 1 value(s) not finite, first at point 1 (value nan)",
        ),
        (lambda: checked_arrays(a=[1.0], b=[1.0, 2.0]), "length mismatch: a has 1, b has 2 rows"),
        (lambda: checked_weights("w", [0.0, 0.0]), "w: the total is 0; at least one row needs a positive value"),
    ],
)
def test_bad_values_are_refused_with_the_count_and_the_first_row(call, message):
    with pytest.raises(InputError) as error:
        call()
    assert str(error.value) == message


def test_good_values_come_back_as_float64_without_a_copy():
    values = np.array([0.0, 1.0, 2.0])
    assert checked_array("x", values, COUNT, rows=3) is values
    assert checked_array("x", [1, 2]).dtype == np.float64
    assert checked_array("x", [], rows=0).shape == (0,)
