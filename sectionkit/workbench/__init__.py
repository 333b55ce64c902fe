"""The interactive workbench: a state model (no widgets) and an ipywidgets view.

``WorkbenchState`` holds a study, its configuration and results, and one
method per control; ``open_workbench`` shows it as widgets in a notebook.
Importing this package does not import ipywidgets or matplotlib.
"""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import TYPE_CHECKING

from sectionkit.workbench.model import (
    BoxBudget,
    Change,
    ClassTransports,
    VelocitySection,
    WorkbenchState,
)

if TYPE_CHECKING:  # pragma: no cover
    from sectionkit.workbench.view import WorkbenchView

#: Folder (under the current one) that the bundled demo is copied into before it is opened.
DEMO_FOLDER = "sectionkit-demo"

__all__ = [
    "DEMO_FOLDER",
    "BoxBudget",
    "Change",
    "ClassTransports",
    "VelocitySection",
    "WorkbenchState",
    "copy_demo",
    "open_workbench",
]


def copy_demo(folder: str | Path | None = None) -> Path:
    """Copy the bundled demo box into a user folder; its configuration there.

    The workbench autosaves, saves and exports beside the configuration it
    opened, so the demo is never opened where it is installed. Files already
    in the folder (an earlier copy, perhaps edited) are kept as they are.

    Parameters
    ----------
    folder : str or Path, optional
        Destination; ``sectionkit-demo`` in the current folder when None.

    Returns
    -------
    Path
        ``demo.toml`` in the copy.
    """
    from sectionkit.demo import bundled_demo_config

    source = bundled_demo_config().parent
    target = Path(folder) if folder is not None else Path.cwd() / DEMO_FOLDER
    target.mkdir(parents=True, exist_ok=True)
    for path in sorted(source.iterdir()):
        if path.is_file() and ".autosave" not in path.name and not (target / path.name).exists():
            shutil.copy2(path, target / path.name)
    return target / "demo.toml"


def open_workbench(
    config_path: str | Path | None = None,
    *,
    resume: bool = True,
    autosave: str | Path | bool | None = True,
) -> WorkbenchView:
    """Open a configuration in the workbench widget.

    Parameters
    ----------
    config_path : str or Path, optional
        A TOML configuration; when None, the bundled demo box, first copied
        into ``sectionkit-demo`` in the current folder (see :func:`copy_demo`).
    resume : bool
        Start from the session's autosave file when one exists (where the
        last session ended, even after a crashed kernel).
    autosave : str, Path, bool or None
        Where to autosave after each change: True (default) for
        ``<config stem>.autosave.toml`` beside the configuration, a path, or
        False to switch it off.

    Returns
    -------
    WorkbenchView
        The widget (an ipywidgets box); its state model is ``.state``.
    """
    from sectionkit.workbench.view import WorkbenchView

    if config_path is None:
        config_path = copy_demo()
    state = WorkbenchState.open(config_path, resume=resume, autosave=autosave)
    return WorkbenchView(state)
