"""Errors that reach the user.

Bad input raises :class:`ScanError` (exit code 2, nothing written).
Numerical trouble is *not* an exception: it is a ``status`` plus ``message``
on the result records, so that every point computed so far is kept.
"""

from __future__ import annotations


class ScanError(Exception):
    """An invalid scan file or scan dictionary.

    Parameters
    ----------
    source : str
        The file name (or ``"<dict>"`` for a scan given as a dictionary).
    key : str
        The dotted key path of the offending entry, e.g. ``trace[1].interval``.
    problem : str
        What is wrong, in plain words, ideally with the fix.
    """

    def __init__(self, source: str, key: str, problem: str) -> None:
        self.source = str(source)
        self.key = key
        self.problem = problem
        super().__init__(f"{self.source}: {key}: {problem}")


class ExpressionError(ValueError):
    """An expression the whitelisting parser refuses.

    The message points at the offending piece of the expression text.
    """


class ModelCodeError(ValueError):
    """A Python model's own function raised an exception during the computation.

    A ValueError, so the engine treats it like other numerical trouble: the
    trace stops there, every point computed so far is kept, and the message
    names the function and the exception.
    """
