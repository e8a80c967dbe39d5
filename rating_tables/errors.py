"""The one error type of rating_tables: a bad table, book or argument, told in one line."""

from __future__ import annotations


class TableError(ValueError):
    """Bad rating-table content or rating input.

    The message is one line naming the table file, the factor, and the row (the 1-based data row
    of a factor CSV, or the 0-based row position in a book: the message says which) or the key.
    `check` classifies the problem for the audit (`format`, `bands`, `relativity`, `file_path`,
    `book`, ...); `factor`, `where` and `amount` locate and size it when known.
    """

    def __init__(
        self,
        message: str,
        *,
        check: str = "format",
        factor: str | None = None,
        where: str | None = None,
        amount: float | None = None,
    ) -> None:
        super().__init__(message.replace("\r", " ").replace("\n", " "))
        self.check = check
        self.factor = factor
        self.where = where
        self.amount = amount

    def prefixed(self, prefix: str) -> TableError:
        """The same error with `prefix: ` in front of the message (e.g. the table folder), unless the
        message already starts with it."""
        if str(self).startswith(f"{prefix}: "):
            return self
        return TableError(
            f"{prefix}: {self}", check=self.check, factor=self.factor, where=self.where, amount=self.amount
        )
