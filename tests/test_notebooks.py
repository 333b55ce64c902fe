"""The bundled notebooks run headless from top to bottom without an error.

``workbench.ipynb`` opens the demo box in the workbench widget;
``walkthrough.ipynb`` goes through the Python API step by step. They are
package data (``sectionkit/notebooks``); each runs in a fresh kernel with
nbclient from a copy in a user's folder, as ``sectionkit lab`` opens it. Nothing
is written into the installed package: the demo is copied beside the notebook.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

import sectionkit

NOTEBOOKS = Path(sectionkit.__file__).resolve().parent / "notebooks"


def _run(name: str, folder: Path) -> nbformat.NotebookNode:
    shutil.copy(NOTEBOOKS / name, folder / name)
    nb = nbformat.read(folder / name, as_version=4)
    client = NotebookClient(nb, timeout=300, kernel_name="python3",
                            resources={"metadata": {"path": str(folder)}})
    client.execute()
    return nb


def _errors(nb: nbformat.NotebookNode) -> list[str]:
    return [f"{o.ename}: {o.evalue}" for cell in nb.cells if cell.cell_type == "code"
            for o in cell.outputs if o.output_type == "error"]


@pytest.fixture(autouse=True)
def keep_demo_autosave():
    """Running the notebooks must not leave (or remove) an autosave beside the demo."""
    from sectionkit.cli import demo_config_path

    demo = demo_config_path()
    autosave = demo.with_name(demo.stem + ".autosave.toml")
    before = autosave.read_bytes() if autosave.exists() else None
    yield
    after = autosave.read_bytes() if autosave.exists() else None
    assert after == before


def test_workbench_notebook_shows_the_workbench(tmp_path):
    nb = _run("workbench.ipynb", tmp_path)
    assert _errors(nb) == []
    # the demo it opened is a copy in the user's folder, where its autosave goes
    assert (tmp_path / "sectionkit-demo" / "demo.toml").is_file()
    views = [o for cell in nb.cells if cell.cell_type == "code" for o in cell.outputs
             if "application/vnd.jupyter.widget-view+json" in o.get("data", {})]
    assert views, "the workbench widget was not displayed"


def test_walkthrough_notebook_runs_every_step(tmp_path):
    nb = _run("walkthrough.ipynb", tmp_path)
    assert _errors(nb) == []
    text = "".join(o.get("text", "") for cell in nb.cells if cell.cell_type == "code"
                   for o in cell.outputs)
    assert "refused:" in text  # the equator rule was demonstrated
    assert "reference-dependence" in text  # and the cautions shown
