"""The HTML report: one self-contained page (figures embedded as PNG data URIs)."""

from __future__ import annotations

import base64
import html
from typing import Any, Iterable

__all__ = ["table_html", "figure_html", "page", "Cell", "details"]

_STYLE = """
body{font-family:system-ui,-apple-system,Segoe UI,sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;
color:#1b1b1b;line-height:1.45}
h1{font-size:1.6em;margin-bottom:.2em} h2{border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:1.8em}
table{border-collapse:collapse;font-size:.85em;margin:.6em 0} th,td{border:1px solid #ddd;padding:.25em .5em;
text-align:right} th{background:#f3f3f3} td.l,th.l{text-align:left}
.caution{background:#fff6e0;border-left:4px solid #e0a000;padding:.6em 1em;margin:1em 0}
.excluded{color:#a00000;font-weight:600} .allowed{color:#006000} .unobserved{color:#666;font-style:italic}
td.warn{color:#8a4b00;background:#fff3df} td.differs{font-weight:600} details{margin:.6em 0} summary{cursor:pointer;color:#333}
figure{margin:1em 0} figcaption{font-size:.85em;color:#444} pre{background:#f7f7f7;padding:.6em;overflow-x:auto;
font-size:.75em} .meta{color:#555;font-size:.9em}
"""


class Cell:
    """A table cell with a CSS class of its own (e.g. 'warn' for a value whose assumption fails)."""

    def __init__(self, value: Any, css: str):
        self.value, self.css = value, css


def _cell(value: Any) -> str:
    if isinstance(value, Cell):
        return _cell(value.value)
    if isinstance(value, float):
        if value != value:  # NaN
            return "&ndash;"
        return f"{value:.3g}" if (abs(value) >= 1e4 or (0 < abs(value) < 1e-2)) else f"{value:.4g}"
    return html.escape(str(value))


def table_html(header: list[str], rows: Iterable[list[Any]], left: int = 1,
               row_class: Iterable[str] | None = None) -> str:
    """An HTML table; the first ``left`` columns are left-aligned."""
    head = "".join(f'<th class="{"l" if i < left else ""}">{html.escape(h)}</th>' for i, h in enumerate(header))
    body = []
    classes = list(row_class) if row_class is not None else None
    for k, row in enumerate(rows):
        cls = f' class="{classes[k]}"' if classes else ""
        cells = "".join(f'<td class="{(("l " if i < left else "") + (v.css if isinstance(v, Cell) else "")).strip()}">'
                        f'{_cell(v)}</td>' for i, v in enumerate(row))
        body.append(f"<tr{cls}>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def details(summary: str, body: str, opened: bool = False) -> str:
    """A collapsible block (closed unless ``opened``): ``summary`` is plain text, ``body`` HTML."""
    return f"<details{' open' if opened else ''}><summary>{html.escape(summary)}</summary>{body}</details>"


def figure_html(png: bytes, caption: str, alt: str) -> str:
    """A figure embedded as a data URI, with its caption."""
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{html.escape(alt)}" style="max-width:100%">'
            f"<figcaption>{html.escape(caption)}</figcaption></figure>")


def page(title: str, sections: list[tuple[str, str]], subtitle: str = "") -> str:
    """The whole page: title, then (heading, html) sections."""
    parts = [f"<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{html.escape(title)}</title>",
             f"<style>{_STYLE}</style></head><body><h1>{html.escape(title)}</h1>"]
    if subtitle:
        parts.append(f'<p class="meta">{html.escape(subtitle)}</p>')
    for heading, body in sections:
        parts.append(f"<h2>{html.escape(heading)}</h2>{body}" if heading else body)
    parts.append("</body></html>\n")
    return "".join(parts)


def anchored_figure_html(png: bytes, caption: str, alt: str, img_id: str) -> str:
    """:func:`figure_html` whose <img> carries ``img_id`` (a figure a check or a link finds by id)."""
    return figure_html(png, caption, alt).replace("<img ", f'<img id="{html.escape(img_id)}" ', 1)


def _verdict_style() -> str:
    from pipeline.report.verdicts import VERDICT_CSS

    return VERDICT_CSS


_STYLE += _verdict_style()
__all__ += ["anchored_figure_html"]
