"""A JupyterLab server and a headless Chromium for workbench tests and benchmarks.

The recipe of the project's browser-testing notes: JupyterLab on 127.0.0.1
with a temporary root and isolated Jupyter folders, Debian's Chromium driven
by Playwright and kept on loopback, and notebook cells run only once a kernel
is attached and idle.
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path

CHROMIUM = Path("/usr/bin/chromium")
BROWSER_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--host-resolver-rules=MAP * ~NOTFOUND , EXCLUDE localhost , EXCLUDE 127.0.0.1",
]
KERNEL_IDLE = """() => {
  const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;
  const k = w && w.sessionContext && w.sessionContext.session && w.sessionContext.session.kernel;
  return !!k && k.connectionStatus === 'connected' && k.status === 'idle';
}"""
RUN_ALL = """() => Promise.race([
  window.jupyterapp.commands.execute('notebook:run-all-cells'),
  new Promise((resolve) => setTimeout(resolve, 60000)),
])"""


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


def write_notebook(path: Path, source: str) -> None:
    """A one-cell notebook running ``source``."""
    path.write_text(json.dumps({
        "cells": [{"cell_type": "code", "execution_count": None, "id": "c0", "metadata": {},
                   "outputs": [], "source": source}],
        "metadata": {"kernelspec": {"display_name": "Python 3", "language": "python",
                                    "name": "python3"}},
        "nbformat": 4, "nbformat_minor": 5,
    }))


@contextlib.contextmanager
def lab_server(root: Path, scratch: Path) -> Iterator[tuple[str, str]]:
    """A JupyterLab server on ``root``; yields (base url, token); stopped at the end."""
    env = dict(os.environ)
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_DATA_DIR", "data"),
                     ("JUPYTER_RUNTIME_DIR", "runtime"), ("JUPYTERLAB_SETTINGS_DIR", "settings"),
                     ("JUPYTERLAB_WORKSPACES_DIR", "workspaces"), ("IPYTHONDIR", "ipython")):
        env[var] = str(scratch / sub)
        (scratch / sub).mkdir(parents=True, exist_ok=True)
    news = scratch / "settings" / "@jupyterlab" / "apputils-extension"
    news.mkdir(parents=True, exist_ok=True)
    (news / "notification.jupyterlab-settings").write_text(
        '{"fetchNews": "false", "checkForUpdates": false}')
    port, token = _free_port(), secrets.token_hex(16)
    log_path = scratch / "lab.log"
    log = log_path.open("w")
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
                raise RuntimeError("JupyterLab did not start:\n" + log_path.read_text())
            time.sleep(0.25)
        yield base, token
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


def open_workbench_page(browser, base: str, token: str, notebook: str,
                        size: tuple[int, int]):
    """A page showing ``notebook`` run to its first complete workbench drawing."""
    page = browser.new_page(viewport={"width": size[0], "height": size[1]})
    # a workspace of its own: a restored workspace would also open earlier notebooks
    workspace = Path(notebook).stem.replace(".", "-")
    page.goto(f"{base}/lab/workspaces/{workspace}/tree/{notebook}?reset&token={token}")
    page.wait_for_function(KERNEL_IDLE, timeout=90_000, polling=250)  # the one trap
    page.evaluate(RUN_ALL)
    page.locator(".sk-status").wait_for(timeout=90_000)
    page.wait_for_function(
        "() => { const s = document.querySelector('.sk-status');"
        " return s && s.textContent.includes('drawn'); }", timeout=90_000)
    return page
