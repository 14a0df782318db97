"""The report's page: one self-contained HTML document (inline CSS and SVG, no external files).

Assembles the tables of :mod:`loopkit.report.content` and the SVG plots of
:mod:`loopkit.report.figures` into sections.  A calm, printable look of our own: one column,
dark slate ink on white, thin rules, numbers right-aligned in tabular figures, one warm colour
reserved for the caution.
"""

from __future__ import annotations

import re
from html import escape

from .content import Table

__all__ = ["CSS", "caution_box", "check_self_contained", "document", "figure", "paragraphs", "section", "table_html"]

CSS = """
:root { --ink: #1f2a33; --muted: #5b6770; --rule: #cfd6dc; --band: #f4f6f8; --warn: #8a4b00; --warnbg: #fff5e0; }
* { box-sizing: border-box; }
html { font-size: 10.5pt; }
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; color: var(--ink); background: #fff;
       margin: 0 auto; max-width: 60rem; padding: 1.5rem 2rem 3rem; line-height: 1.42; }
header { border-bottom: 2px solid var(--ink); padding-bottom: 0.6rem; margin-bottom: 1rem; }
header .kicker { font-size: 0.8rem; letter-spacing: 0.08em; text-transform: uppercase; color: var(--muted); }
h1 { font-size: 1.55rem; margin: 0.2rem 0 0.3rem; font-weight: 600; }
h2 { font-size: 1.15rem; margin: 1.8rem 0 0.5rem; padding-bottom: 0.2rem; border-bottom: 1px solid var(--rule);
     font-weight: 600; break-after: avoid; }
h3 { font-size: 0.98rem; margin: 1.1rem 0 0.35rem; font-weight: 600; color: var(--muted); break-after: avoid; }
p { margin: 0.35rem 0 0.6rem; }
.meta { color: var(--muted); font-size: 0.86rem; }
.verdict { display: inline-block; margin-top: 0.4rem; padding: 0.15rem 0.6rem; border-radius: 3px; font-weight: 600;
           font-size: 0.92rem; }
.verdict.met { background: #e6f2ea; color: #1d5a33; }
.verdict.missed { background: #fbe9e7; color: #8c2417; }
.caution { border: 1px solid #e3b766; border-left: 5px solid var(--warn); background: var(--warnbg);
           padding: 0.55rem 0.8rem; margin: 0.8rem 0; break-inside: avoid; }
.caution strong { color: var(--warn); }
table { border-collapse: collapse; margin: 0.3rem 0 0.4rem; font-size: 0.86rem; break-inside: auto; }
caption { text-align: left; font-weight: 600; padding: 0.2rem 0; color: var(--ink); }
th, td { padding: 0.2rem 0.55rem; border-bottom: 1px solid var(--rule); vertical-align: top; }
th { text-align: left; font-weight: 600; background: var(--band); border-bottom: 1px solid var(--muted); }
thead tr.groups th { background: #fff; color: var(--muted); font-weight: 500; text-align: center;
                     border-bottom: 1px solid var(--rule); }
th, td:first-child { white-space: nowrap; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr { break-inside: avoid; }
table.kv td { text-align: left; }
table.corners td { white-space: nowrap; }
table.kv td:first-child { color: var(--muted); width: 14rem; }
.pair { display: grid; grid-template-columns: 1fr 1fr; gap: 0 1.5rem; }
.note { color: var(--muted); font-size: 0.82rem; margin-top: 0.1rem; max-width: 52rem; }
figure { margin: 0.6rem 0 1rem; break-inside: avoid; }
figure svg { max-width: 100%; height: auto; }
figcaption { color: var(--muted); font-size: 0.82rem; margin-top: 0.2rem; }
.drawing svg { width: 40rem; max-width: 100%; height: auto; }
td.sev-error { color: #8c2417; font-weight: 600; }
td.sev-warning { color: var(--warn); font-weight: 600; }
td.code { color: var(--muted); font-size: 0.78rem; white-space: nowrap; }
ul.limits li { margin: 0.2rem 0; }
footer { margin-top: 2rem; border-top: 2px solid var(--ink); padding-top: 0.4rem; }
@page { size: A4; margin: 14mm 13mm 15mm; }
@media print {
  html { font-size: 9.5pt; }
  body { max-width: none; padding: 0; }
  section { break-before: auto; }
  h2 { margin-top: 1.2rem; }
}
"""

