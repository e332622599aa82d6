"""Errors raised for input the tool cannot use.

Numerical outcomes (a singular matrix, a refinement that does not converge)
are results, never errors. Only input that cannot be read or does not fit
together raises, and always a subclass of :class:`ConditioningError`, whose
``str`` is the one-line message the command prints before exiting with 2.
"""

from __future__ import annotations


class ConditioningError(ValueError):
    """Base class of every error the tool raises on purpose."""


class FileError(ConditioningError):
    """A file the user named cannot be used (exit 2): ``str`` is ``"<path>: <problem>"``.

    Parameters
    ----------
    path : str
        The file as the user named it.
    problem : str
        What is wrong, in one line, with the line or row where it applies (white
        space runs folded to one blank).
    """

    def __init__(self, path: str, problem: str):
        self.path = str(path)
        self.problem = " ".join(str(problem).split())
        super().__init__(f"{self.path}: {self.problem}")


class InputError(FileError):
    """A user-supplied input file cannot be used."""


class OutputError(FileError):
    """An output file cannot be written, or would overwrite an input (the problem names the
    other file when two collide)."""


class SettingError(ConditioningError):
    """An environment setting the tool reads (``CONDITIONING_MEMORY_LIMIT``) is not understood (exit 2)."""
