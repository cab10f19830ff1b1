"""The error every user-facing failure derives from."""

__all__ = ["VolsweepError"]


class VolsweepError(Exception):
    """A problem the user can fix; the CLI prints it as one line and exits 1."""
