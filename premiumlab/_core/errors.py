"""Errors that reach the user as one clear line and an exit code."""

from __future__ import annotations


class InputError(ValueError):
    """Bad input or usage: the message names the file, column, row or key (exit code 2)."""


class CheckFailed(RuntimeError):
    """A check ran and found violations (exit code 1); the findings were already printed."""
