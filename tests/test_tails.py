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


def test_mean_excess_standard_error_is_the_sd_of_the_excesses_over_root_n():
    """Standard error of e(u) = sample sd (ddof 1) of the excesses / sqrt(n), by definition (1e-9);
    NaN with one exceedance."""
    x = genpareto.rvs(0.4, scale=5e5, size=3000, random_state=np.random.default_rng(2)) + 1e6
    u = np.quantile(x, [0.0, 0.5, 0.9, 0.99])
    table = _mean_excess(x, u)
    for t, se in zip(u, table["standard_error"]):
        excess = x[x > t] - t
        assert se == pytest.approx(excess.std(ddof=1) / np.sqrt(excess.size), rel=1e-9)
    assert np.isnan(_mean_excess(x, np.array([np.sort(x)[-2]]))["standard_error"].iloc[0])


SHAPE, SCALE, N = 0.3, 10_000.0, 2000


def test_standard_errors_match_a_numerical_hessian_and_the_spread_of_repeated_fits():
    """Simulator recovery on draws from scipy.stats.genpareto (shape 0.3, scale 10,000, n = 2,000):
    the closed-form covariance (recalled from memory) is within 10 % of the inverse of a numerical
    Hessian of the negative log-likelihood at the estimate (scipy.differentiate.hessian), with the
    same negative correlation; over 50 samples the spread of the estimates is within 25 % of the
    standard errors; the 95 % profile interval of the first sample covers 0.3 and lies within 0.03
    of estimate +- 1.96 standard errors."""
    from scipy.differentiate import hessian

    rng = np.random.default_rng(12)
    samples = [genpareto.rvs(SHAPE, scale=SCALE, size=N, random_state=rng) for _ in range(50)]
    fits = [_fit_tail(y, 0.0) for y in samples]
    first, y = fits[0], samples[0]

    def nll(p: np.ndarray) -> np.ndarray:  # p = (shape, scale / fitted scale), any trailing shape
        xi, b = p[0][..., None], p[1][..., None] * first.scale
        return -genpareto.logpdf(y, xi, scale=b).sum(axis=-1)

    h = hessian(nll, np.array([first.shape, 1.0]), initial_step=0.05).ddf
    numerical = np.linalg.inv(h) * np.array([[1.0, first.scale], [first.scale, first.scale**2]])
    closed = _gpd_covariance(first.shape, first.scale, N)
    np.testing.assert_allclose(np.sqrt(np.diag(closed)), np.sqrt(np.diag(numerical)), rtol=0.10)
    corr = [c[0, 1] / np.sqrt(c[0, 0] * c[1, 1]) for c in (closed, numerical)]
    assert corr[0] < 0 and corr[0] == pytest.approx(corr[1], abs=0.1)
    assert (first.shape_se, first.scale_se) == pytest.approx(np.sqrt(np.diag(closed)), rel=1e-12)

    shapes, scales = np.array([f.shape for f in fits]), np.array([f.scale for f in fits])
    assert shapes.std(ddof=1) == pytest.approx(np.mean([f.shape_se for f in fits]), rel=0.25)
    assert scales.std(ddof=1) == pytest.approx(np.mean([f.scale_se for f in fits]), rel=0.25)

    low, high = _profile_interval(y, first.shape, first.scale, first.shape_se)
    assert low is not None and high is not None and low < SHAPE < high
    assert (low, high) == pytest.approx(
        (first.shape - 1.96 * first.shape_se, first.shape + 1.96 * first.shape_se), abs=0.03
    )


def test_stability_table_is_level_above_a_generalised_pareto_threshold():
    """Simulator recovery: losses generalised Pareto from 0 (shape 0.3, scale 10,000, n = 4,000).
    Above any u the excesses are generalised Pareto with shape 0.3 and scale 10,000 + 0.3 u, so the
    modified scale beta - xi u is 10,000 at every threshold (recalled from memory); every row of
    the stability table is within 3 standard errors of both, and the rows are the 80 % to 99 %
    quantiles."""
    x = genpareto.rvs(SHAPE, scale=SCALE, size=4000, random_state=np.random.default_rng(5))
    rows = _stability_rows(x)
    assert [r["threshold"] for r in rows] == pytest.approx(np.quantile(x, np.linspace(0.8, 0.99, 10)).tolist())
    for row in rows:
        assert row["exceedances"] >= MIN_EXCEEDANCES
        assert abs(row["shape"] - SHAPE) < 3 * row["shape_se"]
        assert abs(row["modified_scale"] - SCALE) < 3 * row["modified_scale_se"]


