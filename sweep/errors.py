"""Errors that are the user's to fix.

Anything the user can get wrong (a sweep definition, a star list, an occurrence table, a command-line
flag, a store made by another spec) raises :class:`UserInputError` with one line that names the file,
the key or column, what was wrong and what is allowed. The command line prints that line and exits
with status 2, without a traceback. Every other exception is a bug in ``sweep`` and keeps its
traceback.
"""

from __future__ import annotations


class UserInputError(Exception):
    """A mistake in the user's input, reported as one line.

    Parameters
    ----------
    message : str
        One line: where (file, key path, row, column), what was wrong, what is allowed.
    """

    exit_status = 2

    def __init__(self, message: str):
        message = " ".join(str(message).split())  # always one line
        super().__init__(message)
