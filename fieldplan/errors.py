"""Errors raised by fieldplan.

Every error a user can cause derives from :class:`FieldplanError` and also from
the built-in exception it resembles, so library callers can catch either. The CLI
turns any :class:`FieldplanError` into one line on stderr and exit code 2.
Messages name the file, the feature (or row) and the fix.
"""

from __future__ import annotations

__all__ = [
    "FieldplanError",
    "InputError",
    "InvalidBlocksError",
    "OptionError",
    "OutputExistsError",
    "PlanDirError",
    "DesignError",
]


class FieldplanError(Exception):
    """Base class of every error fieldplan raises on purpose."""


class InputError(FieldplanError, ValueError):
    """An input file is missing, unreadable or not what fieldplan needs."""


class InvalidBlocksError(InputError):
    """Block geometries or attributes are invalid for the requested plan."""


class OptionError(FieldplanError, ValueError):
    """Options contradict each other or are out of range."""


class DesignError(FieldplanError, ValueError):
    """A sampling design cannot be carried out with the given inputs."""


class OutputExistsError(FieldplanError, FileExistsError):
    """The output folder holds a plan already and ``force`` was not given."""


class PlanDirError(FieldplanError, FileNotFoundError):
    """A folder given as a plan folder does not hold a readable plan."""
