"""Files shipped inside the package: the template workbook and the record's nbconvert template.

Found with :mod:`importlib.resources`, so that an installed wheel works from any folder exactly as
a checkout does (``workbook/`` is the package ``kernels_helpers.workbook``, see pyproject.toml).
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from .errors import RecordError

__all__ = ["WORKBOOK_NAME", "record_templates_dir", "workbook_template"]

WORKBOOK_NAME = "shear_interpretation.ipynb"


def _packaged(package: str, name: str) -> Path:
    path = Path(str(resources.files(package) / name))
    if not path.exists():
        raise RecordError(
            f"{name}: not found in the installed package {package} ({path}). The installation is incomplete: "
            "reinstall Shearbook (pip install --force-reinstall shearbook, or pip install -e . in a checkout)."
        )
    return path  # wheels install unzipped: the resource is a real file


def workbook_template(name: str = WORKBOOK_NAME) -> Path:
    """The template workbook shipped with the package."""
    return _packaged("kernels_helpers.workbook", name)


def record_templates_dir() -> Path:
    """The folder holding the record's nbconvert template (``shearbook_record/``)."""
    return _packaged("kernels_helpers.templates.shearbook_record", "index.html.j2").parent.parent
