"""User-facing errors."""


class DbmetricsError(Exception):
    """A user-facing error with a one-line message."""
