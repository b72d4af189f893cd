"""Shearbook: interpretation of direct shear (shear box) tests.

The pure core (this package, minus :mod:`kernels_helpers.views`, :mod:`kernels_helpers.record`
and :mod:`kernels_helpers.cli`) imports no Bokeh, ipywidgets or nbconvert.
"""

from __future__ import annotations

from .errors import ShearbookError
from .interpretation import Interpretation, load_interpretation, save_interpretation
from .pipeline import interpret
from .project import Project, load_project
from .results import Results

__all__ = [
    "Interpretation",
    "Project",
    "Results",
    "ShearbookError",
    "interpret",
    "load_interpretation",
    "load_project",
    "save_interpretation",
]
