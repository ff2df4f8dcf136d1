"""The error of a user's mistake at the command line, shared by sim's and analysis's commands."""

__all__ = ["UserError"]


class UserError(Exception):
    """A mistake of the user's, reported as a message and exit status 2."""
