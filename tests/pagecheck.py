"""Checks of a written HTML report page, shared by the report and CLI tests.

The page is parsed with the standard library's html.parser: well-formed nesting, no
external references, every figure embedded (no outside check values: the rules are the
report's own promises, docs/report.md).
"""

import base64
import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


# ------------------------------------------------------------------------------ page checker
class PageChecker(HTMLParser):
    """Collects what the checks need: nesting errors, references, ids, figures, text, CSS."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.refs, self.ids = [], [], [], set()
        self.figures, self.text, self.css, self.tags = {}, [], [], []
        self._figure = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        if "id" in a:
            if a["id"] in self.ids:
                self.errors.append(f"duplicate id {a['id']}")
            self.ids.add(a["id"])
        for key in ("src", "href", "action", "data", "poster", "srcset", "background"):
            if key in a:
                self.refs.append((tag, key, a[key]))
        if "style" in a:
            self.css.append(a["style"])
        if tag == "figure":
            self._figure = a.get("id")
            self.figures[self._figure] = []
        if tag == "img" and self._figure is not None:
            self.figures[self._figure].append(a.get("src", ""))
        if tag not in _VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in _VOID:
            self.stack.pop()

    def handle_endtag(self, tag):
        if tag in _VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> does not close <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()
        if tag == "figure":
            self._figure = None

    def handle_data(self, data):
        if self.stack and self.stack[-1] == "style":
            self.css.append(data)
        else:
            self.text.append(data)


def check_page(page):
    """Parse the page and check it is well formed, self-contained and embeds every figure it
    mentions; returns the checker for further checks."""
    c = PageChecker()
    c.feed(page)
    c.close()
    assert not c.errors, c.errors[:5]
    assert not c.stack, f"unclosed elements: {c.stack}"
    assert page.startswith("<!DOCTYPE html>")
    # nothing is fetched: every reference is embedded data or a link inside the page
    for tag, key, value in c.refs:
        assert value.startswith("data:") or value.startswith("#"), (tag, key, value[:60])
        if value.startswith("#"):
            assert value[1:] in c.ids, f"link to a missing anchor {value}"
    assert not {"link", "script", "iframe", "object", "embed", "base"} & set(c.tags)
    css = "\n".join(c.css)
    assert "url(" not in css and "@import" not in css and "@font-face" not in css
    assert "@media print" in css and "break-inside: avoid" in css
    text = " ".join(c.text)
    mentioned = {int(n) for n in re.findall(r"Figure (\d+)", text)}
    assert mentioned, "the page mentions no figure"
    for n in mentioned:
        srcs = c.figures.get(f"fig-{n}")
        assert srcs, f"Figure {n} is mentioned but not in the page"
        for src in srcs:
            head, _, b64 = src.partition(",")
            data = base64.b64decode(b64, validate=True)
            if head == "data:image/svg+xml;base64":
                assert ET.fromstring(data).tag.endswith("svg")
            else:
                assert head == "data:image/png;base64" and data.startswith(PNG_SIGNATURE)
    return c


def data_values(page, table_key):
    """(full value, text shown) of the numeric cells of the table with ``data-key``, by row."""
    m = re.search(rf'<table id="table-\d+" data-key="{re.escape(table_key)}">(.*?)</table>', page, re.S)
    assert m, f"no table {table_key}"
    out = []
    for r in re.findall(r"<tr>(.*?)</tr>", m.group(1), re.S):
        cells = re.findall(r'<td class="num"(?: data-value="([^"]*)")?>(.*?)</td>', r, re.S)
        if cells:
            out.append([(float(v) if v else None, t) for v, t in cells])
    return out


# ------------------------------------------------------------------------------ modes at the seat
