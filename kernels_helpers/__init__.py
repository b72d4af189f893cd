"""Shearbook: interpretation of direct shear (shear box) tests.

The pure core (this package, minus :mod:`kernels_helpers.views`, :mod:`kernels_helpers.record`
and :mod:`kernels_helpers.cli`) imports no Bokeh, ipywidgets or nbconvert.

The names below are imported on first use (PEP 562), so that a command that only reads a project
file (``shearbook record`` before it starts the kernel) does not pay for the whole numerical stack.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .errors import ShearbookError
    from .interpretation import Interpretation, load_interpretation
    from .pipeline import interpret
    from .project import Project, load_project
    from .results import Results
    from .revisions import save_interpretation

_EXPORTS = {
    "Interpretation": ".interpretation",
    "Project": ".project",
    "Results": ".results",
    "ShearbookError": ".errors",
    "interpret": ".pipeline",
    "load_interpretation": ".interpretation",
    "load_project": ".project",
    "save_interpretation": ".revisions",
}

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


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(module, __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))
