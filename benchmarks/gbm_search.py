"""The boosted-model search in one process against a Dask cluster, and against bare LightGBM (run by hand).

    /tmp/venv/bin/python benchmarks/gbm_search.py [--rows 200000] [--workers 2] [--settings 4] [--folds 3]

One invented pure-premium book (benchmarks/gbm_overhead.py), one search of settings x folds fits
with early stopping, timed four ways in one run:
- bare LightGBM: `lightgbm.train` on each fold's subset, one thread, one fit after the other;
- premiumlab in this process with one LightGBM thread (`cross_validate`, the default runner);
- premiumlab in this process with `--workers` LightGBM threads;
- premiumlab on a Dask LocalCluster of `--workers` single-threaded worker processes, one thread per fit.
The one-thread runs must give identical CV tables (the cluster run included). Prints wall seconds
and the ratios to the one-thread run in this process.
"""

from __future__ import annotations

import argparse
import json
import time
from dataclasses import replace

import lightgbm as lgb
import numpy as np
from gbm_overhead import invented_book

from premiumlab._core.cluster import tasks_on
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.gbm.search import _deviance_eval, cross_validate, fold_of_group, select_settings
from premiumlab.models.gbm.training import prepare_training


def bare_search(data, settings: list[dict], options: GbmOptions) -> list[float]:
    """The same fits with lightgbm alone: Dataset on all rows, subsets per fold, early stopping."""
    fold = fold_of_group(data.groups, options.folds, options.seed)
    full = data.dataset().construct()
    out = []
    for setting in settings:
        for k in range(options.folds):
            train, valid = np.flatnonzero(fold != k), np.flatnonzero(fold == k)
            booster = lgb.train(
                {**data.base_params, **setting},
                full.subset(train),
                options.max_rounds,
                valid_sets=[full.subset(valid)],
                valid_names=["fold"],
                feval=_deviance_eval(data.label[valid], data.weight[valid], data.power),
                callbacks=[lgb.early_stopping(options.early_stopping_rounds, verbose=False)],
            )
            out.append(float(booster.best_score["fold"]["deviance"]))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=200_000)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--settings", type=int, default=4)
    parser.add_argument("--folds", type=int, default=3)
    parser.add_argument("--rounds", type=int, default=400)
    args = parser.parse_args()
    one = GbmOptions(
        folds=args.folds, max_settings=args.settings, num_threads=1, max_rounds=args.rounds, tweedie_power=1.5
    )
    data = prepare_training(invented_book(args.rows), "pure_premium", one)
    settings = select_settings(one)
    many = replace(one, num_threads=args.workers)
    data_many = prepare_training(invented_book(args.rows), "pure_premium", many)

    times, tables = {}, {}
    start = time.perf_counter()
    bare = bare_search(data, settings, one)
    times["bare lightgbm, 1 thread"] = time.perf_counter() - start
    start = time.perf_counter()
    tables["here"] = cross_validate(data, settings, one)
    times["premiumlab here, 1 thread"] = time.perf_counter() - start
    start = time.perf_counter()
    cross_validate(data_many, settings, many)
    times[f"premiumlab here, {args.workers} threads"] = time.perf_counter() - start
    start = time.perf_counter()
    with tasks_on(f"local:{args.workers}") as runner:
        ready = time.perf_counter()
        tables["cluster"] = cross_validate(data, settings, one, runner)
    end = time.perf_counter()
    times[f"premiumlab on local:{args.workers} (1 thread per fit)"] = end - start
    if json.dumps(tables["cluster"]) != json.dumps(tables["here"]):
        raise SystemExit("the cluster's CV table differs from the one-process table")
    if [d for row in tables["here"] for d in row["fold_deviances"]] != bare:
        raise SystemExit("premiumlab's fold deviances differ from bare LightGBM's: not like for like")

    base = times["premiumlab here, 1 thread"]
    print(
        f"search: {args.rows:,} rows, {len(settings)} settings x {args.folds} folds, up to {args.rounds} "
        f"rounds, early stopping; cluster start-up {ready - start:.1f} s (included)"
    )
    for name, seconds in times.items():
        print(f"{name:45s} {seconds:8.2f} s   {base / seconds:5.2f}x the one-thread run here")
    print("identical CV tables: one process and the cluster; identical fold deviances: premiumlab and bare LightGBM")


if __name__ == "__main__":
    main()
