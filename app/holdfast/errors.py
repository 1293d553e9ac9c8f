"""User-error types raised by every layer; the CLI turns them into one line and exit code 2."""

from __future__ import annotations


class UserError(Exception):
    """A mistake in the user's input: file, column, key or parameter. Shown as one line, exit code 2."""


class DataError(UserError):
    """The data file cannot be read or does not fit the spec (missing column, one class, NaN, ...)."""


class SpecError(UserError):
    """The model spec is invalid: unknown key, bad value, wrong type."""


class SessionError(UserError):
    """The decisions journal cannot be opened or does not match."""


class Cancelled(Exception):
    """Long work was cancelled through its cancel callback."""
