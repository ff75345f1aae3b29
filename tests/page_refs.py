"""What a generated HTML page refers to, read with the standard library's HTML parser."""
from __future__ import annotations

from html.parser import HTMLParser


class PageRefs(HTMLParser):
    """Image sources, link targets (remote scripts and styles too), table rows and keyed cells.

    ``cells`` holds ``(data-key, text)`` of every ``<td data-key=...>``.
    """

    def __init__(self):
        super().__init__()
        self.images, self.links, self.cells, self.rows, self._key = [], [], [], 0, None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs["src"])
        if tag == "a" and "href" in attrs:
            self.links.append(attrs["href"])
        if tag in ("script", "link") and (attrs.get("src") or "").startswith("http"):
            self.links.append(attrs["src"])
        self.rows += tag == "tr"
        self._key = attrs.get("data-key") if tag == "td" else self._key

    def handle_data(self, data):
        if self._key:
            self.cells.append((self._key, data.strip()))

    def handle_endtag(self, tag):
        if tag == "td":
            self._key = None
