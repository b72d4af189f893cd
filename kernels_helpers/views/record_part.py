"""The record part of the workbook while a live screen is open: computed when asked for, from the live state.

Building every static section (tables and some thirty figures) takes seconds, and a kernel that is
busy building them answers no drag. With a live screen open, each record cell therefore leaves a
placeholder, and the sections are built into their placeholders when the engineer presses
"compute the record part" - from the live results and interpretation, which are those of the file
as saved. An edit afterwards marks the part as out of date until it is computed again. The record
itself (``shearbook record``) has no live screen: its sections are built at once, as always.
"""

from __future__ import annotations

from collections.abc import Callable

import ipywidgets as W
from IPython import get_ipython
from IPython.display import display

from ..decisions import utc_now
from . import tables
from .sections import Job, defer_sections

__all__ = ["RecordPart"]

WAITING = ('<p class="sb-record-waiting"><small>Computed on request: press <b>compute the record part</b> on the '
           "live screen (it shows the interpretation as saved).</small></p>")


class RecordPart:
    """Placeholders of the record's sections and the button that fills them; ``state()`` gives what to show."""

    def __init__(self, state: Callable[[], tuple[object, object]]) -> None:
        self.state = state  # () -> (results, interpretation) of the live screen
        self.jobs: list[tuple[W.Output, Job]] = []
        self.computed_revision: int | None = None
        self.button = W.Button(description="compute the record part", icon="file-text-o",
                               layout=W.Layout(width="230px"),
                               tooltip="build the record's sections in the cells below, from the file as saved")
        self.button.add_class("sb-record-compute")
        self.button.on_click(lambda _: self.compute())
        self.stamp = W.HTML(WAITING)
        self.stamp.add_class("sb-record-stamp")
        self.widget = W.HBox([self.button, self.stamp], layout=W.Layout(align_items="center", flex_flow="row wrap"))
        # only in a kernel (a notebook): a script or a test that makes a live screen keeps showing sections at once
        self.active = get_ipython() is not None
        if self.active:
            defer_sections(self.add)

    def add(self, job: Job) -> None:
        """A record cell's section: a placeholder shown in that cell, filled by :meth:`compute`."""
        out = W.Output()
        out.append_display_data({"text/html": WAITING, "text/plain": "computed on request"})
        if not self.jobs:  # the first record cell also carries the button
            display(self.widget)
        display(out)
        self.jobs.append((out, job))

    def compute(self) -> None:
        """Build every section into its placeholder from the live state; say when and from which revision."""
        results, interpretation = self.state()
        self.stamp.value = "<small>computing the record part...</small>"
        defer_sections(None)  # the jobs show their sections now
        try:
            for out, job in self.jobs:
                out.clear_output(wait=True)
                with out:
                    job(results, interpretation)  # type: ignore[arg-type]
        finally:
            if self.active:
                defer_sections(self.add)
        self.computed_revision = interpretation.revision  # type: ignore[attr-defined]
        self.stamp.value = (f'<small class="sb-info">record part computed {tables.esc(utc_now())} from revision '
                            f"{self.computed_revision} of the interpretation file (the live screen's state).</small>")

    def mark_stale(self, revision: int) -> None:
        """After an edit: the part below shows an earlier revision until it is computed again."""
        if self.computed_revision is not None and revision != self.computed_revision:
            self.stamp.value = (f'<small class="sb-flag">out of date: the record part below shows revision '
                                f"{self.computed_revision}, the file is now at revision {revision}; press the button "
                                "to compute it again.</small>")
