"""``write_report``: one self-contained HTML file (and optionally Markdown) a stakeholder can keep.

The report holds the model in words and as a formula, the data (rows, weighted units, level
counts, dropped rows and why), the estimates (latent scale; odds scale for the logit link)
with intervals, tests by term and level contrasts, the checks each with a plain verdict,
the what-if comparisons with intervals, and the cautions.  Figures are embedded as
``data:`` URIs (SVG in the HTML, PNG in the Markdown): the file opens with no network.

Every data-derived string is escaped.  Given the same state and residual seed, two reports
are byte-identical apart from the one line that says when they were written.
"""
from __future__ import annotations

import base64
import datetime as _dt
import html
from pathlib import Path

from ._report_content import Para, Picture, Section, Table, Verdict, report_sections
from .core import FitResult
from .figures import png_bytes, svg_text  # also installs FitState.figure's drawer
from .state import FitState
from .widgets.dashboard import Dashboard
from .core.tables import table_html, table_markdown

__all__ = ["write_report", "report_html", "report_markdown", "SECTION_KEYS", "TIMESTAMP_PREFIX"]

#: ``id`` of each section in the HTML, in order.
SECTION_KEYS = ("model", "data", "estimates", "checks", "whatif", "cautions")
#: The only line that differs between two reports of the same state starts with this.
TIMESTAMP_PREFIX = "Written "

_STYLE = """
body{font-family:system-ui,-apple-system,Segoe UI,Roboto,sans-serif;max-width:62em;margin:2em auto;
padding:0 1em;color:#222;line-height:1.45}
h1{font-size:1.5em}h2{font-size:1.2em;border-bottom:1px solid #ccc;padding-bottom:2px;margin-top:1.8em}
table.ow-table{border-collapse:collapse;font-size:90%;margin:.4em 0 1em}
table.ow-table th,table.ow-table td{padding:2px 8px;text-align:right;border-bottom:1px solid #eee}
table.ow-table thead th{border-bottom:1px solid #999}table.ow-table tbody th{text-align:left}
caption,.ow-caption{font-size:90%;color:#444;text-align:left;margin-top:.6em}
.ow-note{color:#8a5a00;font-size:92%}code{background:#f4f4f4;padding:2px 5px}
.ow-verdict{margin:.3em 0}.ow-grade{display:inline-block;min-width:3.2em;text-align:center;color:#fff;
border-radius:3px;padding:0 5px;margin-right:.6em;font-weight:bold;font-size:90%}
.ow-pass{background:#1b7f3b}.ow-look{background:#b35c00}.ow-fail{background:#b3261e}
figure{margin:1em 0}figure img{max-width:100%}figcaption{font-size:90%;color:#444}
.ow-stamp{color:#777;font-size:85%}
"""


def _e(text) -> str:
    return html.escape(str(text), quote=True)


# ---- HTML ---------------------------------------------------------------------------------------------
def _html_block(block) -> str:
    if isinstance(block, Para):
        if block.kind == "code":
            return f"<p><code>{_e(block.text)}</code></p>"
        return f"<p class='ow-note'>{_e(block.text)}</p>" if block.kind == "note" else f"<p>{_e(block.text)}</p>"
    if isinstance(block, Table):
        return f"<div class='ow-caption'>{_e(block.caption)}</div>{table_html(block.frame)}"
    if isinstance(block, Verdict):
        return (f"<div class='ow-verdict'><span class='ow-grade ow-{_e(block.grade)}'>{_e(block.grade)}</span>"
                f"<b>{_e(block.check)}</b>: {_e(block.text)}</div>")
    if isinstance(block, Picture):
        data = base64.b64encode(svg_text(block.figure).encode("utf-8")).decode("ascii")
        return (f"<figure><img alt='{_e(block.caption)}' src='data:image/svg+xml;base64,{data}'>"
                f"<figcaption>{_e(block.caption)}</figcaption></figure>")
    raise TypeError(f"unknown report block {type(block).__name__}")


def _html_section(section: Section) -> str:
    body = "\n".join(_html_block(b) for b in section.blocks)
    return f"<section id='{_e(section.key)}'>\n<h2>{_e(section.title)}</h2>\n{body}\n</section>"


