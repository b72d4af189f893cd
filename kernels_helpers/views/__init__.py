"""Views: Bokeh figures, HTML tables and notebook display. The only part that imports Bokeh."""

from __future__ import annotations

from .notebook import setup_notebook, show_envelopes, show_header, show_provenance, show_stages, show_tables

__all__ = ["setup_notebook", "show_envelopes", "show_header", "show_provenance", "show_stages", "show_tables"]