def test_tails_marks_threshold_and_cap_and_reports_per_claim_basis(tmp_path):
    """With a claims file the losses are the claims (more than the rows with a loss), and the
    result says so in the JSON and the text; the mean-excess table runs down to 5 exceedances and
    has the threshold's and the cap's rows; the fit carries standard errors, the interval and the
    stability table."""
    book, claims = claims_book(tmp_path)
    (tmp_path / "spec.toml").write_text(
        SPEC_TEXT
        + "\n[experience]\nlarge_loss_cap = 3000.0\nclaims_file = 'claims.csv'\ncatastrophe_column = 'storm'\n"
    )
    args = ("tails", str(tmp_path / "book.csv"), "--spec", str(tmp_path / "spec.toml"), "--threshold", "500")
    out = json.loads(run_cli(*args, "--json").stdout)
    per_claim = int((~claims["storm"] & (claims["claim_amount"] > 0)).sum())
    assert out["basis"].startswith(BASIS_CLAIMS) and out["losses"] == per_claim > int((book["claim_amount"] > 0).sum())
    marks = {row["mark"]: row for row in out["mean_excess"] if row["mark"]}
    assert marks["threshold"]["threshold"] == 500.0 and marks["large_loss_cap"]["threshold"] == 3000.0
    grid_rows = [row for row in out["mean_excess"] if not row["mark"]]
    assert grid_rows[-1]["exceedances"] == TABLE_MIN_EXCEEDANCES
    assert out["large_loss_cap"] == 3000.0 and out["shape_se"] > 0 and out["scale_se"] > 0
    low, high = out["shape_interval"]
    assert low < out["shape"] < high
    assert out["stability"] and {"shape", "shape_se", "modified_scale", "modified_scale_se"} <= set(out["stability"][0])
    text = run_cli(*args).stdout
    assert f"({BASIS_CLAIMS}" in text and "<- threshold" in text and "<- large_loss_cap" in text
    assert "shape by threshold" in text and "95% profile interval" in text


def test_figure_labels_amounts_with_separators_and_ticks_do_not_overlap(tmp_path):
    """The figure of a tail in the hundreds of thousands: the legend says "threshold 25,000", every
    tick label is an amount without an exponent, and no two tick labels of an axis overlap."""
    from premiumlab._core.plotting import save_figure

    x = 20_000 + genpareto.rvs(0.5, scale=15_000, size=3000, random_state=np.random.default_rng(8))
    x = np.concatenate([np.random.default_rng(9).uniform(0, 20_000, 6000), x])
    fit = _fit_tail(x, 25_000.0)
    fig = _tail_figure(x, fit, _stability_rows(x), "per policy-period row totals", 250_000.0)
    save_figure(fig, tmp_path / "tail.png")
    assert amount_text(25_000.0) == "25,000" and amount_text(1_042_700.5) == "1,042,700"
    renderer = fig.canvas.get_renderer()
    legends = [t.get_text() for ax in fig.axes if ax.get_legend() for t in ax.get_legend().get_texts()]
    assert "threshold 25,000" in legends and "large_loss_cap 250,000" in legends
    for ax in fig.axes:
        for labels in (ax.get_xticklabels(), ax.get_yticklabels()):
            shown = [t for t in labels if t.get_visible() and t.get_text()]
            assert all("e+" not in t.get_text() for t in shown)
            boxes = [t.get_window_extent(renderer) for t in shown]
            for a, b in zip(boxes, boxes[1:]):
                assert not a.overlaps(b), (ax.get_title(), [t.get_text() for t in shown])
