"""The cautions every output carries (docs/commands.md, Cautions)."""
from __future__ import annotations

from premiumlab.book.spec import Spec
from rating_tables.table import DRAFT_CAUTION

#: The one draft caution, shared with the filed table format so that it is never stated twice.
DRAFT = DRAFT_CAUTION
PROHIBITED = ("Factors prohibited by local law must not be used in rating; the spec's [compliance] list "
              "is checked, but it is the user's duty to keep it complete for the jurisdiction.")
AS_GIVEN = ("Claim amounts were taken as given: not developed to ultimate, not trended to the future "
            "policy period, large losses not capped.")
#: validate's profile is the raw experience, whatever the spec's [experience] section sets for `fit`.
AS_RECORDED = ("The profile shows the book's claims and amounts as recorded: no development, trend or "
               "large-loss cap is applied in it; it is not a rate.")
VALIDATION = (DRAFT, PROHIBITED, AS_RECORDED)


def cautions_for(spec: Spec) -> list[str]:
    """The cautions for outputs made under `spec`: the draft and compliance cautions, then either
    the amounts-as-given caution (no [experience] adjustment set) or which adjustments were applied
    and which were not (the figures used are in RUN/experience.json)."""
    from premiumlab.experience.adjustments import applied, not_applied
    exp = spec.experience
    if not exp.configured:
        return [DRAFT, PROHIBITED, AS_GIVEN]
    done = "; ".join(applied(exp))
    missing = "; ".join(not_applied(exp)) or "none"
    return [DRAFT, PROHIBITED,
            f"Claim experience was adjusted before modelling: {done} (figures in the run's experience.json). "
            f"Not applied: {missing}."]
