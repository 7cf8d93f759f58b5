"""One exception family with messages a person can act on.

Bad calls (wrong argument types or values) raise the built-in ``ValueError`` or
``TypeError``. Problems with files and data raise :class:`SegcutError` or one of its
subclasses; their ``str()`` is one line, ``"<path>: <problem>"`` when a path is known.
"""

from __future__ import annotations

__all__ = ["SegcutError", "InputError", "ConfigError", "SegcutWarning"]


class SegcutError(Exception):
    """Base class of segcut's own errors.

    Parameters
    ----------
    message : str
        What went wrong and, where possible, how to fix it (one line).
    path : str or os.PathLike, optional
        The file the problem belongs to.
    line : int, optional
        1-based line number inside ``path``.

    Examples
    --------
    >>> str(SegcutError("edge count 3 differs from header 4", path="g.txt", line=1))
    'g.txt:1: edge count 3 differs from header 4'
    """

    def __init__(self, message: str, *, path=None, line: int | None = None):
        self.message = " ".join(str(message).split())  # always one line
        self.path = None if path is None else str(path)
        self.line = line
        super().__init__(str(self))

    def __str__(self) -> str:
        where = ""
        if self.path is not None:
            where = self.path if self.line is None else f"{self.path}:{self.line}"
            where += ": "
        return where + self.message

    def __reduce__(self):  # picklable across processes with its keywords
        return (_rebuild, (type(self), self.message, self.path, self.line))


def _rebuild(cls, message, path, line):
    return cls(message, path=path, line=line)


class InputError(SegcutError):
    """An input file or array cannot be used (unreadable, malformed, wrong shape...)."""


class ConfigError(SegcutError):
    """A configuration file or value is invalid."""


class SegcutWarning(UserWarning):
    """A result was produced, but something deserves a look."""
