"""Errors the command line reports as one clear line (exit code 2)."""


class UserError(Exception):
    """Bad input from the user: a missing file, a bad option, a malformed session."""
