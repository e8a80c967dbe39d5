"""Named defaults shared by several steps, each written once."""

from __future__ import annotations

#: The seed of the split, the boosted models, the folds, the effect-curve samples and the simulator,
#: unless the spec or the caller gives another.
SEED = 2026
#: The Tweedie variance power used where no GLM profile has chosen one (a boosted-only run, or a
#: metric computed before any GLM is fitted); the middle of the compound Poisson-Gamma range (1, 2).
FALLBACK_TWEEDIE_POWER = 1.5
#: Plausibility bounds (least, greatest) of a relativity: a common-practice default, not a rule; a
#: relativity outside them is flagged (`compare`, GLM relativities) or a violation (`audit`).
PLAUSIBLE_RELATIVITY = (0.2, 5.0)
