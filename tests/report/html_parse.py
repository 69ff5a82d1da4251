"""Reading a rendered report back: bound numbers, numeric cells, headings, visible text (stdlib parser)."""

from __future__ import annotations

from dataclasses import dataclass, field
from html.parser import HTMLParser


@dataclass
class Page:
    numbers: list[dict] = field(default_factory=list)      # span.n: attributes + text
    suppressed: list[dict] = field(default_factory=list)
    num_cells: list[list[str]] = field(default_factory=list)  # per td.num: classes of its spans + its text
    headings: list[tuple[str, str]] = field(default_factory=list)
    tags: list[str] = field(default_factory=list)
    text: str = ""
    urls: list[str] = field(default_factory=list)


class _Reader(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.page = Page()
        self.stack: list[tuple[str, dict]] = []
        self.span: dict | None = None
        self.cell: list | None = None
        self.heading: list | None = None
        self.chunks: list[str] = []
        self.in_style = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.page.tags.append(tag)
        for key in ("src", "href", "xlink:href", "action", "data"):
            if key in a and a[key] and not a[key].startswith("#"):
                self.page.urls.append(a[key])
        if tag == "style":
            self.in_style = True
        classes = (a.get("class") or "").split()
        if tag == "span" and "n" in classes:
            self.span = {**a, "text": ""}
        if tag == "span" and "suppressed" in classes:
            self.page.suppressed.append(a)
            if self.cell is not None:
                self.cell[0].append("suppressed")
        if tag == "span" and "na" in classes and self.cell is not None:
            self.cell[0].append("na")
        if tag == "td" and "num" in classes:
            self.cell = [[], ""]
        if tag in ("h1", "h2", "h3"):
            self.heading = [tag, ""]

    def handle_endtag(self, tag):
        if tag == "style":
            self.in_style = False
        if tag == "span" and self.span is not None:
            self.page.numbers.append(self.span)
            if self.cell is not None:
                self.cell[0].append("n")
            self.span = None
        if tag == "td" and self.cell is not None:
            self.page.num_cells.append(self.cell)
            self.cell = None
        if tag in ("h1", "h2", "h3") and self.heading is not None:
            self.page.headings.append((self.heading[0], self.heading[1].strip()))
            self.heading = None

    def handle_data(self, data):
        if self.in_style:
            return
        self.chunks.append(data)
        if self.span is not None:
            self.span["text"] += data
        if self.cell is not None:
            self.cell[1] += data
        if self.heading is not None:
            self.heading[1] += data


def read(html: str) -> Page:
    reader = _Reader()
    reader.feed(html)
    reader.close()
    reader.page.text = " ".join(reader.chunks)
    return reader.page
