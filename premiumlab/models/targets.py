"""The three modelled targets, each defined once: frequency, severity and pure premium.

Every target is a rate, numerator / denominator, on some rows of the book, weighted by its
denominator (the rate is per unit of weight), with a log link:

- frequency: claim_count / exposure (claims per exposure unit) on all rows; Poisson, power 1;
- severity: claim_amount / claim_count (money per claim) on the rows with claim_count > 0 and
  claim_amount > 0; Gamma, power 2;
- pure premium: claim_amount / exposure (money per exposure unit) on all rows; Tweedie with variance
  power p (the GLM's profile estimate, or a fixed one).

The deviance of a target is the Tweedie unit deviance at its power (`evaluation.metrics`); the
GLM family and the LightGBM objective are the families of the same name.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

EXPOSURE = "exposure"
CLAIM_COUNT = "claim_count"
CLAIM_AMOUNT = "claim_amount"


@dataclass(frozen=True)
class TargetView:
    """A target on its rows: the row mask and, on those rows, numerator, weight and label."""

    rows: np.ndarray  # bool, one per row given
    numerator: np.ndarray  # claims or money, the rows' total of the modelled quantity
    weight: np.ndarray  # the denominator: exposure units or claims
    label: np.ndarray  # numerator / weight


@dataclass(frozen=True)
class Target:
    """One modelled target.

    name: its key ("frequency", "severity", "pure_premium"); claims_only: True for the rows with
    claim_count > 0 and claim_amount > 0, False for all rows; numerator and denominator: the book
    columns (exposure, claim_count, claim_amount) whose ratio is the label; power: the variance
    power of its deviance (None: the Tweedie power, given at fit time); objective: the LightGBM
    objective; family: the GLM family.
    """

    name: str
    claims_only: bool
    numerator: str
    denominator: str
    power: float | None
    objective: str
    family: str

    @property
    def weight(self) -> str:
        """The column weighting each row: the label's denominator (the label is per unit of it)."""
        return self.denominator

    @property
    def title(self) -> str:
        """The name in words, e.g. "pure premium"."""
        return self.name.replace("_", " ")

    @property
    def needs_amount(self) -> bool:
        """Whether the target reads claim amounts (a book without them has frequency only)."""
        return CLAIM_AMOUNT in (self.numerator, self.denominator)

    def deviance_power(self, tweedie_power: float | None = None) -> float:
        """Variance power of the target's deviance: 1 (Poisson), 2 (Gamma) or `tweedie_power` (Tweedie,
        where it must be given)."""
        if self.power is not None:
            return self.power
        if tweedie_power is None:
            raise ValueError(f"the {self.title} deviance needs the Tweedie power")
        return tweedie_power

    def rows(self, claim_count: np.ndarray, claim_amount: np.ndarray | None) -> np.ndarray:
        """Bool mask of the rows the target uses: all, or those with claim_count > 0 and
        claim_amount > 0."""
        if not self.claims_only:
            return np.ones(len(claim_count), dtype=bool)
        if claim_amount is None:
            raise ValueError(f"the {self.title} rows need claim amounts")
        return (claim_count > 0) & (claim_amount > 0)

    def columns(
        self, exposure: np.ndarray, claim_count: np.ndarray, claim_amount: np.ndarray | None
    ) -> tuple[np.ndarray, np.ndarray]:
        """(numerator, weight) on every row given."""
        given = {EXPOSURE: exposure, CLAIM_COUNT: claim_count, CLAIM_AMOUNT: claim_amount}
        numerator, weight = given[self.numerator], given[self.weight]
        if numerator is None or weight is None:
            raise ValueError(f"the {self.title} target needs claim amounts")
        return numerator, weight

    def view(self, exposure: np.ndarray, claim_count: np.ndarray, claim_amount: np.ndarray | None) -> TargetView:
        """The target on its rows: mask, numerator, weight and label = numerator / weight."""
        rows = self.rows(claim_count, claim_amount)
        numerator, weight = self.columns(exposure, claim_count, claim_amount)
        if self.claims_only:
            numerator, weight = numerator[rows], weight[rows]
        return TargetView(rows, numerator, weight, numerator / weight)


FREQUENCY = Target(
    "frequency",
    claims_only=False,
    numerator=CLAIM_COUNT,
    denominator=EXPOSURE,
    power=1.0,
    objective="poisson",
    family="poisson",
)
SEVERITY = Target(
    "severity",
    claims_only=True,
    numerator=CLAIM_AMOUNT,
    denominator=CLAIM_COUNT,
    power=2.0,
    objective="gamma",
    family="gamma",
)
PURE_PREMIUM = Target(
    "pure_premium",
    claims_only=False,
    numerator=CLAIM_AMOUNT,
    denominator=EXPOSURE,
    power=None,
    objective="tweedie",
    family="tweedie",
)

#: Every target by name, in the order they are fitted and reported.
TARGETS: Mapping[str, Target] = MappingProxyType({t.name: t for t in (FREQUENCY, SEVERITY, PURE_PREMIUM)})
