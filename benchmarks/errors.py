"""Errors a user can fix: the command line prints the message on one line and exits 2."""


class UserError(Exception):
    """Bad input: the message names what is wrong (a key, a file, an option) and why."""
