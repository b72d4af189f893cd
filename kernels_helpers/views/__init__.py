"""Views: Bokeh figures, HTML tables and notebook display. The only part that imports Bokeh."""

from __future__ import annotations

from .notebook import (
    setup_notebook,
    show_changes_since_record,
    show_consolidation,
    show_critical_state_line,
    show_design,
    show_dilatancy,
    show_envelope_statistics,
    show_envelopes,
    show_header,
    show_provenance,
    show_set_comparison,
    show_stages,
    show_summary,
    show_tables,
    use_units,
)

__all__ = ["setup_notebook", "show_changes_since_record", "show_consolidation", "show_critical_state_line",
           "show_design", "show_dilatancy", "show_envelope_statistics", "show_envelopes", "show_header",
           "show_provenance", "show_set_comparison", "show_stages", "show_summary", "show_tables", "use_units"]
