"""Errors the command line reports as one clear line (exit code 2)."""


class UserError(ValueError):
    """Bad input from the user: a missing file, a bad option, a malformed session.  A ValueError,
    like every refusal of the engine's readers (``host.cli.is_refusal``)."""
