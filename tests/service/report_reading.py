"""Reading the run report's HTML back with the standard library's parser."""

from __future__ import annotations

from dataclasses import dataclass, field
from html.parser import HTMLParser


@dataclass
class Element:
    tag: str
    attrs: dict[str, str]
    item: str | None  # data-item-id of the enclosing item section


@dataclass
class ReportDom(HTMLParser):
    elements: list[Element] = field(default_factory=list)
    text: list[str] = field(default_factory=list)
    _items: list[tuple[str, int]] = field(default_factory=list)  # (item id, depth)
    _depth: int = 0

    def __post_init__(self) -> None:
        super().__init__(convert_charrefs=True)

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        values = {k: v or "" for k, v in attrs}
        self._depth += 1
        if tag == "section" and "data-item-id" in values:
            self._items.append((values["data-item-id"], self._depth))
        self.elements.append(Element(tag, values, self._items[-1][0] if self._items else None))

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        values = {k: v or "" for k, v in attrs}
        self.elements.append(Element(tag, values, self._items[-1][0] if self._items else None))

    def handle_endtag(self, tag: str) -> None:
        if self._items and self._items[-1][1] == self._depth and tag == "section":
            self._items.pop()
        self._depth -= 1

    def handle_data(self, data: str) -> None:
        self.text.append(data)

    def find(self, tag: str, cls: str | None = None) -> list[Element]:
        return [e for e in self.elements if e.tag == tag
                and (cls is None or cls in e.attrs.get("class", "").split())]

    @property
    def all_text(self) -> str:
        return " ".join(" ".join(self.text).split())


def read(html: str) -> ReportDom:
    dom = ReportDom()
    dom.feed(html)
    dom.close()
    return dom
