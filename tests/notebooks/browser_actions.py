"""Small Playwright helpers shared by the browser tests: waiting, reading marks, screenshots.

The widgets tag themselves with CSS classes of our own (``ow-*``); the status widget shows
``updates: N``, bumped once after each processed change of the shared state.
"""
from __future__ import annotations

import re

from nbharness import SCREENSHOT_DIR

WAIT_MS = 90_000
MAX_SCREENSHOT_BYTES = 300_000

_UPDATES_JS = """([sel, n]) => {
  const el = document.querySelector(sel);
  const m = el && el.textContent.match(/updates:\\s*(\\d+)/);
  return m ? Number(m[1]) > n : false;
}"""

_PATHS_JS = """(sel) => Array.from(document.querySelectorAll(sel)).map(p => p.getAttribute('d')).join('|')"""

_CHANGED_JS = """([sel, before, same]) => {
  const now = Array.from(document.querySelectorAll(sel)).map(p => p.getAttribute('d')).join('|');
  return same ? now === before : (now !== before && now.length > 0);
}"""


def updates(page, root=".ow-dashboard") -> int:
    """Current value of the status counter inside ``root``."""
    text = page.locator(f"{root} .ow-status").first.inner_text()
    match = re.search(r"updates:\s*(\d+)", text)
    assert match, f"no 'updates: N' in the status widget: {text!r}"
    return int(match.group(1))


def wait_updates_above(page, n, root=".ow-dashboard"):
    """Wait (bounded) until the kernel has processed a change after counter value ``n``."""
    page.wait_for_function(_UPDATES_JS, arg=[f"{root} .ow-status", n], timeout=WAIT_MS)


def path_data(page, selector) -> str:
    """The ``d`` attributes of every SVG path matching ``selector``, joined."""
    return page.evaluate(_PATHS_JS, selector)


def wait_paths_change(page, selector, before):
    """Wait (bounded) until the paths under ``selector`` are redrawn differently."""
    page.wait_for_function(_CHANGED_JS, arg=[selector, before, False], timeout=WAIT_MS)


def wait_paths_equal(page, selector, expected):
    """Wait (bounded) until the paths under ``selector`` are drawn exactly as ``expected``."""
    page.wait_for_function(_CHANGED_JS, arg=[selector, expected, True], timeout=WAIT_MS)


def wait_figures(page, root, minimum):
    """Wait until ``root`` holds at least ``minimum`` bqplot figures with drawn paths."""
    sel = f"{root} .bqplot.figure > svg.svg-figure"
    page.wait_for_function(
        """([sel, n]) => Array.from(document.querySelectorAll(sel))
              .filter(svg => svg.querySelector('path.line, path.area, path.dot')).length >= n""",
        arg=[sel, minimum], timeout=WAIT_MS)
    return page.locator(sel).count()


def error_outputs(page) -> list:
    """Texts of cell outputs a reader would see as errors (stderr streams, tracebacks)."""
    loc = page.locator("#rendered_cells [data-mime-type='application/vnd.jupyter.stderr'], "
                       "#rendered_cells .jp-OutputArea-output.jp-mod-error")
    return [loc.nth(i).inner_text()[:500] for i in range(loc.count())]


def screenshot(locator, name) -> int:
    """Save ``<SCREENSHOT_DIR>/<name>.png`` of one element; return its size in bytes.

    ``SCREENSHOT_DIR`` is docs/img under ``OW_UPDATE_SCREENSHOTS=1``, else a temporary folder.
    """
    SCREENSHOT_DIR.mkdir(parents=True, exist_ok=True)
    path = SCREENSHOT_DIR / f"{name}.png"
    locator.screenshot(path=str(path), animations="disabled")
    size = path.stat().st_size
    assert size < MAX_SCREENSHOT_BYTES, f"{path} is {size} bytes"
    return size


def wait_settled(page, quiet_ms=1500, limit_ms=WAIT_MS, root=".ow-dashboard"):
    """Wait (bounded) until the status counter has not moved for ``quiet_ms``."""
    last, still = updates(page, root), 0
    for _ in range(limit_ms // 250):
        page.wait_for_timeout(250)
        now = updates(page, root)
        still = still + 250 if now == last else 0
        last = now
        if still >= quiet_ms:
            return last
    raise TimeoutError(f"the dashboard kept updating for {limit_ms} ms")


def drag_box(page, root, start, end):
    """Drag a brush over the residual plot in ``root`` between two fractions of its area.

    ``start`` and ``end`` are ``(x, y)`` fractions of the brush overlay (0 = left/top).
    """
    overlay = page.locator(f"{root} .ow-residual-figure rect.overlay").first
    overlay.scroll_into_view_if_needed()
    area = overlay.bounding_box()
    page.mouse.move(area["x"] + area["width"] * start[0], area["y"] + area["height"] * start[1])
    page.mouse.down()
    page.mouse.move(area["x"] + area["width"] * end[0], area["y"] + area["height"] * end[1], steps=12)
    page.mouse.up()
    page.mouse.move(0, 0)


def wait_selection(page, root=".ow-dashboard"):
    """Wait (bounded) until the selection table reports brushed rows."""
    page.wait_for_function(
        "(sel) => /[1-9][0-9,]* selected rows/.test(document.querySelector(sel).innerText)",
        arg=f"{root} .ow-selection-table", timeout=WAIT_MS)
