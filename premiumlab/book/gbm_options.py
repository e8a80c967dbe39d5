"""The boosted models' options: what the spec's [gbm] section sets and what `premiumlab.models.gbm` reads.

They live here, below both the spec and the models, so that the spec holds them without importing
the models (which may import the spec, never the reverse).
"""

from __future__ import annotations

from dataclasses import dataclass

from premiumlab._core.defaults import FALLBACK_TWEEDIE_POWER, SEED

#: LightGBM's monotone_constraints_method values, simplest first.
MONOTONE_METHODS = ("basic", "intermediate", "advanced")

#: LightGBM splits a categorical with at most this many levels one level against the rest, and
#: orders the levels of a larger one by their gradients (its `max_cat_to_onehot`, fixed here).
MAX_CAT_TO_ONEHOT = 4
#: The least automatic cat_smooth and cat_l2, in rows: LightGBM's default of both, made for
#: hessians of about 1 per row.
MIN_CAT_SMOOTH = 10.0
#: The credibility estimate of the automatic cat_smooth caps the labels at this quantile of the
#: non-zero labels, so that single large losses do not swamp it.
LARGE_LABEL_QUANTILE = 0.999
#: LightGBM's `poisson_max_delta_step` (its default): the Poisson hessian is w mu e^0.7.
POISSON_MAX_DELTA_STEP = 0.7

# Half of the 2^4 factorial in leaves, minimum policies per leaf, learning rate and L2 penalty
# (the fourth factor aliased with the three-way interaction): every level of every factor appears
# four times, every pair of levels of two factors twice.
DEFAULT_GRID: tuple[dict, ...] = tuple(
    {"num_leaves": leaves, "min_data_in_leaf": min_data, "learning_rate": rate, "lambda_l2": l2}
    for leaves, min_data, rate, l2 in (
        (7, 100, 0.03, 10.0),
        (7, 100, 0.1, 0.0),
        (7, 400, 0.03, 0.0),
        (7, 400, 0.1, 10.0),
        (31, 100, 0.03, 0.0),
        (31, 100, 0.1, 10.0),
        (31, 400, 0.03, 10.0),
        (31, 400, 0.1, 0.0),
    )
)


@dataclass(frozen=True)
class GbmOptions:
    """How the boosted models are tuned.

    folds (5): policy-grouped CV folds; max_settings (8): grid settings tried, a seeded subset of
    `grid` when it is longer; num_threads (2; the spec's key `threads`): LightGBM threads, fixed so
    results reproduce; seed (`SEED`; in a spec, the [split] seed): LightGBM's seed and the fold hash;
    max_rounds (2000) and early_stopping_rounds (50): boosting rounds per fold; grid: LightGBM
    parameters per setting (default `DEFAULT_GRID`; not in the spec); monotone_method ("advanced"):
    LightGBM monotone_constraints_method; constrain_severity (False): also constrain the severity
    model; tweedie_power (None; the spec's word "glm"): variance power of the pure-premium model,
    a number in (1, 2), or None for the run's GLM estimate (`FALLBACK_TWEEDIE_POWER` where there is
    none, as in a direct call of `premiumlab.models.gbm.fit.fit_target`).

    Categorical levels (`premiumlab.models.gbm.smoothing`; hessian sums count rows, a row's LightGBM
    weight being its weight over the mean hessian per row at the start): cat_smooth (None; the
    spec's word "auto"): LightGBM's cat_smooth in rows, None for the credibility constant of the
    target's most-levelled categorical; cat_l2 (None; "auto"): LightGBM's cat_l2 in rows, None for
    the cat_smooth used; min_data_per_group (100) and max_cat_threshold (32): LightGBM's, in rows
    and levels.

    On a Dask cluster (`fit --cluster`; `premiumlab.models.gbm.fit`): a target with at least
    cluster_rows (1,000,000) training rows has its final model trained by LightGBM's Dask interface
    (data-parallel, the rows spread over the workers), and its search run on a seeded sample of
    whole policies of about search_rows (250,000) rows. Below it, or without a cluster, every
    step uses every training row and the model files do not depend on where the search ran.
    """

    folds: int = 5
    max_settings: int = 8
    num_threads: int = 2
    seed: int = SEED
    max_rounds: int = 2000
    early_stopping_rounds: int = 50
    grid: tuple[dict, ...] = DEFAULT_GRID
    monotone_method: str = "advanced"
    constrain_severity: bool = False
    tweedie_power: float | None = None
    cat_smooth: float | None = None
    cat_l2: float | None = None
    min_data_per_group: int = 100
    max_cat_threshold: int = 32
    cluster_rows: int = 1_000_000
    search_rows: int = 250_000

    @property
    def variance_power(self) -> float:
        """The pure-premium model's Tweedie power: `tweedie_power`, or `FALLBACK_TWEEDIE_POWER` if None."""
        return FALLBACK_TWEEDIE_POWER if self.tweedie_power is None else float(self.tweedie_power)
