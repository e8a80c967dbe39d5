"""The scenario as typed objects: factors with their distributions and true effects, large losses,
the interaction and the current tariff (read from a file by `premiumlab.simulation.scenario_file`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from premiumlab.book.bands import assign_bands

#: The columns every simulated book starts with; the factor columns and `current_premium` follow.
LEAD_COLUMNS = ("policy_id", "year", "exposure", "claim_count", "claim_amount")
PREMIUM_COLUMN = "current_premium"
#: The parameter keys of each numeric distribution.
DISTRIBUTION_PARAMETERS = {
    "uniform": ("low", "high"),
    "integers": ("low", "high"),
    "normal": ("mean", "sd"),
    "lognormal": ("median", "sigma"),
    "histogram": ("edges", "weights"),
}


@dataclass(frozen=True)
class Distribution:
    """How one factor's values are drawn: a numeric kind with parameters, or level probabilities."""

    kind: str
    parameters: dict[str, Any]

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """n draws: floats for numeric kinds, level codes (int) for "levels"."""
        p = self.parameters
        if self.kind == "levels":
            return rng.choice(len(p["probabilities"]), size=n, p=p["probabilities"])
        if self.kind == "uniform":
            return rng.uniform(p["low"], p["high"], n)
        if self.kind == "integers":
            return rng.integers(int(p["low"]), int(p["high"]) + 1, n).astype(float)
        if self.kind == "normal":
            return rng.normal(p["mean"], p["sd"], n)
        if self.kind == "lognormal":
            return p["median"] * np.exp(p["sigma"] * rng.standard_normal(n))
        edges, weights = np.asarray(p["edges"]), np.asarray(p["weights"])
        interval = rng.choice(len(weights), size=n, p=weights / weights.sum())
        return edges[interval] + rng.random(n) * (edges[interval + 1] - edges[interval])


@dataclass(frozen=True)
class Factor:
    """A rating factor of the scenario with its distribution and true effects.

    Numeric factors carry `bands` (interior edges) and log-relativity knots; categorical factors
    carry `levels` with a relativity per level. Internally categorical values are level codes.
    """

    name: str
    type: str
    distribution: Distribution
    labels: tuple[str, ...]
    base: str | None = None
    depends_on: str | None = None
    when: dict[str, Distribution] = field(default_factory=dict)
    bands: tuple[float, ...] = ()
    clip: tuple[float, float] | None = None
    round_to: float | None = None
    step_per_period: float = 0.0
    frequency_knots: np.ndarray | None = None
    severity_knots: np.ndarray | None = None
    frequency_relativity: np.ndarray | None = None
    severity_relativity: np.ndarray | None = None

    @property
    def numeric(self) -> bool:
        """True for a numeric factor, False for a categorical one."""
        return self.type == "numeric"

    @property
    def writes_integers(self) -> bool:
        """True when the numeric column holds whole numbers (an integer `round_to`)."""
        return self.round_to is not None and float(self.round_to).is_integer()

    def value(self, raw: np.ndarray, period_index: np.ndarray | int) -> np.ndarray:
        """Row values from the policy's raw draw: step per period, then clip, then rounding."""
        if not self.numeric:
            return raw
        v = raw + self.step_per_period * period_index
        if self.clip is not None:
            v = np.clip(v, *self.clip)
        if self.round_to is not None:
            v = np.round(v / self.round_to) * self.round_to
        return v

    def label_codes(self, values: np.ndarray) -> np.ndarray:
        """Index into `labels`: the band of a numeric value, or the level code itself."""
        return assign_bands(values, self.bands) if self.numeric else values

    def log_effect(self, values: np.ndarray, target: str) -> np.ndarray:
        """True log-relativity of each value on "frequency" or "severity"."""
        if self.numeric:
            knots = self.frequency_knots if target == "frequency" else self.severity_knots
            if knots is None:
                return np.zeros(len(values))
            return np.interp(values, knots[:, 0], knots[:, 1])
        rel = self.frequency_relativity if target == "frequency" else self.severity_relativity
        return np.zeros(len(values)) if rel is None else np.log(rel)[values]

    def in_region(self, values: np.ndarray, region: tuple) -> np.ndarray:
        """Rows inside an interaction region: [low, high) for numeric, a set of level codes otherwise."""
        if self.numeric:
            return (values >= region[0]) & (values < region[1])
        return np.isin(values, region)


@dataclass(frozen=True)
class LargeLosses:
    """Large claims: with `probability`, a claim is a Pareto or lognormal draw x its severity relativity."""

    probability: float
    distribution: str
    parameters: dict[str, float]

    @property
    def mean(self) -> float:
        """Mean large loss where every effect is 1 (currency)."""
        p = self.parameters
        if self.distribution == "pareto":
            return p["shape"] * p["threshold"] / (p["shape"] - 1.0)
        return p["median"] * math.exp(p["sigma"] ** 2 / 2.0)

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """n large losses where every effect is 1 (currency)."""
        p = self.parameters
        if self.distribution == "pareto":
            return p["threshold"] * (1.0 + rng.pareto(p["shape"], n))
        return p["median"] * np.exp(p["sigma"] * rng.standard_normal(n))


@dataclass(frozen=True)
class Interaction:
    """A multiplicative effect on rows inside a region of two factors."""

    factors: tuple[str, str]
    region: dict[str, tuple]
    frequency: float
    severity: float


@dataclass(frozen=True)
class Scenario:
    """A parsed scenario file (`premiumlab.simulation.scenario_file` documents every key)."""

    name: str
    description: str
    policies: int
    seed: int
    periods: tuple[int, ...]
    base_frequency: float
    base_severity: float
    severity_shape: float
    new_business_share: float
    lapse_share: float
    factors: tuple[Factor, ...]
    large_losses: LargeLosses | None
    interaction: Interaction | None
    expected_loss_ratio: float
    tariff_shrink: dict[str, float]

    def factor(self, name: str) -> Factor:
        """The factor called `name`."""
        return next(f for f in self.factors if f.name == name)

    @property
    def mean_severity(self) -> float:
        """Mean claim (attritional and large, currency) where every effect is 1."""
        ll = self.large_losses
        if ll is None:
            return self.base_severity
        return (1.0 - ll.probability) * self.base_severity + ll.probability * ll.mean
