"""Measure how well a run's models and tables recover a simulated book's truth.

Usage::

    python scripts/recovery_report.py SCENARIO.toml RUN_DIR TABLE_DIR [TABLE_DIR ...] [--policies N] [--seed S]

The book of RUN_DIR must be the scenario's book drawn with the same policies and seed (the script
draws it again to get the true effects of every row and checks the claim counts match). Prints,
on the holdout rows of the run: per factor, the share of the true variance of the log relativity
that each table explains; and the policy-level error of each table and of each pure-premium model in
predictions.parquet (`premiumlab.simulation.recovery` defines both measures).
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np
import pandas as pd

import rating_tables
from premiumlab.simulation.recovery import explained_share, policy_error, true_log_relativity, true_pure_premium
from premiumlab.simulation.scenario_file import load_scenario
from premiumlab.simulation.simulator import generate

MODELS = ("glm_pure_premium", "glm_freq_x_sev", "gbm_pure_premium", "gbm_freq_x_sev")


def main() -> None:
    """Parse the arguments, draw the book again and print the recovery figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("scenario", type=Path)
    parser.add_argument("run", type=Path)
    parser.add_argument("tables", type=Path, nargs="+")
    parser.add_argument("--policies", type=int)
    parser.add_argument("--seed", type=int)
    args = parser.parse_args()

    scenario = load_scenario(args.scenario)
    drawn = generate(scenario, args.policies, args.seed)
    book = drawn.book
    preds = pd.read_parquet(args.run / "predictions.parquet")
    if len(preds) != len(book) or not np.array_equal(preds["claim_count"].to_numpy(), book["claim_count"].to_numpy()):
        raise SystemExit("the run's book is not this scenario's book with these policies and seed")
    rows = preds["holdout"].to_numpy(bool) if "holdout" in preds else np.ones(len(book), bool)
    weight = book["exposure"].to_numpy()[rows]
    truth = true_pure_premium(scenario, drawn.effects)[rows]
    factors = [f.name for f in scenario.factors]

    rated = {}
    for table_dir in args.tables:
        table = rating_tables.load(table_dir)
        rated[table_dir.name] = rating_tables.rate(table, book.iloc[np.flatnonzero(rows)], "exposure")
    print(f"holdout rows {int(rows.sum())}, exposure {weight.sum():.0f}")
    print("share of true variance explained, per factor:")
    print(f"  {'factor':20s}" + "".join(f"{name:>14s}" for name in rated))
    shares: dict[str, dict[str, float]] = {name: {} for name in rated}
    for factor in factors:
        true_log = true_log_relativity(drawn.effects, factor)[rows]
        line = f"  {factor:20s}"
        for name, frame in rated.items():
            column = f"rel_{factor}"
            share = explained_share(true_log, np.log(frame[column].to_numpy()), weight) if column in frame else np.nan
            shares[name][factor] = share
            line += f"{share:14.3f}"
        print(line)
    print("policy-level error (RMS of centred log fitted/true pure premium):")
    errors = {}
    for name, frame in rated.items():
        errors[name] = policy_error(truth, frame["pure_premium"].to_numpy() / weight, weight)
    for model in MODELS:
        if model in preds:
            errors[model] = policy_error(truth, preds[model].to_numpy()[rows], weight)
    for name, error in errors.items():
        print(f"  {name:20s}{error:8.4f}")
    print(json.dumps({"shares": shares, "policy_error": errors}))


if __name__ == "__main__":
    main()