_NUMERIC = re.compile(r"^[−+\-]?[\d.]+(e[+\-]?\d+)?\s*[a-zA-Zµ%Ω°/]{0,6}$|^—$")


def _cell(text: str, cls: str = "") -> str:
    text = str(text)
    classes = [c for c in (cls, "n" if _NUMERIC.match(text) else "") if c]
    attr = f' class="{" ".join(classes)}"' if classes else ""
    return f"<td{attr}>{escape(text)}</td>"


def table_html(table: Table, css_class: str = "", cell_class=None) -> str:
    """A :class:`~loopkit.report.content.Table` as an HTML table (escaped text).

    ``cell_class(row, column) -> str`` may give a CSS class per cell.
    """
    out = [f'<table{f" class={chr(34)}{css_class}{chr(34)}" if css_class else ""}>']
    if table.caption:
        out.append(f"<caption>{escape(table.caption)}</caption>")
    out.append("<thead>")
    if table.groups:
        cells, col = [], 0
        for title, first, last in table.groups:
            if first > col:
                cells.append(f'<th colspan="{first - col}"></th>')
            cells.append(f'<th colspan="{last - first + 1}">{escape(title)}</th>')
            col = last + 1
        if col < len(table.columns):
            cells.append(f'<th colspan="{len(table.columns) - col}"></th>')
        out.append(f'<tr class="groups">{"".join(cells)}</tr>')
    out.append("<tr>" + "".join(f"<th>{escape(str(c))}</th>" for c in table.columns) + "</tr></thead><tbody>")
    for i, row in enumerate(table.rows):
        out.append("<tr>" + "".join(_cell(v, cell_class(i, j) if cell_class else "") for j, v in enumerate(row))
                   + "</tr>")
    out.append("</tbody></table>")
    if table.note:
        out.append(f'<p class="note">{escape(table.note)}</p>')
    return "\n".join(out)


def paragraphs(lines) -> str:
    return "\n".join(f"<p>{escape(str(line))}</p>" for line in lines)


def caution_box(caution: str) -> str:
    head, sep, rest = caution.partition(":")
    body = f"<strong>{escape(head)}:</strong>{escape(rest)}" if sep else escape(caution)
    return f'<div class="caution" role="note">{body}</div>'


def section(anchor: str, title: str, body: str) -> str:
    return f'<section id="{escape(anchor)}">\n<h2>{escape(title)}</h2>\n{body}\n</section>'


def figure(svg: str, caption: str, css_class: str = "") -> str:
    cls = f' class="{css_class}"' if css_class else ""
    return f"<figure{cls}>\n{svg}\n<figcaption>{escape(caption)}</figcaption>\n</figure>"


#: What would make the page load something from elsewhere (a self-contained report has none of it).
_EXTERNAL = re.compile(r"""(\b(?:src|href|xlink:href|srcset|data)\s*=\s*["']?\s*(?!#|data:)[^"'\s>]+)"""
                       r"""|(url\(\s*["']?(?!#|data:))|(@import)""", re.IGNORECASE)


def check_self_contained(text: str) -> list[str]:
    """The references to other files or addresses in ``text`` (empty when it stands alone)."""
    return [m.group(0) for m in _EXTERNAL.finditer(text)]


def document(title: str, body: str) -> str:
    """The whole HTML page."""
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<title>{escape(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n{body}\n</body>\n</html>\n")
