"""Views: Bokeh figures, HTML tables and notebook display. The only part that imports Bokeh."""

from __future__ import annotations

from .consolidation_views import show_consolidation
from .design_views import (
    show_critical_state_line,
    show_design,
    show_dilatancy,
    show_envelope_statistics,
    show_set_comparison,
)
from .notebook import (
    setup_notebook,
    show_changes_since_record,
    show_envelopes,
    show_header,
    show_provenance,
    show_stages,
    show_tables,
)

__all__ = ["setup_notebook", "show_envelopes", "show_header", "show_provenance", "show_stages", "show_tables"]
__all__ += ["show_changes_since_record", "show_consolidation"]
__all__ += ["show_critical_state_line", "show_design", "show_dilatancy", "show_envelope_statistics",
            "show_set_comparison"]