def report_html(sections, *, title, stamp) -> str:
    """The whole HTML document (one ``<style>``, no script, no external resource)."""
    body = "\n".join(_html_section(s) for s in sections)
    return ("<!DOCTYPE html>\n<html lang='en'>\n<head>\n<meta charset='utf-8'>\n"
            f"<title>{_e(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
            f"<h1>{_e(title)}</h1>\n<p class='ow-stamp'>{_e(stamp)}</p>\n{body}\n</body>\n</html>\n")


# ---- Markdown -----------------------------------------------------------------------------------------
def _md_block(block) -> str:
    if isinstance(block, Para):
        text = html.escape(block.text, quote=False)
        return f"`{block.text.replace('`', chr(39))}`" if block.kind == "code" else (
            f"*{text}*" if block.kind == "note" else text)
    if isinstance(block, Table):
        return f"{html.escape(block.caption, quote=False)}\n\n{table_markdown(block.frame, index_label=block.index_label)}"
    if isinstance(block, Verdict):
        return f"- **{block.grade.upper()}** {html.escape(block.check, quote=False)}: {html.escape(block.text, quote=False)}"
    if isinstance(block, Picture):
        data = base64.b64encode(png_bytes(block.figure)).decode("ascii")
        caption = html.escape(block.caption, quote=True).replace("]", "&#93;")
        return f"![{caption}](data:image/png;base64,{data})\n\n{caption}"
    raise TypeError(f"unknown report block {type(block).__name__}")


def report_markdown(sections, *, title, stamp) -> str:
    """The report as Markdown (figures as PNG data URIs)."""
    parts = [f"# {html.escape(title, quote=False)}", stamp]
    for s in sections:
        parts.append(f"## {html.escape(s.title, quote=False)}")
        parts += [_md_block(b) for b in s.blocks]
    return "\n\n".join(parts) + "\n"


# ---- entry point --------------------------------------------------------------------------------------
def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("ordwidgets")
    except PackageNotFoundError:
        return "(not installed)"


def _state_of(res_or_state, seed):
    if isinstance(res_or_state, FitResult):
        state = FitState.from_fit(res_or_state)
    elif isinstance(res_or_state, FitState):
        state = res_or_state
        if seed is not None and seed != state.residual_seed:
            raise ValueError(f"the state draws residuals with seed {state.residual_seed}; set "
                             f"state.residual_seed = {seed} first (the report shows what the state shows)")
    else:
        raise TypeError(f"write_report needs a FitResult or a FitState, got {type(res_or_state).__name__}")
    if seed is not None:
        state.residual_seed = seed
    return state


def write_report(res_or_state, path, *, markdown=None, title=None, whatifs=(), level=0.95, seed=None,
                 written=None) -> Path:
    """Write the model-check report as one self-contained HTML file.

    Parameters
    ----------
    res_or_state : FitResult or FitState
        A fit (wrapped in a fresh state: default scenario and baseline) or the dashboard's
        state (its scenario and baseline, edits and residual seed).
    path : str or path-like
        Where the HTML goes.
    markdown : str or path-like, optional
        Also write the same report as Markdown there.
    title : str, optional
        Default ``"Ordinal model report: <formula>"``.
    whatifs : sequence of dict, optional
        More comparisons, each ``{"name": ..., "scenario": {...}, "baseline": {...}}``
        (predictor values; missing ones take the defaults), shown after the state's own.
    level : float
        Coverage of every interval.
    seed : int, optional
        Seed of the surrogate residual draws (default: the state's).
    written : datetime, optional
        The time on the one timestamp line (default: now, UTC).

    Returns
    -------
    pathlib.Path
        The HTML file.
    """
    state = _state_of(res_or_state, seed)
    sections = report_sections(state, whatifs=whatifs, level=level)
    title = title or f"Ordinal model report: {state.model_formula}"
    when = written or _dt.datetime.now(_dt.timezone.utc)
    stamp = f"{TIMESTAMP_PREFIX}{when:%Y-%m-%d %H:%M:%S %Z}".rstrip() + f" with ordwidgets {_version()}"
    path = Path(path)
    path.write_text(report_html(sections, title=title, stamp=stamp), encoding="utf-8")
    if markdown is not None:
        Path(markdown).write_text(report_markdown(sections, title=title, stamp=stamp), encoding="utf-8")
    return path


Dashboard.report_writer = staticmethod(write_report)
