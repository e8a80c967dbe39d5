"""The boosted model's search: policy-grouped K-fold cross-validation over a small grid of settings.

Every setting is trained on K-1 folds (folds grouped by policy, so the rows of a policy stay
together) with early stopping on the weighted mean deviance of the held-out fold (the family's
deviance: LightGBM's built-in metrics for these objectives are negative log-likelihoods, so they
are switched off). The (setting, fold) fits are independent tasks handed to a `TaskRunner`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace
from functools import cached_property

import lightgbm as lgb
import numpy as np
import pandas as pd

from premiumlab._core.cluster import IN_PROCESS, TaskRunner
from premiumlab._core.errors import InputError
from premiumlab._core.progress import progress_bar
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.deviance import mean_deviance
from premiumlab.models.gbm.training import TrainingData


def fold_of_group(groups: np.ndarray, folds: int, seed: int) -> np.ndarray:
    """Fold index (0..folds-1) of each row: a seeded hash of its group, so a policy's rows share a
    fold and the assignment does not depend on row order.

    fold = hash(group; key = seed mod 10^16) mod folds, with pandas' 64-bit `hash_array`.

    Parameters
    ----------
    groups : np.ndarray
        The policy code of each row.
    folds : int
        Number of folds, >= 2.
    seed : int
        Seed of the hash, >= 0.

    Returns
    -------
    np.ndarray
        int64 fold index per row, in 0..folds-1.
    """
    hash_key = f"{seed % 10**16:016d}"
    hashes = pd.util.hash_array(np.asarray(groups), hash_key=hash_key, categorize=False)
    return (hashes % np.uint64(folds)).astype(np.int64)


def search_sample(data: TrainingData, rows: int, seed: int) -> TrainingData:
    """The training data of whole policies drawn in a seeded order until at least `rows` rows are
    taken (all of them when there are fewer), in their original order; what the search runs on
    when the final model is trained on a Dask cluster.

    Parameters
    ----------
    data : TrainingData
        The encoded training data of one target.
    rows : int
        The least rows to take, >= 1.
    seed : int
        Seed of numpy's generator that orders the policies.

    Returns
    -------
    TrainingData
        `data` restricted to the drawn policies' rows (same parameters, hessian scale and
        categories).
    """
    codes, uniques = pd.factorize(data.groups)
    order = np.random.default_rng(seed).permutation(len(uniques))
    taken = np.cumsum(np.bincount(codes, minlength=len(uniques))[order])
    drawn = np.zeros(len(uniques), dtype=bool)
    drawn[order[: int(np.searchsorted(taken, rows)) + 1]] = True
    keep = drawn[codes]
    return replace(
        data, matrix=data.matrix[keep], label=data.label[keep], weight=data.weight[keep], groups=data.groups[keep]
    )


def select_settings(options: GbmOptions) -> list[dict]:
    """The settings the search tries: the grid, or a seeded subset of `max_settings` of it.

    Parameters
    ----------
    options : GbmOptions
        Its `grid` (LightGBM settings), `max_settings` and `seed` (of the subset's draw).

    Returns
    -------
    list of dict
        The settings in grid order: all of them when the grid has at most `max_settings`,
        otherwise `max_settings` drawn without replacement with numpy's generator seeded by `seed`.
    """
    grid = [dict(s) for s in options.grid]
    if len(grid) <= options.max_settings:
        return grid
    picked = np.random.default_rng(options.seed).choice(len(grid), options.max_settings, replace=False)
    return [grid[i] for i in sorted(picked)]


def _deviance_eval(
    label: np.ndarray, weight: np.ndarray, power: float
) -> Callable[[np.ndarray, lgb.Dataset], tuple[str, float, bool]]:
    """LightGBM feval on one validation fold: weighted mean deviance of the family, predictions on
    the response scale. The float64 labels are used, not the Dataset's float32 copy."""

    def evaluate(predictions: np.ndarray, _: lgb.Dataset) -> tuple[str, float, bool]:
        return "deviance", mean_deviance(label, predictions, weight, power), False

    return evaluate


def _fold_fit(
    full: lgb.Dataset,
    data: TrainingData,
    setting: dict,
    train_rows: np.ndarray,
    valid_rows: np.ndarray,
    options: GbmOptions,
) -> tuple[float, int]:
    """(held-out deviance at the best round, best round count) of one setting on one fold."""
    feval = _deviance_eval(data.label[valid_rows], data.weight[valid_rows], data.power)
    booster = lgb.train(
        {**data.base_params, **setting},
        full.subset(train_rows.tolist()),
        num_boost_round=options.max_rounds,
        valid_sets=[full.subset(valid_rows.tolist())],
        valid_names=["fold"],
        feval=feval,
        callbacks=[lgb.early_stopping(options.early_stopping_rounds, verbose=False)],
    )
    return float(booster.best_score["fold"]["deviance"]), int(booster.best_iteration or options.max_rounds)


@dataclass
class _SearchJob:
    """What every task of one search shares. The Dataset binned on all rows and each row's fold are
    built on first use, once in each process that runs tasks (after Dask has sent the job there)."""

    data: TrainingData
    options: GbmOptions

    @cached_property
    def binned(self) -> tuple[lgb.Dataset, np.ndarray]:
        return (self.data.dataset().construct(), fold_of_group(self.data.groups, self.options.folds, self.options.seed))

    def __getstate__(self) -> dict:
        """The job without its binned Dataset, which holds a pointer into LightGBM and cannot be
        serialised: Dask may copy a worker's job to another worker after a task has built it (seen
        under load as "ctypes objects containing pointers cannot be pickled"); it is built again there."""
        state = dict(self.__dict__)
        state.pop("binned", None)
        return state


def _fold_task(job: _SearchJob, task: tuple[dict, int]) -> tuple[float, int]:
    """One task of the search, run here or on a Dask worker: setting `task[0]` on fold `task[1]`."""
    setting, k = task
    full, fold = job.binned
    return _fold_fit(full, job.data, setting, np.flatnonzero(fold != k), np.flatnonzero(fold == k), job.options)


def cross_validate(
    data: TrainingData, settings: list[dict], options: GbmOptions, runner: TaskRunner = IN_PROCESS
) -> list[dict]:
    """One CV row per setting: fold deviances at each fold's best round, their mean and sample
    standard deviation, the folds' best rounds and their rounded mean (`rounds`). The settings x
    folds fits are independent tasks for `runner` (`premiumlab._core.cluster`).

    A fold's deviance is the weighted mean deviance of its held-out rows,
    sum(w d(y, mu)) / sum(w), at the target's power (`premiumlab.models.deviance.mean_deviance`).

    Parameters
    ----------
    data : TrainingData
        The encoded training data of one target (`prepare_training`).
    settings : list[dict]
        LightGBM parameters per setting, laid over `data.base_params`.
    options : GbmOptions
        folds, seed (of the fold hash), max_rounds and early_stopping_rounds are used.
    runner : TaskRunner
        Where the settings x folds fits run (default: one after the other in this process).

    Returns
    -------
    list[dict]
        One dict per setting, in the order given: `setting`, `mean_deviance`, `sd_deviance`
        (ddof 1), `rounds` (max(1, round(mean of the folds' best rounds))), `fold_deviances`,
        `fold_rounds`.

    Raises
    ------
    InputError
        A fold holds none of the target's rows.
    """
    fold = fold_of_group(data.groups, options.folds, options.seed)
    empty = [k for k in range(options.folds) if not (fold == k).any()]
    if empty:
        raise InputError(f"gbm folds: fold {empty[0]} of {options.folds} holds no {data.target} rows; use fewer folds")
    tasks = [(setting, k) for setting in settings for k in range(options.folds)]
    with progress_bar(f"cross-validating the {data.target} model", len(tasks)) as advance:
        results = runner.map(_fold_task, _SearchJob(data, options), tasks, advance)
    table = []
    for i, setting in enumerate(settings):
        mine = results[i * options.folds : (i + 1) * options.folds]
        deviances, rounds = [r[0] for r in mine], [r[1] for r in mine]
        table.append(
            {
                "setting": setting,
                "mean_deviance": float(np.mean(deviances)),
                "sd_deviance": float(np.std(deviances, ddof=1)),
                "rounds": max(1, round(float(np.mean(rounds)))),
                "fold_deviances": deviances,
                "fold_rounds": rounds,
            }
        )
    return table


# ---------------------------------------------------------------------------------------------
# final fit, balance, persistence
