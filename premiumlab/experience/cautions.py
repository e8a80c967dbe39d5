"""The cautions of outputs made under a spec: draft, compliance, and what was done to the amounts."""

from __future__ import annotations

from premiumlab._core.cautions import AS_GIVEN, DRAFT, PROHIBITED
from premiumlab.book.spec import Spec
from premiumlab.experience.adjustments import applied, not_applied


def cautions_for(spec: Spec) -> list[str]:
    """The cautions for outputs made under `spec`: the draft and compliance cautions, then either
    the amounts-as-given caution (no [experience] adjustment set) or which adjustments were applied
    and which were not (the figures used are in RUN/experience.json).

    Parameters
    ----------
    spec : Spec
        The pricing spec the outputs are made under.

    Returns
    -------
    list of str
        Three cautions: draft, prohibited factors, then the amounts-as-given or adjustments one.
    """
    exp = spec.experience
    if not exp.configured:
        return [DRAFT, PROHIBITED, AS_GIVEN]
    done = "; ".join(applied(exp))
    missing = "; ".join(not_applied(exp)) or "none"
    return [
        DRAFT,
        PROHIBITED,
        f"Claim experience was adjusted before modelling: {done} (figures in the run's experience.json). "
        f"Not applied: {missing}.",
    ]
