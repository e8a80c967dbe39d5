"""The threshold aid: mean excess and the generalised Pareto fit, checked against scipy.stats.

References: scipy.stats.genpareto (its conditional expectation of the excess over u, and its
maximum-likelihood fit); the threshold-stability property that a generalised Pareto tail has mean
excess (beta + xi u) / (1 - xi), linear in u (recalled from memory; checked here against scipy's
numerical expectation). Books and claims files are invented.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.stats import genpareto

from premiumlab._core.errors import InputError
from premiumlab.experience.tails import (
    BASIS_CLAIMS,
    MIN_EXCEEDANCES,
    TABLE_MIN_EXCEEDANCES,
    _fit_tail,
    _gpd_covariance,
    _mean_excess,
    _profile_interval,
    _stability_rows,
    _tail_figure,
    _threshold_grid,
    amount_text,
    threshold_aid,
)

from _builders import SPEC_TEXT, run_cli, small_book

XI, BETA = 0.3, 1000.0


def test_mean_excess_of_a_gpd_sample_follows_scipy():
    """On 200,000 draws: e(u) within 2 % of scipy's E[X - u | X > u] = (beta + xi u) / (1 - xi)."""
    x = genpareto.rvs(XI, scale=BETA, size=200_000, random_state=np.random.default_rng(1))
    u = np.array([0.0, 500.0, 2000.0])
    table = _mean_excess(x, u)
    reference = [genpareto.expect(lambda y, t=t: y - t, args=(XI,), scale=BETA, lb=t, conditional=True) for t in u]
    np.testing.assert_allclose(reference, (BETA + XI * u) / (1 - XI), rtol=1e-6)
    np.testing.assert_allclose(table["mean_excess"], reference, rtol=0.02)
    assert table["exceedances"].tolist() == [int((x > t).sum()) for t in u]


def test_mean_excess_by_definition_with_ties():
    x = np.array([1.0, 2.0, 2.0, 5.0])
    table = _mean_excess(x, np.array([0.0, 2.0, 5.0]))
    assert table["exceedances"].tolist() == [4, 1, 0]
    assert table["mean_excess"].iloc[0] == pytest.approx(2.5) and table["mean_excess"].iloc[1] == pytest.approx(3.0)
    assert np.isnan(table["mean_excess"].iloc[2])
    grid = _threshold_grid(np.arange(100.0))
    assert grid[0] == 0.0 and (np.arange(100.0) > grid[-1]).sum() == TABLE_MIN_EXCEEDANCES
    k = (np.arange(100.0)[:, None] > grid).sum(axis=0)  # exceedances: spaced evenly in log k (ratios alike)
    assert k[0] == 99 and np.all(np.diff(k) < 0)


def test_fit_above_a_threshold_recovers_the_tail():
    """Draws from a GPD shifted to start at 5,000 (invented): the fit above 5,000 recovers shape and
    scale within three standard errors (se(xi) ~ (1 + xi) / sqrt(n), se(beta) ~ beta sqrt(2 (1 + xi) / n),
    recalled from memory) and equals scipy's own fit to 1e-9."""
    rng = np.random.default_rng(4)
    x = np.concatenate([rng.uniform(0, 5000, 8000), 5000 + genpareto.rvs(XI, scale=BETA, size=2000, random_state=rng)])
    fit = _fit_tail(x, 5000.0)
    assert fit.exceedances == 2000 and fit.share_of_losses == pytest.approx(0.2)
    assert fit.shape == pytest.approx(XI, abs=3 * (1 + XI) / np.sqrt(2000))
    assert fit.scale == pytest.approx(BETA, abs=3 * BETA * np.sqrt(2 * (1 + XI) / 2000))
    shape, _, scale = genpareto.fit(x[x > 5000] - 5000, floc=0)
    assert (fit.shape, fit.scale) == pytest.approx((shape, scale), rel=1e-9)
    with pytest.raises(InputError, match="leaves 0 losses above it"):
        _fit_tail(x, 1e12)


def claims_book(tmp_path) -> tuple:
    """A small book whose claims file splits each row's amount in two claims, one in ten storm-flagged."""
    book = small_book(600, seed=9)
    book.to_csv(tmp_path / "book.csv", index=False)
    with_claims = book[book["claim_amount"] > 0]
    first = np.round(with_claims["claim_amount"].to_numpy() * 0.7, 2)
    claims = pd.DataFrame(
        {
            "policy_id": np.repeat(with_claims["policy_id"].to_numpy(), 2),
            "year": 2025,
            "claim_amount": np.column_stack([first, with_claims["claim_amount"].to_numpy() - first]).ravel(),
        }
    )
    claims["storm"] = np.arange(len(claims)) % 10 == 0
    claims.to_csv(tmp_path / "claims.csv", index=False)
    return book, claims


def test_tails_through_the_cli_on_single_claims_without_catastrophes(tmp_path):
    """With a claims file the losses are the claims that are not storm-flagged, trended 4 % a year
    from mid-2025 to mid-2027 (1.04^2); --json gives threshold, exceedances, shape and scale."""
    _book, claims = claims_book(tmp_path)
    (tmp_path / "spec.toml").write_text(
        SPEC_TEXT
        + (
            "\n[experience]\nlarge_loss_cap = 3000.0\nclaims_file = 'claims.csv'\ncatastrophe_column = 'storm'\n"
            "trend = { severity = 0.04 }\n"
        )
    )
    r = run_cli(
        "tails", str(tmp_path / "book.csv"), "--spec", str(tmp_path / "spec.toml"), "--threshold", "500", "--json"
    )
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    losses = claims.loc[~claims["storm"] & (claims["claim_amount"] > 0), "claim_amount"].to_numpy() * 1.04**2
    assert out["losses"] == losses.size and out["exceedances"] == int((losses > 500).sum())
    shape, _, scale = genpareto.fit(losses[losses > 500] - 500, floc=0)
    assert (out["shape"], out["scale"]) == pytest.approx((shape, scale), rel=1e-9)
    assert "single claims" in out["basis"] and "trended" in out["basis"]


def test_tails_cli_text_figure_and_refusals(tmp_path):
    book = small_book(600, seed=9)
    book.to_csv(tmp_path / "book.csv", index=False)
    (tmp_path / "spec.toml").write_text(SPEC_TEXT)
    figure = tmp_path / "tail.png"
    r = run_cli("tails", str(tmp_path / "book.csv"), "--spec", str(tmp_path / "spec.toml"), "--figure", str(figure))
    assert r.returncode == 0, r.stderr
    losses = book.loc[book["claim_amount"] > 0, "claim_amount"].to_numpy()
    assert f"losses: {losses.size} (per policy-period row totals)" in r.stdout and "(the 90% quantile)" in r.stdout
    assert figure.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    again = run_cli("tails", str(tmp_path / "book.csv"), "--spec", str(tmp_path / "spec.toml"), "--figure", str(figure))
    assert again.returncode == 2 and "already exists" in again.stderr
    assert len(again.stderr.strip().splitlines()) == 1
    for kwargs, fragment in [
        ({"threshold": 1e9}, "leaves 0 losses above it"),
        ({"threshold": -1.0}, "--threshold: -1.0 must be a finite amount >= 0"),
        ({"figure": tmp_path / "tail.svg"}, "must be a .png file"),
    ]:
        with pytest.raises(InputError, match=None) as info:
            threshold_aid(tmp_path / "book.csv", tmp_path / "spec.toml", **kwargs)
        assert fragment in str(info.value)
    assert not (tmp_path / "tail.svg").exists()
