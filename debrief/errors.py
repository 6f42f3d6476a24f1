"""Errors a user can cause. The CLI turns them into one line on stderr and exit status 2."""


class InputError(ValueError):
    """Fatal input problem: missing or unreadable file, missing column, bad option, bad value.

    The message is one complete sentence a user can act on; no traceback is shown for it.
    """
