"""The workbench in a real browser: JupyterLab, headless Chromium, a moved slider.

A JupyterLab server is started on 127.0.0.1 with a temporary root holding a
copy of ``sectionkit/notebooks/workbench.ipynb`` and of the demo box (so autosaves land
in the copy), Chromium (Debian's, driven by Playwright) runs the notebook once
the kernel is really idle, moves the reference-level slider with the
keyboard, and the class transport table must change. A screenshot of the
workbench is kept in ``test-artifacts/``. The server is stopped at the end.
"""

from __future__ import annotations

import json
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = Path("/usr/bin/chromium")
ARTIFACTS = ROOT / "test-artifacts"
ARROW_PRESSES = 5
SLIDER_STEP = 10.0  # dbar, sectionkit.workbench.view.SLIDER_STEP

KERNEL_IDLE = """() => {
  const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;
  const k = w && w.sessionContext && w.sessionContext.session && w.sessionContext.session.kernel;
  return !!k && k.connectionStatus === 'connected' && k.status === 'idle';
}"""
RUN_ALL = """() => Promise.race([
  window.jupyterapp.commands.execute('notebook:run-all-cells'),
  new Promise((resolve) => setTimeout(resolve, 60000)),
])"""

pytestmark = [pytest.mark.browser, pytest.mark.timeout(240)]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _get(url: str) -> int:
    try:
        with urllib.request.urlopen(url, timeout=2) as response:
            return response.status
    except OSError:
        return 0


@pytest.fixture()
def lab(tmp_path: Path):
    """A JupyterLab server on a temporary root; yields (base url, token)."""
    root = tmp_path / "root"
    shutil.copytree(ROOT / "demo_sections", root / "demo_sections",
                    ignore=shutil.ignore_patterns("*.autosave.toml"))
    notebook = json.loads((ROOT / "sectionkit" / "notebooks" / "workbench.ipynb").read_text())
    opened = 0
    for cell in notebook["cells"]:
        source = "".join(cell["source"])
        if cell["cell_type"] == "code" and "open_workbench()" in source:
            cell["source"] = source.replace("open_workbench()",
                                            'open_workbench("demo_sections/demo.toml")')
            opened += 1
    assert opened == 1, "workbench.ipynb no longer calls open_workbench()"
    (root / "workbench.ipynb").write_text(json.dumps(notebook))

    env = dict(os.environ)
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_DATA_DIR", "data"),
                     ("JUPYTER_RUNTIME_DIR", "runtime"), ("JUPYTERLAB_SETTINGS_DIR", "settings"),
                     ("JUPYTERLAB_WORKSPACES_DIR", "workspaces"), ("IPYTHONDIR", "ipython")):
        env[var] = str(tmp_path / sub)
        (tmp_path / sub).mkdir()
    news = tmp_path / "settings" / "@jupyterlab" / "apputils-extension"
    news.mkdir(parents=True)
    (news / "notification.jupyterlab-settings").write_text(
        '{"fetchNews": "false", "checkForUpdates": false}')

    port, token = _free_port(), secrets.token_hex(16)
    log = (tmp_path / "lab.log").open("w")
    server = subprocess.Popen(
        [sys.executable, "-m", "jupyterlab", "--no-browser", "--ServerApp.ip=127.0.0.1",
         f"--ServerApp.port={port}", "--ServerApp.port_retries=0",
         f"--ServerApp.root_dir={root}", f"--IdentityProvider.token={token}",
         "--LabApp.news_url=None",
         "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
         "--LabApp.expose_app_in_browser=True", "--ServerApp.allow_root=True"],
        cwd=root, env=env, stdin=subprocess.DEVNULL, stdout=log, stderr=subprocess.STDOUT,
        start_new_session=True,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while _get(f"{base}/api/status?token={token}") != 200:
            if server.poll() is not None or time.monotonic() > deadline:
                pytest.fail("JupyterLab did not start:\n" + (tmp_path / "lab.log").read_text())
            time.sleep(0.25)
        yield base, token, root
    finally:
        request = urllib.request.Request(f"{base}/api/shutdown", method="POST",
                                         headers={"Authorization": f"token {token}"})
        try:
            urllib.request.urlopen(request, timeout=5).close()
            server.wait(timeout=10)
        except (OSError, subprocess.TimeoutExpired):
            pass
        if server.poll() is None:
            os.killpg(server.pid, signal.SIGTERM)
            try:
                server.wait(timeout=5)
            except subprocess.TimeoutExpired:
                os.killpg(server.pid, signal.SIGKILL)
        log.close()


def test_moving_the_reference_slider_changes_the_class_table(lab):
    if not CHROMIUM.exists():
        pytest.skip(f"{CHROMIUM} is missing: install Debian's chromium to run browser tests")
    from playwright.sync_api import sync_playwright

    base, token, root = lab
    ARTIFACTS.mkdir(exist_ok=True)
    with sync_playwright() as p:
        browser = p.chromium.launch(
            executable_path=str(CHROMIUM), headless=True,
            args=["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync",
                  "--host-resolver-rules=MAP * ~NOTFOUND , EXCLUDE localhost , EXCLUDE 127.0.0.1"],
        )
        try:
            page = browser.new_page(viewport={"width": 1700, "height": 2300})
            page.goto(f"{base}/lab/tree/workbench.ipynb?token={token}")
            # the trap: run cells only once a kernel is attached and idle
            page.wait_for_function(KERNEL_IDLE, timeout=60_000, polling=250)
            page.evaluate(RUN_ALL)
            status = page.locator(".sk-status")
            status.wait_for(timeout=60_000)
            page.wait_for_function(
                "() => { const s = document.querySelector('.sk-status');"
                " return s && s.textContent.includes('drawn'); }", timeout=60_000)
            table = page.locator(".sk-class-table")
            before = table.inner_text()
            assert "upper" in before

            handle = page.locator(".sk-reference-slider .noUi-handle")
            handle.scroll_into_view_if_needed()
            handle.focus()
            for _ in range(ARROW_PRESSES):
                handle.press("ArrowRight")
            target = 3000.0 + ARROW_PRESSES * SLIDER_STEP
            page.wait_for_function(
                "(before) => document.querySelector('.sk-class-table').innerText !== before",
                arg=before, timeout=30_000)
            page.wait_for_function(
                "(want) => { const s = document.querySelector('.sk-status').textContent;"
                " return s.includes(want) && s.includes('drawn'); }",
                arg=f"{target:g} dbar", timeout=30_000)
            after = table.inner_text()
            assert after != before
            workbench = page.locator(".sk-workbench")
            workbench.scroll_into_view_if_needed()
            workbench.screenshot(path=str(ARTIFACTS / "workbench.png"))
        finally:
            browser.close()
    # the change was autosaved beside the (copied) demo configuration
    autosave = root / "demo_sections" / "demo.autosave.toml"
    deadline = time.monotonic() + 10
    while f"pressure = {target}" not in (autosave.read_text() if autosave.exists() else ""):
        assert time.monotonic() < deadline, "the slider change was not autosaved"
        time.sleep(0.2)
