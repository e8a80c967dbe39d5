"""Benchmark: premiumlab's GLM baselines against statsmodels GLM on the row-level dense design.

Run by hand: ``python benchmarks/glm_fit.py [--rows N]``. Invented books, seeded.

(a) six banded factors, under 20,000 cells (cells engine); Poisson frequency, Gamma severity and
    Tweedie pure premium (power 1.5);
(b) ten factors, cells close to rows (rows engine); Poisson frequency;
(c) where the engines cross: both engines timed on books with a growing number of cells, the
    evidence for the ``auto`` rule (cells when at most max(1,000, 50 % of rows)).

statsmodels is timed on ``GLM(...).fit()`` alone (dense one-hot exog built beforehand, var_weights,
offset log exposure for Poisson); premiumlab on the whole public function, input checks, cell
aggregation and the chunked row-level statistics included, without penalty (the fit statsmodels
makes) and, timed beside it, with the credibility penalty.
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np
import pandas as pd
import statsmodels.api as sm

from premiumlab.models.glm.fit import GlmInputs, GlmResult, fit_frequency, fit_pure_premium, fit_severity

TWEEDIE_POWER = 1.5
BANDED_SIZES = (8, 6, 5, 5, 4, 3)
WIDE_SIZES = (12, 10, 8, 8, 6, 6, 5, 5, 4, 4)


def invented_book(n_rows: int, sizes: tuple[int, ...], seed: int) -> GlmInputs:
    """Skewed level shares, Poisson counts (frequency about 0.1), Gamma amounts."""
    rng = np.random.default_rng(seed)
    factors, log_frequency = {}, np.full(n_rows, np.log(0.1))
    for j, size in enumerate(sizes):
        codes = rng.choice(size, n_rows, p=rng.dirichlet(np.full(size, 2.0)))
        factors[f"factor_{j}"] = pd.Categorical.from_codes(codes, [f"band_{k:02d}" for k in range(size)])
        log_frequency += rng.normal(0.0, 0.15, size)[codes]
    exposure = rng.uniform(0.25, 1.0, n_rows)
    count = rng.poisson(exposure * np.exp(log_frequency)).astype(float)
    amount = np.where(count > 0, rng.gamma(2.0 * np.maximum(count, 1.0), 1_200.0), 0.0)
    frame = pd.DataFrame(factors)
    base = {name: frame[name].value_counts().idxmax() for name in frame}
    return GlmInputs(frame, base, exposure, count, amount)


def dense_design(inputs: GlmInputs) -> np.ndarray:
    """Intercept and treatment dummies in premiumlab's term order (same base levels)."""
    columns = [np.ones(len(inputs.exposure))]
    for name in inputs.factors:
        column = inputs.factors[name]
        codes, base = column.cat.codes.to_numpy(), list(column.cat.categories).index(inputs.base_levels[name])
        columns += [(codes == k).astype(float) for k in range(len(column.cat.categories)) if k != base]
    return np.column_stack(columns)


def statsmodels_fit(inputs: GlmInputs, exog: np.ndarray, family: str) -> tuple[np.ndarray, float]:
    count, amount, exposure = inputs.claim_count, inputs.claim_amount, inputs.exposure
    if family == "poisson":
        model = sm.GLM(count, exog, family=sm.families.Poisson(), offset=np.log(exposure))
    elif family == "gamma":
        rows = (count > 0) & (amount > 0)
        model = sm.GLM(
            amount[rows] / count[rows],
            exog[rows],
            var_weights=count[rows],
            family=sm.families.Gamma(link=sm.families.links.Log()),
        )
    else:
        model = sm.GLM(
            amount / exposure,
            exog,
            var_weights=exposure,
            family=sm.families.Tweedie(var_power=TWEEDIE_POWER, eql=False),
        )
    started = time.perf_counter()
    fit = model.fit()
    return np.asarray(fit.params), time.perf_counter() - started


def ours(inputs: GlmInputs, family: str, engine: str = "auto", penalty: str = "none") -> tuple[GlmResult, float]:
    started = time.perf_counter()
    if family == "poisson":
        result = fit_frequency(inputs, engine=engine, penalty=penalty)
    elif family == "gamma":
        result = fit_severity(inputs, engine=engine, penalty=penalty)
    else:
        result = fit_pure_premium(inputs, power=TWEEDIE_POWER, engine=engine, penalty=penalty)
    return result, time.perf_counter() - started


def compare(label: str, inputs: GlmInputs, families: tuple[str, ...], required_ratio: float) -> None:
    exog = dense_design(inputs)
    for family in families:
        result, our_seconds = ours(inputs, family)
        _, credibility_seconds = ours(inputs, family, penalty="credibility")
        reference, reference_seconds = statsmodels_fit(inputs, exog, family)
        estimates = np.array([row["estimate"] for row in result.coefficients])
        ratio = reference_seconds / our_seconds
        print(
            f"{label} {family:8s} rows {result.n_rows:>9,d}  cells {result.n_cells:>9,d}  "
            f"params {len(estimates):3d}  engine {result.engine:5s}  premiumlab {our_seconds:7.2f} s  "
            f"statsmodels {reference_seconds:7.2f} s  ratio {ratio:6.1f}x (need >= {required_ratio:g})  "
            f"max |coef diff| {np.max(np.abs(estimates - reference)):.2e}  "
            f"with the credibility penalty {credibility_seconds:7.2f} s",
            flush=True,
        )


def crossover(n_rows: int) -> None:
    """Both engines on Poisson books whose cell count grows (four to seven factors)."""
    for sizes in (
        (10, 10, 10),
        (10, 10, 10, 5),
        (10, 10, 10, 10, 5),
        (12, 10, 10, 10, 8, 5),
        (12, 10, 10, 10, 8, 8, 5),
    ):
        inputs = invented_book(n_rows, sizes, seed=len(sizes))
        cells, cells_seconds = ours(inputs, "poisson", engine="cells")
        _, rows_seconds = ours(inputs, "poisson", engine="rows")
        print(
            f"(c) cells {cells.n_cells:>9,d} ({cells.n_cells / n_rows:6.1%} of rows)  cells engine "
            f"{cells_seconds:6.2f} s  rows engine {rows_seconds:6.2f} s",
            flush=True,
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000, help="policies per book (default 1,000,000)")
    parser.add_argument("--skip-crossover", action="store_true", help="skip part (c)")
    rows = parser.parse_args().rows
    print(f"load average before the run (1, 5, 15 min): {os.getloadavg()}; cores: {os.cpu_count()}", flush=True)
    compare("(a)", invented_book(rows, BANDED_SIZES, seed=1), ("poisson", "gamma", "tweedie"), 20)
    compare("(b)", invented_book(rows, WIDE_SIZES, seed=2), ("poisson",), 5)
    if not parser.parse_args().skip_crossover:
        crossover(rows)


if __name__ == "__main__":
    main()
