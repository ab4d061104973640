"""Exceptions that map to the exit codes of the command line contract (DESIGN.md).

* :class:`InputError`: the user's data, options or files are wrong. Exit code 2, one
  line on stderr that starts with ``error:`` and says what is wrong and what to do.
* :class:`VerificationFailed`: ``verify`` found a mismatch. Exit code 1.
* anything else escaping the command line is an internal bug: exit code 3.
"""
from __future__ import annotations


class InputError(Exception):
    """A problem with the input that the user can fix. The message is one line."""

    exit_code = 2

    def __init__(self, what: str, fix: str | None = None):
        message = what if fix is None else f"{what}; {fix}"
        # One line, always: a newline inside a column name must not split the message.
        super().__init__(" ".join(message.split()))


class VerificationFailed(Exception):
    """``verify`` found that a record, its chain or its data do not match."""

    exit_code = 1
