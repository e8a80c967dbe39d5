"""The cautions every output carries, word for word (docs/commands.md, Cautions); the spec-dependent list is experience.cautions_for."""

from __future__ import annotations

from rating_tables.table import DRAFT_CAUTION

#: The one draft caution, shared with the filed table format so that it is never stated twice.
DRAFT = DRAFT_CAUTION
PROHIBITED = (
    "Factors prohibited by local law must not be used in rating; the spec's [compliance] list "
    "is checked, but it is the user's duty to keep it complete for the jurisdiction."
)
AS_GIVEN = (
    "Claim amounts were taken as given: not developed to ultimate, not trended to the future "
    "policy period, large losses not capped."
)
#: validate's profile is the raw experience, whatever the spec's [experience] section sets for `fit`.
AS_RECORDED = (
    "The profile shows the book's claims and amounts as recorded: no development, trend or "
    "large-loss cap is applied in it; it is not a rate."
)
VALIDATION = (DRAFT, PROHIBITED, AS_RECORDED)
