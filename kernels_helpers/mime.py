"""Mimetypes under which the workbook publishes its results and interpretation for the record.

A module of its own so that :mod:`.record` (in the parent process of ``shearbook record``) reads
them without importing the numerical stack.
"""

from __future__ import annotations

__all__ = ["INTERPRETATION_MIME", "RESULTS_MIME"]

RESULTS_MIME = "application/vnd.shearbook.results+json"
INTERPRETATION_MIME = "application/vnd.shearbook.interpretation+json"
