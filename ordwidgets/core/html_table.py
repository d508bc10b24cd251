"""The one HTML table builder: every view that shows a table in HTML builds it here.

Used by the fit's ``_repr_html_`` (:mod:`ordwidgets.core.summary`), the random-intercept
fit's variance components, the report's tables (:func:`ordwidgets.core.tables.table_html`)
and the panels' tables.  Every header, cell, tooltip, section title and class name is
escaped with :func:`html.escape` here, so a hostile column or level name (``"<b>x</b>&"``)
shows as text in every view; callers pass display strings (or values shown with ``str``)
and never markup.
"""
from __future__ import annotations

import html
from dataclasses import dataclass

__all__ = ["Section", "html_table"]

CELL = "padding:2px 8px;text-align:right"
LABEL = "padding:2px 8px;text-align:left"


@dataclass(frozen=True)
class Section:
    """A row of one cell across the table: the title of the rows below it (bold)."""

    title: str


def _esc(value) -> str:
    return html.escape(str(value), quote=True)


def _cell(tag, value, style, title=None) -> str:
    tip = "" if title is None else f" title='{_esc(title)}'"
    return f"<{tag}{tip} style='{_esc(style)}'>{_esc(value)}</{tag}>"


def html_table(header, rows, *, css="", style="border-collapse:collapse", cell=CELL, labels=0,
               label_style=LABEL, bold_first=False, widths=None, titles=None, above=None) -> str:
    """An HTML ``<table>`` with every string escaped.

    Parameters
    ----------
    header : sequence or None
        Column headings (``None``: no heading row).
    rows : iterable
        Each a sequence of cells (one per column) or a :class:`Section`.
    css : str
        Class of the table (the stable hook of the browser tests).
    style, cell, label_style : str
        Styles of the table, of the value cells and of label cells.
    labels : int
        How many leading columns are labels (left-aligned); a negative number counts from
        the end (``-1``: the last column is a label).
    bold_first : bool
        Show the first cell of each body row in bold.
    widths, titles : sequence, optional
        Per column: width in pixels, tooltip (``None`` for none).
    above : sequence of (str, int), optional
        A heading row above ``header`` of ``(text, columns spanned)`` pairs.
    """
    width = len(header) if header is not None else None

    def style_of(j, n, body):
        label = j < labels if labels >= 0 else j >= n + labels
        out = label_style if label else cell
        if widths is not None and j < len(widths) and widths[j] is not None:
            out = f"width:{int(widths[j])}px;{out}"
        return out + (";font-weight:bold" if body and bold_first and j == 0 else "")

    def row(values, tag, body):
        n = len(values)
        return "<tr>" + "".join(
            _cell(tag, v, style_of(j, n, body), None if titles is None or j >= len(titles) else titles[j])
            for j, v in enumerate(values)) + "</tr>"

    parts = []
    if above:
        parts.append("<tr>" + "".join(
            f"<th colspan='{int(span)}' style='text-align:center;padding:2px 8px;font-weight:normal;"
            f"font-style:italic'>{_esc(text)}</th>" for text, span in above) + "</tr>")
    if header is not None:
        parts.append(row(list(header), "th", False))
    for r in rows:
        if isinstance(r, Section):
            span = width if width is not None else 1
            parts.append(f"<tr><td colspan='{span}' style='font-weight:bold;padding-top:6px'>{_esc(r.title)}</td></tr>")
        else:
            parts.append(row(list(r), "td", True))
    klass = f" class='{_esc(css)}'" if css else ""
    return f"<table{klass} style='{_esc(style)}'>{''.join(parts)}</table>"
