"""User text in every context a page uses: HTML text and attributes, JSON in script blocks, DOM names.

A project name, stage id, note or exclusion reason is data, never markup. Each context has its
own rule (OWASP XSS prevention cheat sheet, rules 1, 2 and 3.1, common practice):

* HTML text and quoted attribute values: ``&``, ``<``, ``>``, ``"`` and ``'`` as character
  references (:func:`html_text`);
* JSON inside a ``<script>`` block: ``<``, ``>``, ``&`` and the line separators U+2028/U+2029 as
  ``\\uXXXX`` escapes, so that neither ``</script>`` nor ``<!--`` can end or change the block and the
  text is still the same JSON value (:func:`json_for_script`);
* a CSS string (the page footer of the print stylesheet): hex escapes (:func:`css_string`);
* CSS class names and element ids: a key made of ``[A-Za-z0-9_-]`` only (:func:`dom_key`).
"""

from __future__ import annotations

import hashlib
import html
import json
import re
from typing import Any

__all__ = ["css_string", "dom_key", "html_text", "json_for_script", "script_safe", "unsafe_in_script"]

_SCRIPT_ESCAPES = {"<": "\\u003c", ">": "\\u003e", "&": "\\u0026", "\u2028": "\\u2028", "\u2029": "\\u2029"}
_SCRIPT_RE = re.compile("[<>&\u2028\u2029]")
_TIDY = re.compile(r"[A-Za-z0-9_-]+")


def html_text(value: Any) -> str:
    """``value`` as text for HTML element content or a quoted attribute value."""
    return html.escape(str(value), quote=True)


def script_safe(json_text: str) -> str:
    """JSON text made safe for a script block, still the same JSON value.

    Only the characters themselves are replaced: in JSON text they can occur only inside strings,
    where ``\\u003c`` means ``<`` again for both JSON and JavaScript.
    """
    return _SCRIPT_RE.sub(lambda m: _SCRIPT_ESCAPES[m.group(0)], json_text)


def json_for_script(value: Any, **dumps: Any) -> str:
    """``value`` as JSON for a ``<script type="application/json">`` block (or a JavaScript literal)."""
    return script_safe(json.dumps(value, allow_nan=False, **dumps))


def unsafe_in_script(text: str) -> list[str]:
    """What in a script block's text could end it or open a comment in it (empty: nothing)."""
    found = re.findall(r"</script|<!--|<script", text, re.I)
    return sorted(set(found)) + (["U+2028/U+2029"] if re.search("[\u2028\u2029]", text) else [])


def css_string(value: Any) -> str:
    """``value`` as a double-quoted CSS string: every character but letters, digits and spaces as a 6-digit escape.

    (OWASP rule 4, common practice.) ``</style>``, quotes and backslashes cannot leave the string.
    """
    kept = (c if c.isascii() and (c.isalnum() or c == " ") else f"\\{ord(c):06x}" for c in str(value))
    return '"' + "".join(kept) + '"'


def dom_key(name: str) -> str:
    """A CSS class name / element id for ``name``: itself when it is already tidy, else a tidy hashed form.

    Two different names never share a key: an untidy name gets its SHA-256 prefix appended.
    """
    if _TIDY.fullmatch(name):
        return name
    tidy = re.sub(r"[^A-Za-z0-9_-]+", "_", name).strip("_")[:40] or "id"
    return f"{tidy}-{hashlib.sha256(name.encode('utf-8', 'surrogatepass')).hexdigest()[:10]}"
