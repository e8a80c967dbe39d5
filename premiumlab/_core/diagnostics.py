"""Diagnostics: warnings that a result is unreliable, in one shape for every step and output.

A diagnostic names what is wrong (`kind`), the model or step it concerns, and where it can, the
factor and the level. Steps attach them to what they write (a model's JSON `warnings`, run.json's
`diagnostics`, comparison.json, fidelity.json); the terminal and the report show them. The kinds are
listed in `KINDS` so that every output speaks of the same things in the same words.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

#: Every kind of diagnostic, with the one-line meaning that docs/run-directory.md repeats.
KINDS: dict[str, str] = {
    "non_convergence": "an iterative fit stopped before it converged; its estimates are unreliable",
    "separation": "a level or band without claims (or without losses): its unpenalised estimate runs to zero",
    "no_rows": "a level or band without rows in a fit: not estimated, priced at the base",
    "aliased": "a term that is a linear combination of earlier terms: not estimated, priced at the base",
    "held_at_base": "a GLM's credibility penalty holds a factor at the base although another GLM of the run finds it",
    "relativity_bounds": "a relativity outside the plausibility bounds",
    "worse_than_null": "a model's holdout deviance is worse than the null model's (a constant rate)",
    "retention_undefined": "the retention ratio has a denominator <= 0: the boosted model is not better than the GLM",
    "unseen_levels": "levels met outside the training rows, priced at their complement",
    "missing_values": "missing values priced as their own level or band",
    "flattened_promise": "a monotone promise kept only by giving adjacent levels one value",
    "weak_source": "the model chosen as the table's source is not the best on the holdout",
}


@dataclass(frozen=True)
class Diagnostic:
    """One warning that a result is unreliable.

    Attributes
    ----------
    kind : str
        One of `KINDS`.
    model : str
        The model or step concerned (`glm_frequency`, `gbm_pure_premium`, `table`, `book`).
    message : str
        One line a reviewer can act on, naming the figures.
    factor, level : str or None
        The factor and the level or band concerned, where there is one.
    """

    kind: str
    model: str
    message: str
    factor: str | None = None
    level: str | None = None

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"unknown diagnostic kind {self.kind!r}")

    def to_dict(self) -> dict[str, Any]:
        """The diagnostic as plain JSON (keys kind, model, message, factor, level)."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Diagnostic:
        """The diagnostic from `to_dict`'s JSON (unknown keys ignored)."""
        return cls(
            kind=str(data["kind"]),
            model=str(data["model"]),
            message=str(data["message"]),
            factor=data.get("factor"),
            level=data.get("level"),
        )

    def __str__(self) -> str:
        where = "".join(f", {k} '{v}'" for k, v in (("factor", self.factor), ("level", self.level)) if v is not None)
        return f"{self.model}{where}: {self.message}"
