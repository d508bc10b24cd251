"""``make demo`` serves the tour as a dashboard on localhost and prints its URL.

Reference: the README's set-up commands and the Makefile's ``demo`` target.  The install
stamp is treated as up to date (``-o``), and a dry run first proves that nothing but the
server would run (the test never reinstalls the package).
"""
import shutil
import subprocess
import sys

import pytest

from browser_actions import wait_figures
from nbharness import REPO, free_port, rendered_page, serving

pytestmark = pytest.mark.browser


def make_demo_command(port):
    return ["make", "--no-print-directory", "-o", ".venv/.installed-stamp", "demo",
            f"PORT={port}", f"PY={sys.executable}"]


def test_make_demo_plans_only_the_server():
    if shutil.which("make") is None:
        pytest.skip("make is not installed")
    port = free_port()
    cmd = make_demo_command(port)
    planned = subprocess.run(cmd[:1] + ["-n"] + cmd[1:], cwd=REPO, check=True, capture_output=True,
                             text=True, timeout=60).stdout
    assert "pip" not in planned and "voila" in planned
    assert f"http://127.0.0.1:{port}/" in planned and "--Voila.port_retries=0" in planned
    assert "example_notebooks/tour.ipynb" in planned


def test_make_demo_serves_the_tour_dashboard(chromium, tmp_path):
    if shutil.which("make") is None:
        pytest.skip("make is not installed")
    port = free_port()
    log = tmp_path / "make-demo.log"
    with serving(make_demo_command(port), REPO, port, log) as base:
        assert f"{base}/" in log.read_text()  # the URL was printed
        ctx, watch = rendered_page(chromium, f"{base}/", height=2400)
        try:
            assert wait_figures(watch.page, ".ow-dashboard", 4) >= 4
            assert watch.page_errors == []
        finally:
            ctx.close()
