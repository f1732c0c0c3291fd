"""A self-contained HTML report: sections of text, tables and embedded PNG images.

One file, no network, no JavaScript: images are embedded as base64 data URIs
and the style sheet is inline, so the report opens anywhere and can be mailed.
"""

from __future__ import annotations

import base64
import html
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

__all__ = ["Section", "Report", "table_html", "image_html"]

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2rem auto; max-width: 62rem; color: #1d2733; line-height: 1.45; }
h1 { border-bottom: 3px solid #2f6f5e; padding-bottom: .3rem; }
h2 { color: #2f6f5e; margin-top: 2.2rem; }
table { border-collapse: collapse; margin: .8rem 0; font-size: .92rem; }
th, td { border: 1px solid #c9d3dc; padding: .25rem .6rem; text-align: left; vertical-align: top; }
th { background: #eef3f1; }
img { max-width: 100%; border: 1px solid #c9d3dc; margin: .4rem 0; }
.verdict-composes { color: #1f7a3a; font-weight: 600; }
.verdict-breaks { color: #a42323; font-weight: 600; }
.verdict-unsure { color: #946200; font-weight: 600; }
.caution { border-left: 5px solid #a42323; background: #fbf1f1; padding: .6rem 1rem; }
pre { background: #f4f6f8; padding: .6rem; overflow-x: auto; font-size: .85rem; }
figure { margin: .6rem 0; } figcaption { font-size: .85rem; color: #4a5866; }
"""


def _escape(value: Any) -> str:
    if isinstance(value, float):
        return html.escape(f"{value:.4g}")
    return html.escape("-" if value is None else str(value))


def table_html(rows: Sequence[dict[str, Any]], columns: Sequence[tuple[str, str]], *, classes: dict[str, str] | None = None) -> str:
    """An HTML table; ``classes`` maps a column key to a CSS class prefix for its cells."""
    head = "".join(f"<th>{_escape(h)}</th>" for _, h in columns)
    body = []
    for row in rows:
        cells = []
        for key, _ in columns:
            value = row.get(key)
            css = f' class="{classes[key]}-{_escape(value)}"' if classes and key in classes else ""
            cells.append(f"<td{css}>{_escape(value)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def image_html(png: bytes | Path, caption: str) -> str:
    """A figure with the PNG embedded as a data URI."""
    data = Path(png).read_bytes() if isinstance(png, Path) else png
    if not data.startswith(b"\x89PNG"):
        raise ValueError(f"image for {caption!r} must be PNG data")
    encoded = base64.b64encode(data).decode("ascii")
    return f'<figure><img alt="{_escape(caption)}" src="data:image/png;base64,{encoded}"><figcaption>{_escape(caption)}</figcaption></figure>'


@dataclass
class Section:
    """One titled part of the report; ``body`` is trusted HTML built with the helpers above."""

    anchor: str
    title: str
    body: list[str] = field(default_factory=list)

    def text(self, paragraph: str) -> "Section":
        self.body.append(f"<p>{_escape(paragraph)}</p>")
        return self

    def pre(self, text: str) -> "Section":
        self.body.append(f"<pre>{_escape(text)}</pre>")
        return self

    def add(self, fragment: str) -> "Section":
        self.body.append(fragment)
        return self


@dataclass
class Report:
    """Title, sections, and a caution box; ``write`` produces one HTML file."""

    title: str
    subtitle: str = ""
    sections: list[Section] = field(default_factory=list)
    caution: str = ""

    def section(self, anchor: str, title: str) -> Section:
        s = Section(anchor, title)
        self.sections.append(s)
        return s

    def render(self) -> str:
        toc = "".join(f'<li><a href="#{_escape(s.anchor)}">{_escape(s.title)}</a></li>' for s in self.sections)
        parts = [
            "<!DOCTYPE html>",
            '<html lang="en"><head><meta charset="utf-8">',
            f"<title>{_escape(self.title)}</title><style>{_STYLE}</style></head><body>",
            f"<h1>{_escape(self.title)}</h1>",
            f"<p>{_escape(self.subtitle)}</p>" if self.subtitle else "",
            f'<div class="caution" id="caution"><strong>Safety.</strong> {_escape(self.caution)}</div>' if self.caution else "",
            f"<nav><ul>{toc}</ul></nav>",
        ]
        for s in self.sections:
            parts.append(f'<section id="{_escape(s.anchor)}"><h2>{_escape(s.title)}</h2>{"".join(s.body)}</section>')
        parts.append("</body></html>")
        return "\n".join(p for p in parts if p)

    def write(self, path: str | Path) -> Path:
        """Write atomically (temp file, then rename) so a killed run leaves no half report."""
        import os
        import tempfile

        from ..file_modes import apply_umask

        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".report-", suffix=".tmp")
        apply_umask(fd)  # mkstemp makes 0600: readable by teammates like any file the user writes
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(self.render())
        os.replace(tmp, path)
        return path
