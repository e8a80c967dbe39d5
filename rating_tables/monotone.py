"""The monotone promise of a factor: the one mapping between its name and its sign."""

from __future__ import annotations

from enum import StrEnum


class Monotone(StrEnum):
    """A factor's promised direction on the pure premium (the spec's and the table's `monotone`).

    A `str` enum: ``Monotone.INCREASING == "increasing"``, so it is written to JSON and TOML as the
    plain word.
    """

    INCREASING = "increasing"
    DECREASING = "decreasing"
    NONE = "none"

    @property
    def sign(self) -> int:
        """+1 for increasing, -1 for decreasing, 0 for no promise."""
        return _SIGNS[self]

    @classmethod
    def from_sign(cls, sign: int) -> Monotone:
        """The promise whose `sign` is `sign` (+1, -1 or 0)."""
        for member, value in _SIGNS.items():
            if value == sign:
                return member
        raise ValueError(f"monotone sign {sign!r} must be +1, -1 or 0")


_SIGNS = {Monotone.INCREASING: 1, Monotone.DECREASING: -1, Monotone.NONE: 0}
