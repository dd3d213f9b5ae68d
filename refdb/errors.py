"""Exceptions that reach the user as one line of text.

Every error that the user can cause (a bad file, a wrong option, a library in the wrong state)
is raised as a :class:`RefdbError` subclass with a message and, where it helps, a hint. The CLI
prints ``Error: message (hint)`` on stderr and exits with status 1; anything else is a bug.
"""

from __future__ import annotations


class RefdbError(Exception):
    """Base class of every error refdb reports to the user.

    Parameters
    ----------
    message : str
        One line saying what is wrong.
    hint : str, optional
        One line saying what to do about it.
    """

    def __init__(self, message: str, hint: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return self.one_line()

    def one_line(self) -> str:
        """The message and hint as one line, without line breaks."""
        text = self.message if not self.hint else f"{self.message} ({self.hint})"
        return " ".join(text.split())


class InputError(RefdbError):
    """A file or value given by the user cannot be used (malformed, wrong units, missing)."""


class LibraryError(RefdbError):
    """The reference library cannot be opened, read or written."""


class SchemaError(LibraryError):
    """The library's schema is older or newer than this version of refdb expects."""


class NotFoundError(LibraryError):
    """An entry id or name does not exist in the library."""
