"""The package's error hierarchy.

Every error raised on purpose by Shearbook derives from :class:`ShearbookError` and also from the
matching built-in, so callers may catch either. Messages are sentences that name the file, row or
field at fault and say what to do next.
"""

from __future__ import annotations

__all__ = [
    "ImportFolderError",
    "InterpretationFileError",
    "ProjectFileError",
    "ReadingsError",
    "RecordError",
    "ShearbookError",
    "UnitError",
]


class ShearbookError(Exception):
    """Base class of every error Shearbook raises on purpose."""


class ProjectFileError(ShearbookError, ValueError):
    """The project file is missing, malformed, or a field in it is wrong."""


class ReadingsError(ShearbookError, ValueError):
    """A readings file cannot be read with the column map and units given."""


class ImportFolderError(ShearbookError, ValueError):
    """A folder of laboratory files cannot be turned into a project without being told more."""


class UnitError(ShearbookError, ValueError):
    """A unit is unknown or does not fit the quantity it is attached to."""


class InterpretationFileError(ShearbookError, ValueError):
    """The interpretation file is corrupt, of a future schema, or disagrees with the project."""


class RecordError(ShearbookError, RuntimeError):
    """The record could not be produced (a notebook cell failed, or the export is not offline)."""
