"""The scenario as typed objects: factors with their distributions, true effects, generated levels and
missing values, large losses, the interaction and the current tariff (read from a file by
`premiumlab.simulation.scenario_file`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.special import ndtri

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
#: First spawn-key entry of the side streams (`side_stream`): the draws of the features added after
#: the first scenarios come from their own streams, so they never shift the book's main draws.
GENERATED_LEVELS_STREAM = 1
MISSING_STREAM = 2


def side_stream(seed: int, stream: int, factor_index: int) -> np.random.Generator:
    """A generator independent of the book's main one, `default_rng(seed)`.

    Parameters
    ----------
    seed : int
        The seed (>= 0) of the book or of the scenario.
    stream : int
        What the stream draws: `GENERATED_LEVELS_STREAM` or `MISSING_STREAM`.
    factor_index : int
        The factor's position in the scenario (0-based).

    Returns
    -------
    numpy.random.Generator
        `default_rng(SeedSequence(seed, spawn_key=(stream, factor_index)))`: a child of the main
        generator's seed sequence (whose spawn key is empty), independent of it and of every other
        (stream, factor) pair.
    """
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(stream, factor_index)))


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
class GeneratedLevels:
    """The scenario key `generate` of a categorical factor: many levels with a skewed size law and
    relativities drawn from a seeded stream (`scenario_file` states the law)."""

    count: int
    prefix: str
    exposure_skew: float
    frequency_sigma: float
    severity_sigma: float

    def labels(self) -> tuple[str, ...]:
        """prefix + the level number 1..count, zero-padded to the width of `count` ("T001".."T300").

        Returns
        -------
        tuple of str
            The level names, largest level first.
        """
        width = len(str(self.count))
        return tuple(f"{self.prefix}{k:0{width}d}" for k in range(1, self.count + 1))

    def probabilities(self) -> np.ndarray:
        """Level probabilities: p_k proportional to exp(exposure_skew x z_k), z_k = Phi^-1((count - k +
        0.5) / count), the count quantiles of a lognormal law with log-sd `exposure_skew`, largest first.

        Returns
        -------
        numpy.ndarray
            count probabilities summing to 1, non-increasing in k.
        """
        z = ndtri((np.arange(self.count, 0, -1) - 0.5) / self.count)
        weights = np.exp(self.exposure_skew * (z - z[0]))
        return weights / weights.sum()

    def relativities(self, rng: np.random.Generator, probabilities: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """True frequency and severity relativities: r_k = exp(sigma x e_k) / sum_j p_j exp(sigma x e_j),
        e_k independent standard normal draws (frequency first, then severity), so that the
        probability-weighted mean relativity sum_k p_k r_k is 1.

        Parameters
        ----------
        rng : numpy.random.Generator
            The factor's stream (`side_stream` with `GENERATED_LEVELS_STREAM`).
        probabilities : numpy.ndarray
            The level probabilities p_k.

        Returns
        -------
        tuple of numpy.ndarray
            (frequency, severity) relativities, one > 0 per level.
        """
        out = []
        for sigma in (self.frequency_sigma, self.severity_sigma):
            r = np.exp(sigma * rng.standard_normal(self.count))
            out.append(r / float(np.sum(probabilities * r)))
        return out[0], out[1]


@dataclass(frozen=True)
class Missing:
    """The scenario key `missing` of a factor: which policies lose the value, and the true effect of
    a missing value (it replaces the factor's effect on those rows)."""

    share: float
    frequency_relativity: float = 1.0
    severity_relativity: float = 1.0
    group_factor: str | None = None
    group_label: str | None = None
    group_share: float = 0.0


@dataclass(frozen=True)
class Factor:
    """A rating factor of the scenario with its distribution and true effects.

    Numeric factors carry `bands` (interior edges) and log-relativity knots; categorical factors
    carry `levels` with a relativity per level (drawn when `generated`). Internally categorical
    values are level codes; a factor with `missing` loses its value on some policies.
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
    generated: GeneratedLevels | None = None
    missing: Missing | None = None

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

    def level_relativities(self, target: str) -> np.ndarray:
        """A categorical factor's true relativity per level on "frequency" or "severity".

        Parameters
        ----------
        target : str
            "frequency" or "severity".

        Returns
        -------
        numpy.ndarray
            One relativity per level, in `labels` order (all 1 when the scenario gives none).
        """
        rel = self.frequency_relativity if target == "frequency" else self.severity_relativity
        return np.ones(len(self.labels)) if rel is None else rel

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
