"""The report as one self-contained HTML page: figures embedded, no script, readable offline.

Every figure is a PNG embedded as a ``data:`` URI, the style sheet is inline,
nothing is fetched and nothing runs: the file can be mailed, archived and
opened years later in any browser. Every value from a file is escaped.
"""

from __future__ import annotations

import base64
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from html import escape

from ..core.lineage import CAUTION
from ..raster.style import RAMP

_STYLE = f"""
body {{ font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; margin: 0; color: #1d2533;
       background: #fbfaf7; line-height: 1.45; }}
main {{ max-width: 70em; margin: 0 auto; padding: 1.5em 2em 3em; }}
h1 {{ font-size: 1.6em; margin: 0.2em 0; color: {RAMP[0][1]}; }}
h2 {{ font-size: 1.25em; margin-top: 2.2em; padding-top: 0.6em; border-top: 2px solid {RAMP[1][1]};
      color: {RAMP[0][1]}; }}
h3 {{ font-size: 1.02em; margin-top: 1.4em; }}
p.meta {{ color: #4a5566; font-size: 0.92em; }}
.caution {{ border-left: 6px solid {RAMP[4][1]}; background: #f6e6dc; padding: 0.7em 1em;
            margin: 1em 0; color: #5a2412; }}
.note {{ border-left: 4px solid {RAMP[3][1]}; background: #f7f0dc; padding: 0.5em 0.9em; margin: 0.8em 0; }}
figure {{ margin: 1em 0; }} figure img {{ max-width: 100%; border: 1px solid #d4d8de; background: white; }}
figcaption {{ font-size: 0.88em; color: #4a5566; margin-top: 0.3em; }}
table {{ border-collapse: collapse; margin: 0.6em 0; font-size: 0.88em; }}
th, td {{ border: 1px solid #c3c9d2; padding: 0.25em 0.55em; text-align: right; vertical-align: top; }}
th {{ background: #e7ebef; }} td.text, th.text {{ text-align: left; }}
td.rationale, th.rationale {{ text-align: left; min-width: 22em; }}
table.wide {{ width: 100%; }}
div.scroll {{ overflow-x: auto; }}
code {{ font-size: 0.9em; word-break: break-all; }}
nav ol {{ columns: 2; font-size: 0.92em; }}
"""


@dataclass
class Figure:
    """One figure: its PNG's bytes, a title (the image's alt text) and a caption."""

    png: bytes
    title: str
    caption: str = ""


@dataclass
class Section:
    """One section of the report: an anchor id, a heading and its body (HTML, already escaped)."""

    id: str
    title: str
    parts: list[str] = field(default_factory=list)

    def add(self, *html: str) -> Section:
        """Append HTML to the body; return the section."""
        self.parts.extend(html)
        return self


def data_uri(png: bytes) -> str:
    """Return a PNG as a ``data:image/png;base64,…`` URI."""
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def figure_html(figure: Figure) -> str:
    """Return a figure element with the image embedded."""
    caption = f"<figcaption>{escape(figure.caption)}</figcaption>" if figure.caption else ""
    return (f'<figure><img src="{data_uri(figure.png)}" alt="{escape(figure.title)}">'
            f"{caption}</figure>")


def number(value, digits: int = 4) -> str:
    """Format a value for a table: numbers to ``digits`` significant figures, None as a dash."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return str(value)


def table_html(header: Sequence[str], rows: Sequence[Sequence], text_columns: Sequence[int] = (0,),
               wide_columns: Sequence[int] = ()) -> str:
    """Return a table; columns in ``text_columns`` are left-aligned, ``wide_columns`` wrap as prose."""
    def cell(tag: str, i: int, value) -> str:
        css = "rationale" if i in wide_columns else ("text" if i in text_columns else "")
        attr = f' class="{css}"' if css else ""
        return f"<{tag}{attr}>{escape(number(value))}</{tag}>"

    head = "<tr>" + "".join(cell("th", i, h) for i, h in enumerate(header)) + "</tr>"
    body = "".join("<tr>" + "".join(cell("td", i, v) for i, v in enumerate(row)) + "</tr>" for row in rows)
    opening = '<table class="wide">' if wide_columns else "<table>"
    return f'<div class="scroll">{opening}{head}{body}</table></div>'


def paragraph(text: str, css: str = "") -> str:
    """Return an escaped paragraph, optionally of a class (``note``, ``caution``, ``meta``)."""
    attr = f' class="{css}"' if css else ""
    return f"<p{attr}>{escape(text)}</p>"


def caution_html(extra: str = "") -> str:
    """Return the caution every Favour output carries, in plain words."""
    return paragraph(f"Caution. {CAUTION} {extra}".strip(), "caution")


_READ_AS = "Read every number below as a ranking of ground, and every figure with its notes."


def page(title: str, meta: Sequence[str], sections: Sequence[Section]) -> str:
    """Return the whole report: title, meta lines, the caution, contents, sections, the caution again."""
    contents = "".join(f'<li><a href="#{escape(s.id)}">{escape(s.title)}</a></li>' for s in sections)
    body = "".join(f'<section id="{escape(s.id)}"><h2>{escape(s.title)}</h2>{"".join(s.parts)}</section>'
                   for s in sections)
    lines = "".join(paragraph(line, "meta") for line in meta)
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{escape(title)}</title><style>{_STYLE}</style></head><body><main>"
            f"<h1>{escape(title)}</h1>{lines}"
            f"{caution_html(_READ_AS)}"
            f"<nav><h3>Contents</h3><ol>{contents}</ol></nav>{body}"
            f"<h2 id=\"caution\">Caution</h2>{caution_html()}"
            "</main></body></html>\n")
