"""`sectionkit lab` and the workbench never write into the installed package."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import sectionkit
import sectionkit.cli as cli
from sectionkit.cli import main
from sectionkit.workbench import copy_demo

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = Path(sectionkit.__file__).resolve().parent


@pytest.fixture()
def launched(monkeypatch):
    """Record run_lab's arguments instead of starting JupyterLab."""
    calls = []
    monkeypatch.setattr(cli, "run_lab", lambda folder, nb, extra: calls.append((folder, nb,
                                                                                 extra)) or 0)
    return calls


def test_lab_copies_the_workbench_notebook_into_the_users_folder(tmp_path, launched):
    assert main(["lab", "--dir", str(tmp_path)]) == 0
    folder, notebook, _ = launched[0]
    assert folder == tmp_path.resolve() and notebook == tmp_path.resolve() / "workbench.ipynb"
    bundled = json.loads((PACKAGE / "notebooks" / "workbench.ipynb").read_text())
    assert json.loads(notebook.read_text())["cells"] == bundled["cells"]


def test_lab_uses_the_current_folder_by_default(tmp_path, launched, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["lab"]) == 0
    assert (tmp_path / "workbench.ipynb").is_file()


def test_lab_with_a_configuration_opens_it_by_its_relative_path(tmp_path, launched):
    (tmp_path / "studies").mkdir()
    config = tmp_path / "studies" / "atlantic.toml"
    config.write_text("")
    assert main(["lab", str(config), "--dir", str(tmp_path)]) == 0
    notebook = tmp_path / "atlantic_workbench.ipynb"
    text = json.loads(notebook.read_text())
    sources = "".join("".join(c["source"]) for c in text["cells"])
    assert 'open_workbench("studies/atlantic.toml")' in sources


def test_lab_keeps_an_existing_notebook_copy(tmp_path, launched):
    (tmp_path / "workbench.ipynb").write_text('{"cells": [], "edited": true}')
    assert main(["lab", "--dir", str(tmp_path)]) == 0
    assert json.loads((tmp_path / "workbench.ipynb").read_text())["edited"] is True


def test_lab_passes_arguments_after_double_dash_to_jupyterlab(tmp_path, launched):
    assert main(["lab", "--dir", str(tmp_path), "--", "--allow-root", "--ip=0.0.0.0"]) == 0
    assert launched[0][2] == ["--allow-root", "--ip=0.0.0.0"]


def test_double_dash_arguments_are_refused_for_other_commands(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["demo", "--out", "x", "--", "--allow-root"])
    assert exc.value.code == 2


class _Lab:
    """A stand-in JupyterLab process whose wait is interrupted by Ctrl-C once."""

    def __init__(self, *args, **kwargs):
        self.args, self.kwargs, self.terminated, self.waits = args, kwargs, False, 0

    def wait(self, timeout=None):
        self.waits += 1
        if self.waits == 1:
            raise KeyboardInterrupt
        return -15

    def terminate(self):
        self.terminated = True

    def kill(self):
        pass

    def poll(self):
        return -15 if self.terminated else None


def test_lab_stops_jupyterlab_when_it_is_stopped(tmp_path, monkeypatch):
    started = []
    monkeypatch.setattr(subprocess, "Popen", lambda *a, **k: started.append(_Lab(*a, **k))
                        or started[-1])
    assert cli.run_lab(tmp_path, tmp_path / "workbench.ipynb", ["--no-browser"]) == 130
    lab = started[0]
    assert lab.terminated
    assert lab.kwargs["cwd"] == tmp_path and "--no-browser" in lab.args[0]


def test_lab_runs_jupyterlab_with_the_extra_arguments(tmp_path):
    # a real JupyterLab: `--version` makes it print its version and end
    done = subprocess.run([sys.executable, "-m", "sectionkit.cli", "lab", "--dir", str(tmp_path),
                           "--", "--version"], capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip()[0].isdigit()
    assert (tmp_path / "workbench.ipynb").is_file()


def test_demo_opened_in_the_workbench_is_a_copy_in_the_users_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    config = copy_demo()
    assert config == tmp_path / "sectionkit-demo" / "demo.toml"
    names = {p.name for p in config.parent.iterdir()}
    assert {"demo.toml", "south_line.nc", "north_line.nc"} <= names
    assert not any(".autosave" in n for n in names)


def test_demo_copy_keeps_the_users_edits(tmp_path):
    config = copy_demo(tmp_path / "d")
    config.write_text(config.read_text() + "\n# my note\n")
    copy_demo(tmp_path / "d")
    assert config.read_text().endswith("# my note\n")


def test_notebooks_are_shipped_in_a_regular_install(tmp_path):
    # build the package as a regular (non-editable) install lays it out
    project = tmp_path / "project"
    project.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy(ROOT / name, project / name)
    shutil.copytree(PACKAGE, project / "sectionkit",
                    ignore=shutil.ignore_patterns("__pycache__", "*.autosave.toml"))
    build = tmp_path / "build"
    subprocess.run([sys.executable, "-c", "import setuptools; setuptools.setup()", "-q",
                    "build_py", "--build-lib", str(build)], cwd=project, check=True,
                   capture_output=True)
    assert (build / "sectionkit" / "notebooks" / "workbench.ipynb").is_file()
    assert (build / "sectionkit" / "notebooks" / "walkthrough.ipynb").is_file()
    # and `sectionkit lab` finds its notebook there
    code = ("import sys, pathlib, sectionkit.cli as c; "
            "print(c.lab_notebook(pathlib.Path(sys.argv[1])))")
    done = subprocess.run([sys.executable, "-c", code, str(tmp_path)], capture_output=True,
                          text=True, env={**os.environ, "PYTHONPATH": str(build)}, check=True)
    assert Path(done.stdout.strip()) == tmp_path / "workbench.ipynb"
