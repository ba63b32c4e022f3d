"""User-facing errors and warnings.

A DbmetricsError stops the command with one line. A DbmetricsWarning is a number that
would otherwise mislead silently (a wrong score kind, an empty answer): the Python API
issues it with `warnings.warn` (catch it, filter it or turn it into an error as any
warning), and the CLI prints each one as one line on stderr, `dbmetrics: warning: ...`.
"""

import warnings


class DbmetricsError(Exception):
    """A user-facing error with a one-line message."""


class DbmetricsWarning(UserWarning):
    """A result that is computed but probably not what was meant; the message says what to
    change."""


def warn(message: str) -> None:
    """Issue `message` as a DbmetricsWarning, attributed to the caller of the public API."""
    warnings.warn(message, DbmetricsWarning, stacklevel=3)
