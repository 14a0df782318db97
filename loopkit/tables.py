"""Plain-text tables and wrapped notes for the command line.

Everything here is formatting only: it takes strings, returns strings, and
knows nothing about converters.  Tables fit an 80-column terminal and stay
readable when piped to a file or another program (no colours, no box
drawing, no terminal control codes).
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass

__all__ = ["EMPTY", "WIDTH", "Column", "format_table", "wrap_note"]

#: Width the command line's output is laid out for.
WIDTH = 80

#: What a cell shows when a quantity does not apply to a row.
EMPTY = "-"


@dataclass(frozen=True)
class Column:
    """One table column.

    Attributes
    ----------
    title : str
        Short heading (first header line).
    unit : str
        Unit shown on the second header line (``""`` for none).
    align : str
        ``">"`` right (numbers) or ``"<"`` left (text).
    """

    title: str
    unit: str = ""
    align: str = ">"


def format_table(
    columns: list[Column],
    rows: list[list[str]],
    width: int = WIDTH,
    indent: str = "",
    groups: list[tuple[str, int, int]] = (),
) -> str:
    """Lay out ``rows`` under two header lines (titles, then units).

    Parameters
    ----------
    columns : list of Column
    rows : list of list of str
        One list of cell texts per row, as many as there are columns.
    width : int
        Line width to fit.  Columns are separated by two spaces, or by one
        when two would not fit.
    indent : str
        Prefix of every line.
    groups : list of (title, first, last)
        Optional headings spanning columns ``first`` to ``last`` (inclusive),
        centred on a line above the titles, e.g. ``("before snapping", 7, 9)``.

    Returns
    -------
    str
        The table, lines joined by newlines, no trailing newline.  The unit
        line is left out when no column has a unit.
    """
    for row in rows:
        if len(row) != len(columns):
            raise ValueError(f"row has {len(row)} cells for {len(columns)} columns: {row!r}")
    widths = [max([len(c.title), len(c.unit)] + [len(r[i]) for r in rows]) for i, c in enumerate(columns)]
    gap = "  "
    if len(indent) + sum(widths) + 2 * (len(widths) - 1) > width:
        gap = " "

    def line(cells: list[str]) -> str:
        out = []
        for text, w, col in zip(cells, widths, columns):
            # headings follow their column's alignment so units sit over the numbers
            out.append(text.rjust(w) if col.align == ">" else text.ljust(w))
        return (indent + gap.join(out)).rstrip()

    lines = []
    if groups:
        starts = [len(indent) + sum(widths[:i]) + len(gap) * i for i in range(len(widths))]
        text = ""
        for title, first, last in groups:
            left, right = starts[first], starts[last] + widths[last]
            span = f" {title} ".center(right - left, "-") if len(title) + 4 <= right - left else title
            text = text.ljust(left) + span
        lines.append(text.rstrip())
    lines.append(line([c.title for c in columns]))
    if any(c.unit for c in columns):
        lines.append(line([c.unit for c in columns]))
    lines.extend(line(r) for r in rows)
    return "\n".join(lines)


def wrap_note(text: str, first: str = "", width: int = WIDTH) -> str:
    """Wrap ``text`` to ``width`` columns: ``first`` leads the first line, later lines indent under it."""
    return textwrap.fill(
        text,
        width=width,
        initial_indent=first,
        subsequent_indent=" " * len(first),
        break_on_hyphens=False,
        break_long_words=False,
    )
