"""The exceptions a user can act on: one type per kind of failure.

Each carries a message that says what is wrong, where (file, row, column) and what to do.
The command line turns them into one line on stderr and exit status 2; the app shows them
with an error box. Anything else escaping is a bug in the program, not in the user's input.
"""

from __future__ import annotations


class ScoutError(Exception):
    """Base of every error that is the user's to fix."""


class TableError(ScoutError):
    """A table could not be read, or a cell does not fit the role asked of its column."""


class StudyError(ScoutError):
    """A study file is malformed, of an unknown version, or names an unknown step or setting."""


class StepError(ScoutError):
    """A step cannot run on this table with these settings (e.g. a target with one class)."""
