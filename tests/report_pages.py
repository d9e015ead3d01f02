"""Reading a rendered report back: its tables as numbers, for comparison with oc.csv."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from xml.etree.ElementTree import Element

import html5lib


def parse(path: Path) -> Element:
    """The report page as an element tree; raises on any HTML parse error (strict)."""
    parser = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False)
    return parser.parse(Path(path).read_bytes())


def text(element: Element) -> str:
    """All text inside ``element``, whitespace collapsed."""
    return " ".join("".join(element.itertext()).split())


@dataclass
class ParsedCell:
    """A table cell as shown (text) and the number it stands for (value, if any)."""

    text: str
    value: float | None


@dataclass
class ParsedRow:
    cells: dict[str, ParsedCell]
    classes: set[str]


def table_rows(page: Element, name: str) -> list[ParsedRow]:
    """The rows of the report table ``name`` (all its blocks, in order), keyed by the
    columns' ``data-key``."""
    tables = page.findall(f".//table[@data-table='{name}']")
    if not tables:
        raise KeyError(f"no table {name!r} in the page")
    rows = []
    for table in tables:
        keys = [th.get("data-key") for th in table.findall("./thead/tr/th[@data-key]")]
        for tr in table.findall("./tbody/tr"):
            cells = {}
            for key, td in zip(keys, tr.findall("./td"), strict=True):
                value = td.get("data-value")
                cells[key] = ParsedCell(text(td), None if value is None else float(value))
            rows.append(ParsedRow(cells, set((tr.get("class") or "").split())))
    return rows


def section_ids(page: Element) -> list[str]:
    """Ids of the report's top-level sections, in order."""
    return [s.get("id") for s in page.findall(".//main/section")]
