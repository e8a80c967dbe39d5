"""The gross premium formula against the fundamental insurance equation.

Source: G. Werner and C. Modlin, *Basic Ratemaking* (Casualty Actuarial Society): the fundamental
insurance equation, premium = losses + LAE + underwriting expenses + underwriting profit, and the
indicated rate per exposure of the pure premium method,
    indicated rate = (pure premium including LAE + fixed expense per exposure) / (1 - V - Q),
with V the variable expense provision and Q the profit provision, both shares of premium.
Figures constructed for this test, formula as published; not recalled from the text.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from rating_tables import CategoricalFactor, Loadings, RatingTable, rate

# Constructed example: losses 250.00 per exposure, LAE 8 % of losses, fixed expense 40.00 per exposure,
# variable expense 15 % and profit 5 % of premium.
LOSS_PER_EXPOSURE = 250.0
LAE_RATIO, FIXED, VARIABLE, PROFIT = 0.08, 40.0, 0.15, 0.05


def _table(minimum_premium: float = 0.0) -> RatingTable:
    level = CategoricalFactor("cover", "none", ("standard",), [1.0], [1.0])
    return RatingTable(
        "fundamental-equation-check",
        "2027-01-01",
        LOSS_PER_EXPOSURE,
        "exposure",
        (level,),
        Loadings(LAE_RATIO, FIXED, VARIABLE, PROFIT, minimum_premium),
    )


def test_indicated_rate_per_exposure():
    """Pure premium incl. LAE = 250 x 1.08 = 270; indicated rate = (270 + 40) / (1 - 0.15 - 0.05) = 310 / 0.8
    = 387.50 per exposure."""
    rated = rate(_table(), pd.DataFrame({"cover": ["standard"], "exposure": [1.0]}), "exposure")
    assert rated["pure_premium"].iloc[0] == pytest.approx(250.0, rel=1e-15)
    assert rated["gross_premium"].iloc[0] == pytest.approx(387.50, abs=0.005)


def test_the_premium_balances_the_fundamental_equation():
    """387.50 = losses 250 + LAE 20 + fixed 40 + variable 15 % x 387.50 (58.125) + profit 5 % x 387.50
    (19.375): premium equals losses + LAE + underwriting expenses + underwriting profit."""
    premium = rate(_table(), pd.DataFrame({"cover": ["standard"], "exposure": [1.0]}), "exposure")[
        "gross_premium"
    ].iloc[0]
    balance = LOSS_PER_EXPOSURE * (1 + LAE_RATIO) + FIXED + (VARIABLE + PROFIT) * premium
    assert premium == pytest.approx(balance, abs=1e-9)
    # permissible loss ratio (losses and LAE over premium) = 1 - V - Q - F / premium = 270 / 387.5 = 0.69677...
    assert 270.0 / premium == pytest.approx(1 - VARIABLE - PROFIT - FIXED / premium, rel=1e-12)


def test_fixed_expense_scales_with_exposure_and_the_minimum_applies_per_full_term():
    """Half a year: (125 x 1.08 + 40 x 0.5) / 0.8 = (135 + 20) / 0.8 = 193.75, one tenth of a year:
    (25 x 1.08 + 4) / 0.8 = 38.75. A minimum premium is an amount per full term (docs/rating-table.md):
    50.00 does not lift the full-term premium 387.50, so neither row moves; 400.00 does, and each row
    is charged it earned with its exposure, 200.00 and 40.00."""
    book = pd.DataFrame({"cover": ["standard", "standard"], "exposure": [0.5, 0.1]})
    gross = rate(_table(minimum_premium=50.0), book, "exposure")["gross_premium"].to_numpy()
    np.testing.assert_allclose(gross, [193.75, 38.75], atol=0.005)
    lifted = rate(_table(minimum_premium=400.0), book, "exposure")
    np.testing.assert_allclose(lifted["gross_premium"], [200.0, 40.0], atol=0.005)
    assert lifted["at_minimum"].tolist() == [True, True]
