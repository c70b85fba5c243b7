"""Error types shared by every stage.

User-facing problems (bad files, bad config values, impossible settings) raise
:class:`InputError`; the CLI turns it into one readable message and exit code 2,
never a traceback.  Anything else escaping to the CLI is a bug in conecheck.
"""

from __future__ import annotations


class ConecheckError(Exception):
    """Base class of every error conecheck raises on purpose."""


class InputError(ConecheckError, ValueError):
    """Unusable input: a file, column, config key or value that cannot be used.

    The message must name what is wrong (file, column, key path, value) and what
    was expected.  Several problems may be joined into one message. It is also a
    :class:`ValueError`, so code calling conecheck from Python can catch bad values the
    usual way.
    """

    def __init__(self, message: str, problems: list[str] | None = None):
        self.problems = list(problems) if problems else [message]
        super().__init__(message)


class TaskError(ConecheckError):
    """A pipeline task (one sample, cut or cone) failed; ``where`` names which."""

    def __init__(self, where: str, message: str):
        self.where = where
        self.message = message
        super().__init__(f"{where}: {message}")

    def __reduce__(self):  # survive pickling between dask workers and the client
        return (type(self), (self.where, self.message))
