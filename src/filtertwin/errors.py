"""The one exception family of filtertwin.

Every error a user can cause (a bad design file, an unreadable recording, a missing audio
device) is raised as :class:`UserInputError` with a single line that says what is wrong,
where, and how to fix it. The command line prints that line and exits with status 2.
"""


class FiltertwinError(Exception):
    """Base class of every error raised on purpose by filtertwin."""


class UserInputError(FiltertwinError, ValueError):
    """Bad input from the user: the message is one line naming what, where and the fix."""
