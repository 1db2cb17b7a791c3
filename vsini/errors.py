"""The project's exceptions and warnings.

One hierarchy: every error raised on purpose by ``vsini`` derives from :class:`VsiniError`
and from the builtin that best describes it, so ``except ValueError`` keeps working.
The command line turns a :class:`VsiniError` into one line of text and a non-zero exit code.
"""

from __future__ import annotations

__all__ = [
    "VsiniError",
    "InputError",
    "SpectrumFileError",
    "FitError",
    "MeasurementError",
    "VsiniWarning",
]


class VsiniError(Exception):
    """Base class of every error that ``vsini`` raises on purpose."""


class InputError(VsiniError, ValueError):
    """An argument or a data value is outside what the function accepts."""


class SpectrumFileError(InputError):
    """A spectrum or star-list file cannot be read or holds bad data.

    Parameters
    ----------
    path : str
        The file that failed.
    problem : str
        One line saying what is wrong and, where possible, how to fix it.
    """

    def __init__(self, path, problem):
        self.path = str(path)
        self.problem = problem
        super().__init__(f"{self.path}: {problem}")


class FitError(VsiniError, RuntimeError):
    """A fit could not be carried out (no usable line, the minimiser failed)."""


class MeasurementError(VsiniError, RuntimeError):
    """An estimator could not produce a value from the data it was given."""


class VsiniWarning(UserWarning):
    """Something is suspicious but a result was still produced."""
