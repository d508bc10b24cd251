"""Tables for papers and memos: the number formats of the HTML view, as Markdown, LaTeX or HTML.

Every cell goes through :func:`format_number` (``summary.fmt_value``, the rule of the fit's HTML view: four
decimals, or four significant digits for very large or very small magnitudes; ``yes``/``no``
for booleans; thousands separators for integers).  Labels are escaped for the target format:
HTML entities for HTML and Markdown (Markdown renderers pass raw HTML through), LaTeX
specials for LaTeX.
"""
from __future__ import annotations

import html

import pandas as pd

from .html_table import html_table
from .summary import fmt_value as format_number

__all__ = ["format_number", "format_frame", "table_markdown", "table_latex", "table_html"]


def format_frame(frame) -> pd.DataFrame:
    """``frame`` with every cell, the index and the column labels as display strings."""
    out = frame.map(format_number) if hasattr(frame, "map") else frame.applymap(format_number)
    out.index = [format_number(v) for v in frame.index]
    out.columns = [" ".join(map(str, c)) if isinstance(c, tuple) else str(c) for c in frame.columns]
    return out


def _escape_frame(frame, escape):
    out = frame.map(escape)
    out.index = [escape(v) for v in frame.index]
    out.columns = [escape(c) for c in frame.columns]
    return out


def _markdown_escape(text) -> str:
    return html.escape(str(text), quote=True).replace("|", "&#124;")


def table_markdown(frame, *, index_label="") -> str:
    """Markdown (pipe table, through pandas and ``tabulate``); labels HTML-escaped."""
    out = _escape_frame(format_frame(frame), _markdown_escape)
    out.index.name = _markdown_escape(index_label)
    return out.to_markdown(stralign="right", disable_numparse=True)


_LATEX = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_", "{": r"\{",
          "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}", "<": r"\textless{}",
          ">": r"\textgreater{}"}


def _latex_escape(text) -> str:
    return "".join(_LATEX.get(ch, ch) for ch in str(text))


def table_latex(frame, *, caption=None) -> str:
    """A LaTeX ``tabular`` (through pandas' Styler); labels LaTeX-escaped."""
    out = _escape_frame(format_frame(frame), _latex_escape)
    styler = out.style
    return styler.to_latex(column_format="l" + "r" * out.shape[1], hrules=True,
                           caption=None if caption is None else _latex_escape(caption))


def table_html(frame, *, css="ow-table") -> str:
    """An HTML ``<table>`` (the one builder, :func:`~ordwidgets.core.html_table.html_table`);
    every label and cell escaped."""
    out = format_frame(frame)
    rows = [[label, *cells] for label, cells in zip(out.index, out.to_numpy().tolist())]
    return html_table([frame.index.name or "", *out.columns], rows, css=css, labels=1)
