"""User text in each context a page uses (OWASP XSS prevention cheat sheet, rules 1, 2, 3.1 and 4: common practice).

Each check parses the escaped text back with the parser that a browser context uses (Python's
HTMLParser for HTML and script data, json for JSON) and asks for the same text back, for any text.
"""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser

from hypothesis import given
from hypothesis import strategies as st

from kernels_helpers.escaping import css_string, dom_key, html_text, json_for_script, script_safe, unsafe_in_script

NASTY = st.text(alphabet=st.sampled_from(list("<>&\"'/!-\\ \u2028\u2029\n\té<script>scriptSCRIPT")) | st.characters(),
                max_size=60)


class _Collect(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.starts: list[str] = []
        self.data: list[str] = []
        self.attrs: list[tuple[str, str | None]] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.starts.append(tag)
        self.attrs += attrs

    def handle_data(self, data: str) -> None:
        self.data.append(data)


@given(NASTY)
def test_json_in_a_script_block_is_the_same_value_and_cannot_end_the_block(text: str) -> None:
    block = json_for_script({"id": text, "list": [text]})
    assert not re.search("[<>&\u2028\u2029]", block)
    page = _Collect()
    page.feed(f'<script type="application/json">{block}</script><p>after</p>')
    assert page.starts == ["script", "p"]  # nothing in the text opened an element or ended the block early
    assert json.loads(page.data[0]) == {"id": text, "list": [text]}
    assert unsafe_in_script(block) == []


@given(NASTY.filter(lambda s: "\r" not in s and "\x00" not in s))  # a browser normalises CR and NUL itself
def test_html_text_and_attributes_read_back_as_the_same_text(text: str) -> None:
    page = _Collect()
    page.feed(f'<td title="{html_text(text)}">{html_text(text)}</td>')
    page.close()
    assert page.starts == ["td"]
    assert page.attrs == [("title", text)]
    assert "".join(page.data) == text


@given(NASTY)
def test_a_css_string_holds_only_letters_digits_spaces_and_escapes(text: str) -> None:
    out = css_string(text)
    assert re.fullmatch(r'"(?:[A-Za-z0-9 ]|\\[0-9a-f]{6})*"', out)
    decoded = re.sub(r"\\([0-9a-f]{6})", lambda m: chr(int(m.group(1), 16)), out[1:-1])
    assert decoded == text


@given(st.lists(NASTY, unique=True, max_size=20))
def test_dom_keys_are_tidy_and_distinct(names: list[str]) -> None:
    keys = [dom_key(n) for n in names]
    assert all(re.fullmatch(r"[A-Za-z0-9_-]+", k) for k in keys)
    assert len(set(keys)) == len(keys)
    assert dom_key("BH03-D1") == "BH03-D1"  # a tidy id keeps its own name (the tests and users read it)


def test_script_safe_keeps_json_numbers_and_keys() -> None:
    text = json.dumps({"a<b": [1.5, "x</script>y", "\u2028"]})
    assert json.loads(script_safe(text)) == {"a<b": [1.5, "x</script>y", "\u2028"]}
    assert unsafe_in_script("x</SCRIPT >") == ["</SCRIPT"] and unsafe_in_script("a\u2028") == ["U+2028/U+2029"]
