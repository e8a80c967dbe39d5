"""The cautions every output carries (DESIGN section 6)."""
from __future__ import annotations

from premiumlab.spec import Spec
from rating_tables.table import DRAFT_CAUTION

#: The one draft caution, shared with the filed table format so that it is never stated twice.
DRAFT = DRAFT_CAUTION
PROHIBITED = ("Factors prohibited by local law must not be used in rating; the spec's [compliance] list "
              "is checked, but it is the user's duty to keep it complete for the jurisdiction.")
AS_GIVEN = ("Claim amounts were taken as given: not developed to ultimate, not trended to the future "
            "policy period, large losses not capped.")


def cautions_for(spec: Spec) -> list[str]:
    """The cautions for outputs made under `spec`.

    Experience adjustments are not applied by this version (the spec refuses them), so the
    amounts-as-given caution is always present.
    """
    return [DRAFT, PROHIBITED, AS_GIVEN]
