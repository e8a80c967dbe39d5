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
from premiumlab.simulation.recovery import policy_error, table_recovery, true_pure_premium
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

    rated = {}
    for table_dir in args.tables:
        table = rating_tables.load(table_dir)
        rated[table_dir.name] = rating_tables.rate(table, book.iloc[np.flatnonzero(rows)], "exposure")
    print(f"holdout rows {int(rows.sum())}, exposure {weight.sum():.0f}")
    shares, errors = {}, {}
    for name, frame in rated.items():
        shares[name], errors[name] = table_recovery(scenario, drawn.effects, frame, np.flatnonzero(rows), weight)
    print("share of true variance explained, per factor:")
    print(f"  {'factor':20s}" + "".join(f"{name:>14s}" for name in rated))
    for factor in (f.name for f in scenario.factors):
        print(f"  {factor:20s}" + "".join(f"{shares[name][factor]:14.3f}" for name in rated))
    print("policy-level error (RMS of centred log fitted/true pure premium):")
    for model in MODELS:
        if model in preds:
            errors[model] = policy_error(truth, preds[model].to_numpy()[rows], weight)
    for name, error in errors.items():
        print(f"  {name:20s}{error:8.4f}")
    print(json.dumps({"shares": shares, "policy_error": errors}))


if __name__ == "__main__":
    main()
