"""What a reader sees in a record, read back, and compared with the same sections rebuilt from a re-run.

A record's embedded JSON is for machines; a reviewer reads its tables, flags, headings and plots.
:func:`read_visible` reads every marked part of a record (see :mod:`.sections`): an HTML part as
its text blocks and its tables (header and cells), a figure as the data of its sources, decoded
from Bokeh's document JSON. :func:`compare_visible` rebuilds every section from the re-run's
results with the same functions the workbook used and names each difference by section, table,
row and column, or by figure, source, column and point.
"""

from __future__ import annotations

import base64
import gzip
import json
import math
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from html.parser import HTMLParser
from typing import Any

import numpy as np

from .figures import Plot
from .sections import PART_TAG, SECTIONS, SOURCE_TAG, Context, part_html

__all__ = ["Shown", "compare_visible", "read_visible"]

BLOCKS = {"p", "div", "h1", "h2", "h3", "h4", "h5", "h6", "pre", "li", "ul", "ol", "section"}
Table = list[list[str]]  # rows of cell text; the first row is the header
Item = tuple[str, Any]  # ("text", str) or ("table", Table) or ("plot", list of sources)


@dataclass
class Shown:
    """The visible parts of one section: index -> items, and the arguments it was made with."""

    args: dict[str, Any] = field(default_factory=dict)
    parts: dict[int, list[Item]] = field(default_factory=dict)


def _norm(text: str) -> str:
    return " ".join(text.split())


class _Parts(HTMLParser):
    """Reads every ``div[data-sb-section]`` part: its text blocks and tables, in order."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.found: list[tuple[str, int, dict[str, Any], list[Item]]] = []
        self._depth = 0  # open divs inside the current part (0: not in a part)
        self._items: list[Item] = []
        self._buf: list[str] = []
        self._table: Table | None = None
        self._cell: list[str] | None = None
        self._skip = 0  # inside <style> or <script>: not text a reader sees

    def _flush(self) -> None:
        text = _norm("".join(self._buf))
        self._buf = []
        if text:
            self._items.append(("text", text))

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        if self._depth == 0:
            if tag == "div" and a.get("data-sb-section"):
                args = json.loads(a["data-sb-args"] or "{}") if "data-sb-args" in a else {}
                self.found.append((a["data-sb-section"] or "", int(a.get("data-sb-part") or 0), args, []))
                self._items, self._depth = self.found[-1][3], 1
            return
        self._depth += tag == "div"
        if tag in ("style", "script"):
            self._skip += 1
        elif tag == "br":  # "<br>" and "<br/>" alike: a space, in a cell and in text
            self.handle_startendtag(tag, attrs)
        elif tag == "table":
            self._flush()
            self._table = []
        elif tag == "tr" and self._table is not None:
            self._table.append([])
        elif tag in ("td", "th") and self._table is not None:
            self._cell = []
        elif tag in BLOCKS and self._cell is None:
            self._flush()

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if self._depth and tag == "br":
            (self._cell if self._cell is not None else self._buf).append(" ")

    def handle_endtag(self, tag: str) -> None:
        if self._depth == 0:
            return
        if tag in ("style", "script"):
            self._skip = max(0, self._skip - 1)
        elif tag in ("td", "th") and self._cell is not None and self._table:
            self._table[-1].append(_norm("".join(self._cell)))
            self._cell = None
        elif tag == "table" and self._table is not None:
            self._items.append(("table", self._table))
            self._table = None
        elif tag in BLOCKS and self._cell is None:
            self._flush()
        if tag == "div":
            self._depth -= 1
            if self._depth == 0:
                self._flush()

    def handle_data(self, data: str) -> None:
        if self._depth and not self._skip:
            (self._cell if self._cell is not None else self._buf).append(data)


def _decode(value: Any) -> Any:
    """Bokeh's serialised values as plain Python: maps, numbers, arrays (base64, gzip) and lists."""
    if isinstance(value, list):
        return [_decode(v) for v in value]
    if not isinstance(value, dict):
        return value
    kind = value.get("type")
    if kind == "map":
        return {k: _decode(v) for k, v in value.get("entries", [])}
    if kind == "number":
        return float(value["value"])
    if kind == "ndarray":
        buf = value["array"]
        if isinstance(buf, dict) and buf.get("type") == "bytes":
            raw = base64.b64decode(buf["data"])
            raw = gzip.decompress(raw) if raw[:2] == b"\x1f\x8b" else raw
            dtype = np.dtype(value["dtype"]).newbyteorder("<" if value.get("order", "little") == "little" else ">")
            return np.frombuffer(raw, dtype=dtype).tolist()
        return _decode(buf)
    return {k: _decode(v) for k, v in value.items()}


