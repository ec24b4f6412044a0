"""The one small exception hierarchy of vtkflow.

The CLI catches :class:`VtkflowError` and prints its message on one line (exit code 2);
everything else is a bug and shows a traceback.
"""

from __future__ import annotations

__all__ = ["VtkflowError", "RecipeError", "InputError", "OutputError"]


class VtkflowError(Exception):
    """Base of every error vtkflow reports to the user as one line."""


class RecipeError(VtkflowError, ValueError):
    """The recipe is malformed: unknown key, wrong type, bad reference, impossible window."""


class InputError(VtkflowError, OSError):
    """An input file is missing, unreadable, truncated or lacks what the recipe asks for."""


class OutputError(VtkflowError, OSError):
    """An output cannot be written: the folder cannot be made, the disk is full, permission is denied."""
