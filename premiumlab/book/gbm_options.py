"""The boosted models' options: what the spec's [gbm] section sets and what `premiumlab.models.gbm` reads.

They live here, below both the spec and the models, so that the spec holds them without importing
the models (which may import the spec, never the reverse).
"""

from __future__ import annotations

from dataclasses import dataclass

from premiumlab._core.defaults import FALLBACK_TWEEDIE_POWER, SEED

#: LightGBM's monotone_constraints_method values, simplest first.
MONOTONE_METHODS = ("basic", "intermediate", "advanced")

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

    @property
    def variance_power(self) -> float:
        """The pure-premium model's Tweedie power: `tweedie_power`, or `FALLBACK_TWEEDIE_POWER` if None."""
        return FALLBACK_TWEEDIE_POWER if self.tweedie_power is None else float(self.tweedie_power)