def _objects(value: Any) -> Iterator[dict[str, Any]]:
    """Every serialised Bokeh object in document order (each once: later references are ids only)."""
    if isinstance(value, dict):
        if value.get("type") == "object":
            yield value
        for v in value.values():
            yield from _objects(v)
    elif isinstance(value, list):
        for v in value:
            yield from _objects(v)


def _tag(attributes: dict[str, Any], prefix: str) -> str | None:
    return next((t for t in attributes.get("tags", []) if isinstance(t, str) and t.startswith(prefix)), None)


def _plot(doc: dict[str, Any]) -> tuple[str | None, list[dict[str, Any]]]:
    """The part tag of a document's root and the data of its sources, by their tag (untagged ones last)."""
    tag = next((t for root in doc.get("roots", []) if (t := _tag(root.get("attributes", {}), PART_TAG))), None)
    found = [(o["attributes"], _decode(o["attributes"].get("data", {}))) for o in _objects(doc.get("roots", []))
             if o.get("name") == "ColumnDataSource"]

    def order(item: tuple[dict[str, Any], Any]) -> int:
        t = _tag(item[0], SOURCE_TAG)
        return int(t[len(SOURCE_TAG):]) if t and t[len(SOURCE_TAG):].isdigit() else 1 << 30

    return tag, [data for _, data in sorted(found, key=order)]


def _plain(value: Any) -> Any:
    """A source column as plain Python values (what the record's JSON decodes to)."""
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


_DOCS = re.compile(r"const docs_json = (\{.*?\});\n")


def read_visible(html_text: str) -> dict[str, Shown]:
    """Every marked part of a record (or of rebuilt parts), by section."""
    shown: dict[str, Shown] = {}
    parser = _Parts()
    parser.feed(html_text)
    for name, index, args, items in parser.found:
        sec = shown.setdefault(name, Shown(args=args))
        sec.parts[index] = items
    for m in _DOCS.finditer(html_text):
        for doc in json.loads(m.group(1)).values():
            tag, sources = _plot(doc)
            if tag is None:
                continue
            name, _, index = tag[len(PART_TAG):].rpartition(":")
            shown.setdefault(name, Shown()).parts[int(index)] = [("plot", sources)]
    return shown


def _rebuilt(name: str, ctx: Context) -> dict[int, list[Item]]:
    """The parts of section ``name`` as the re-run gives them; a figure as its sources' data, not drawn."""
    parts: dict[int, list[Item]] = {}
    for i, part in enumerate(SECTIONS[name](ctx)):
        if isinstance(part, Plot):
            parts[i] = [("plot", [{k: _plain(v) for k, v in columns.items()} for columns in part.sources.values()])]
        else:
            parts[i] = read_visible(part_html(name, i, part, ctx.extra))[name].parts[i]
    return parts


@dataclass
class _Diff:
    exact: bool
    lines: list[str] = field(default_factory=list)
    compared: int = 0

    def value(self, a: Any, b: Any) -> bool:
        self.compared += 1
        if isinstance(a, int | float) and isinstance(b, int | float) and not isinstance(a, bool | str):
            if math.isnan(a) and math.isnan(b):
                return True
            return a == b if self.exact else math.isclose(a, b, rel_tol=1e-6, abs_tol=1e-9)
        return a == b


def _clip(text: Any, limit: int = 90) -> str:
    s = str(text)
    return repr(s if len(s) <= limit else s[: limit - 3] + "...")


def _tables(where: str, a: Table, b: Table, d: _Diff) -> None:
    head = b[0] if b else []
    if len(a) != len(b):
        d.lines.append(f"{where}: the record shows {len(a) - 1} row(s), the re-run gives {len(b) - 1}")
    for r, (row_a, row_b) in enumerate(zip(a, b, strict=False)):
        label = f"row {_clip(row_b[0], 40)}" if r and row_b else ("header" if r == 0 else f"row {r}")
        if len(row_a) != len(row_b):
            d.lines.append(f"{where}, {label}: the record shows {len(row_a)} cell(s), the re-run gives {len(row_b)}")
        for c, (x, y) in enumerate(zip(row_a, row_b, strict=False)):
            if not d.value(x, y):
                col = _clip(head[c], 40) if c < len(head) else str(c + 1)
                d.lines.append(f"{where}, {label}, column {col}: the record shows {_clip(x)}, "
                               f"the re-run gives {_clip(y)}")


