"""Errors the engine raises on purpose, and the class of its warnings.

The CLI turns an :class:`InputError` into one line on stderr and exit code 2;
anything else is an internal fault (exit code 1, traceback only with --debug).
"""

from __future__ import annotations


class InputError(Exception):
    """Bad input from the user: a file, a config or a model that cannot be used.

    The message is the whole story in one line: it names the file and, where
    they are known, the row, the column or the config key.
    """

    def __init__(self, message: str) -> None:
        super().__init__(" ".join(str(message).split()))


class VinstrataWarning(UserWarning):
    """Something a library user should know of: an untrusted style, a dropped analyte,
    rejected rows. Raised through :mod:`warnings` by :class:`vinstrata.progress.Reporter`
    when library code runs without a reporter; the CLI prints these on stderr instead.
    """
