"""The bundled notebooks run headless from top to bottom without an error.

``workbench.ipynb`` opens the demo box in the workbench widget;
``walkthrough.ipynb`` goes through the Python API step by step. Both run in a
fresh kernel with nbclient, from the notebooks' own folder, as a user would
run them. The demo's autosave file is left as it was found.
"""

from __future__ import annotations

from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOKS = Path(__file__).resolve().parents[1] / "notebooks"


def _run(name: str) -> nbformat.NotebookNode:
    nb = nbformat.read(NOTEBOOKS / name, as_version=4)
    client = NotebookClient(nb, timeout=300, kernel_name="python3",
                            resources={"metadata": {"path": str(NOTEBOOKS)}})
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


def test_workbench_notebook_shows_the_workbench():
    nb = _run("workbench.ipynb")
    assert _errors(nb) == []
    views = [o for cell in nb.cells if cell.cell_type == "code" for o in cell.outputs
             if "application/vnd.jupyter.widget-view+json" in o.get("data", {})]
    assert views, "the workbench widget was not displayed"


def test_walkthrough_notebook_runs_every_step():
    nb = _run("walkthrough.ipynb")
    assert _errors(nb) == []
    text = "".join(o.get("text", "") for cell in nb.cells if cell.cell_type == "code"
                   for o in cell.outputs)
    assert "refused:" in text  # the equator rule was demonstrated
    assert "reference-dependence" in text  # and the cautions shown
