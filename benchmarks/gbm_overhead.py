"""Overhead of premiumlab's final boosted fit against a bare `lightgbm.train` (run by hand).

    /tmp/venv/bin/python benchmarks/gbm_overhead.py [--rows 300000] [--rounds 300] [--repeats 5]

Both sides fit the same invented pure-premium book (Tweedie, a monotone factor, a native
categorical) with the same parameters and rounds, alternating: premiumlab's `fit_final` (LightGBM
Dataset from the encoded matrix, training, balance from the cached training scores) and
`lightgbm.Dataset` + `lightgbm.train`. The encoding step (`prepare_training`: validation and
category codes) is timed on its own. Prints medians, min and max, and the overhead of the medians;
both models' text must be identical.
"""

from __future__ import annotations

import argparse
import statistics
import time

import lightgbm as lgb
import numpy as np
import pandas as pd

from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.gbm.fit import fit_final
from premiumlab.models.gbm.training import GbmInputs, prepare_training

SETTING = {"num_leaves": 31, "min_data_in_leaf": 200, "learning_rate": 0.05, "lambda_l2": 1.0}


def invented_book(rows: int, seed: int = 1) -> GbmInputs:
    """Fictional motor book: six numeric factors, a 12-level region, Poisson counts, gamma amounts."""
    rng = np.random.default_rng(seed)
    numeric = {f"factor_{i}": rng.normal(0.0, 1.0, rows) for i in range(6)}
    region = pd.Categorical(rng.choice([f"zone_{i:02d}" for i in range(12)], rows))
    log_mu = (
        np.log(0.1)
        + 0.3 * numeric["factor_0"]
        + 0.2 * np.sin(numeric["factor_1"])
        + 0.2 * numeric["factor_2"] * numeric["factor_3"]
        + 0.05 * region.codes
    )
    exposure = rng.uniform(0.2, 1.0, rows)
    count = rng.poisson(np.exp(log_mu) * exposure)
    amount = np.where(count > 0, rng.gamma(2.0 * np.maximum(count, 1), 800.0), 0.0)
    features = pd.DataFrame({**numeric, "region": region})
    return GbmInputs(features, {"factor_0": 1}, exposure, count, amount, np.arange(rows))


def timed(function) -> tuple[float, object]:
    start = time.perf_counter()
    result = function()
    return time.perf_counter() - start, result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=300_000)
    parser.add_argument("--rounds", type=int, default=300)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--threads", type=int, default=2)
    args = parser.parse_args()
    inputs = invented_book(args.rows)
    options = GbmOptions(num_threads=args.threads, tweedie_power=1.5)
    prepare_seconds, data = timed(lambda: prepare_training(inputs, "pure_premium", options))
    params = {**data.base_params, **SETTING}

    def bare() -> lgb.Booster:
        dataset = lgb.Dataset(
            data.matrix,
            label=data.label,
            weight=data.weight,
            feature_name=data.feature_names,
            categorical_feature=data.categorical_indices,
            params=params,
        )
        return lgb.train(params, dataset, num_boost_round=args.rounds)

    ours, theirs = [], []
    for _ in range(args.repeats):
        seconds, model = timed(lambda: fit_final(data, SETTING, args.rounds))
        ours.append(seconds)
        seconds, booster = timed(bare)
        theirs.append(seconds)
        if model.model_text() != booster.model_to_string():
            raise SystemExit("the two fits differ: the comparison is not like for like")
    overhead = statistics.median(ours) / statistics.median(theirs) - 1
    print(
        f"book: {args.rows} rows, {len(data.feature_names)} features, {args.rounds} rounds, "
        f"{args.threads} threads; prepare_training once: {prepare_seconds:.3f} s"
    )
    for name, runs in (("premiumlab fit_final", ours), ("bare lightgbm.train", theirs)):
        print(
            f"{name:22s} median {statistics.median(runs):7.3f} s  min {min(runs):7.3f}  max {max(runs):7.3f}  "
            f"runs {', '.join(f'{r:.3f}' for r in runs)}"
        )
    print(f"overhead of the medians: {overhead:+.1%} (limit +10%)")


if __name__ == "__main__":
    main()