def _sources(where: str, a: list[dict[str, Any]], b: list[dict[str, Any]], d: _Diff) -> None:
    if len(a) != len(b):
        d.lines.append(f"{where}: the record plots {len(a)} data source(s), the re-run {len(b)}")
    for k, (sa, sb) in enumerate(zip(a, b, strict=False), start=1):
        for col in sorted(set(sa) | set(sb)):
            xa, xb = sa.get(col), sb.get(col)
            if not isinstance(xa, list) or not isinstance(xb, list) or len(xa) != len(xb):
                if not d.value(json.dumps(xa, default=str), json.dumps(xb, default=str)):
                    d.lines.append(f"{where}, source {k}, column {col!r}: the record plots "
                                   f"{_count(xa)}, the re-run {_count(xb)}")
                continue
            bad = [i for i, (x, y) in enumerate(zip(xa, xb, strict=True)) if not d.value(x, y)]
            if bad:
                i = bad[0]
                more = f" (and {len(bad) - 1} more point(s))" if len(bad) > 1 else ""
                d.lines.append(f"{where}, source {k}, column {col!r}, point {i + 1}: the record plots "
                               f"{_clip(xa[i])}, the re-run {_clip(xb[i])}{more}")


def _count(x: Any) -> str:
    return f"{len(x)} point(s)" if isinstance(x, list) else ("nothing" if x is None else _clip(x))


def _what(item: Item) -> str:
    if item[0] == "text":
        return f"the text {_clip(item[1])}"
    if item[0] == "table":
        rows = item[1]
        first = f", first {_clip(' | '.join(rows[1]), 60)}" if len(rows) > 1 else ""
        return f"a table of {len(rows) - 1} row(s){first}"
    return "a figure"


def _items(where: str, a: list[Item], b: list[Item], d: _Diff) -> None:
    tables = 0
    for k, (ia, ib) in enumerate(zip(a, b, strict=False), start=1):
        if ia[0] != ib[0]:
            d.lines.append(f"{where}, block {k}: the record shows {_what(ia)}, the re-run gives {_what(ib)}")
            return
        if ia[0] == "table":
            tables += 1
            _tables(f"{where}, table {tables}", ia[1], ib[1], d)
        elif ia[0] == "plot":
            _sources(where, ia[1], ib[1], d)
        elif not d.value(ia[1], ib[1]):
            d.lines.append(f"{where}, text {k}: the record shows {_clip(ia[1])}, the re-run gives {_clip(ib[1])}")
    if len(a) != len(b):
        extra = a[len(b):] or b[len(a):]
        d.lines.append(f"{where}: the record shows {len(a)} block(s), the re-run gives {len(b)} "
                       f"(first differing: {_clip(extra[0][1] if extra[0][0] == 'text' else extra[0][0])})")


def compare_visible(html_text: str, ctx: Context, exact: bool) -> tuple[list[str], int]:
    """Differences between what the record shows and the sections rebuilt from ``ctx``; and how many compared.

    Every section of :data:`.sections.SECTIONS` must be in the record; its arguments are taken from it.
    """
    shown = read_visible(html_text)
    d = _Diff(exact)
    for name in SECTIONS:
        rec = shown.get(name)
        if rec is None:
            d.lines.append(f"section {name!r}: not in the record (removed?)")
            continue
        built = _rebuilt(name, Context(ctx.results, ctx.project, ctx.interpretation, rec.args))
        for i in sorted(set(rec.parts) | set(built)):
            kind = "figure" if (built.get(i) or rec.parts.get(i) or [("",)])[0][0] == "plot" else "part"
            where = f"section {name!r}, {kind} {i + 1}"
            if i not in rec.parts:
                d.lines.append(f"{where}: not in the record (removed?)")
            elif i not in built:
                d.lines.append(f"{where}: in the record, not in the re-run")
            else:
                _items(where, rec.parts[i], built[i], d)
    return d.lines, d.compared
