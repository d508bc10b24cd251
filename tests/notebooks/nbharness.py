"""Helpers for the notebook and real-browser tests (imported by their conftest and tests).

Kernels must run this virtual environment's Python: the ``python3`` kernel spec calls
``python`` from ``PATH``, so every kernel is started with this interpreter's directory first
on ``PATH``.  Browser tests drive the system Chromium with Playwright; they skip when no
Chromium is installed, unless ``OW_REQUIRE_BROWSER=1`` (set in CI), where they fail.
"""
from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.request
from contextlib import contextmanager
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
NOTEBOOK_DIR = REPO / "example_notebooks"
# Screenshots go into docs/img (the user guide's pictures) only when asked for with
# OW_UPDATE_SCREENSHOTS=1 (`make screenshots`), so an ordinary test run leaves the tree clean.
SCREENSHOT_DIR = (REPO / "docs" / "img" if os.environ.get("OW_UPDATE_SCREENSHOTS") == "1"
                  else Path(tempfile.gettempdir()) / "ordwidgets-screenshots")
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync"]
SERVER_START_SECONDS = 60
RENDER_MS = 180_000


def kernel_env() -> dict:
    """Environment whose ``python`` is this interpreter, so ``python3`` kernels use the venv."""
    env = dict(os.environ)
    env["PATH"] = os.pathsep.join([str(Path(sys.executable).parent), env.get("PATH", "")])
    env.setdefault("MPLBACKEND", "Agg")
    return env


# ---- browser -------------------------------------------------------------------------------
def browser_required() -> bool:
    return os.environ.get("OW_REQUIRE_BROWSER", "") == "1"


def unavailable(reason):
    """Skip on a user's machine; fail where the browser tests are required (CI)."""
    if browser_required():
        pytest.fail(f"browser tests are required (OW_REQUIRE_BROWSER=1) but cannot run: {reason}")
    pytest.skip(f"browser tests skipped: {reason} (install Debian's chromium to run them)")


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait_http(url, proc, seconds, log_path):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            tail = Path(log_path).read_text(errors="replace")[-2000:]
            raise RuntimeError(f"voila exited early with code {proc.returncode}:\n{tail}")
        try:
            with urllib.request.urlopen(url, timeout=2):
                return
        except (urllib.error.URLError, ConnectionError, OSError):
            time.sleep(0.25)
    raise TimeoutError(f"voila did not answer at {url} within {seconds} s")


def _stop(proc):
    """Terminate the server and its kernels (own process group), then make sure it is gone."""
    if proc.poll() is None:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=5)


@contextmanager
def serving(cmd, cwd, port, log_path):
    """Run a server command in its own process group; yield its base URL once it answers.

    The server (and every kernel it started) is always stopped on exit.
    """
    with open(log_path, "wb") as log:
        proc = subprocess.Popen(cmd, cwd=cwd, env=kernel_env(), stdout=log, stderr=subprocess.STDOUT,
                                start_new_session=True)
    try:
        base = f"http://127.0.0.1:{port}"
        _wait_http(base + "/", proc, SERVER_START_SECONDS, log_path)
        yield base
    finally:
        _stop(proc)


@contextmanager
def voila_server(target, log_path):
    """Serve ``target`` (a notebook or a folder) with Voila on a free localhost port.

    Yields the base URL.  Flags as in the project's notes: no browser, fixed port,
    ``port_retries=0`` so Voila never moves to another port silently.
    """
    target = Path(target).resolve()
    port = free_port()
    cmd = [sys.executable, "-m", "voila", str(target), "--no-browser", f"--port={port}",
           "--Voila.ip=127.0.0.1", "--Voila.port_retries=0", "--VoilaExecutor.timeout=240",
           "--VoilaConfiguration.show_tracebacks=True"]
    with serving(cmd, target.parent if target.is_file() else target, port, log_path) as base:
        yield base


class PageWatch:
    """A page plus the errors it reported (uncaught exceptions and console errors)."""

    def __init__(self, page):
        self.page = page
        self.page_errors = []
        self.console_errors = []
        page.on("pageerror", lambda exc: self.page_errors.append(str(exc)))
        page.on("console", self._console)

    def _console(self, msg):
        url = (msg.location or {}).get("url", "")
        blocked = "Failed to load resource" in msg.text and not is_local(url)
        if msg.type == "error" and not blocked:  # requests we abort on purpose are not errors
            self.console_errors.append(f"{msg.text} ({url})")


def is_local(url) -> bool:
    """True for URLs of this machine (and data: URLs), which the tests let through."""
    host = url.split("/")[2] if "//" in url else ""
    return host.split(":")[0] in {"127.0.0.1", "localhost"} or url.startswith("data:")


def local_only(route):
    """Playwright route handler: abort every request that would leave this machine."""
    if is_local(route.request.url):
        route.continue_()
    else:
        route.abort()




# ---- nbclient ------------------------------------------------------------------------------
def execute(path, cwd, timeout=300):
    """Run a notebook top to bottom in a fresh ``python3`` kernel started in ``cwd``."""
    import nbformat
    from nbclient import NotebookClient

    nb = nbformat.read(path, as_version=4)
    NotebookClient(nb, timeout=timeout, kernel_name="python3",
                   resources={"metadata": {"path": str(cwd)}}).execute()
    return nb


def stderr_outputs(nb):
    """``(cell index, text)`` of every stderr stream or error output of an executed notebook."""
    return [(i, out.get("text", out.get("evalue", ""))) for i, cell in enumerate(nb.cells)
            if cell.cell_type == "code" for out in cell.get("outputs", [])
            if out.get("name") == "stderr" or out.get("output_type") == "error"]


def rendered_page(browser, url, *, height=1000, scale=1.0):
    """Open ``url`` in a fresh context (local requests only); wait until Voila has rendered.

    ``scale`` is the device pixel ratio (below 1 for small overview screenshots).  Returns the
    context (close it when done) and a :class:`PageWatch` of its page.
    """
    ctx = browser.new_context(viewport={"width": 1280, "height": height}, device_scale_factor=scale)
    ctx.route("**/*", local_only)
    page = ctx.new_page()
    page.set_default_timeout(60_000)
    watch = PageWatch(page)
    page.goto(url, wait_until="domcontentloaded", timeout=RENDER_MS)
    page.wait_for_selector("#rendered_cells", state="visible", timeout=RENDER_MS)
    return ctx, watch
