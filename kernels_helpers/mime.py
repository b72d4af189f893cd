"""Mimetypes under which the workbook publishes its results and interpretation for the record.

A module of its own so that :mod:`.record` (in the parent process of ``shearbook record``) reads
them without importing the numerical stack.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

__all__ = ["INTERPRETATION_MIME", "RESULTS_MIME", "canonical_text", "digest_of"]

RESULTS_MIME = "application/vnd.shearbook.results+json"
INTERPRETATION_MIME = "application/vnd.shearbook.interpretation+json"


def canonical_text(value: Any) -> str:
    """The text a record embeds for a JSON value: sorted keys, two-space indent, UTF-8, a final newline."""
    return json.dumps(value, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n"


def digest_of(value: Any) -> str:
    """SHA-256 of :func:`canonical_text`: the record digest of its results."""
    return hashlib.sha256(canonical_text(value).encode("utf-8")).hexdigest()
