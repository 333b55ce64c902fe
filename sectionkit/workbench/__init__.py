"""The interactive workbench: a state model (no widgets) and an ipywidgets view.

``WorkbenchState`` holds a study, its configuration and results, and one
method per control; ``open_workbench`` shows it as widgets in a notebook.
Importing this package does not import ipywidgets or matplotlib.
"""

from __future__ import annotations

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

__all__ = [
    "BoxBudget",
    "Change",
    "ClassTransports",
    "VelocitySection",
    "WorkbenchState",
    "open_workbench",
]


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
        A TOML configuration; the bundled demo box when None.
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
        from sectionkit.demo import bundled_demo_config as demo_config_path

        config_path = demo_config_path()
    state = WorkbenchState.open(config_path, resume=resume, autosave=autosave)
    return WorkbenchView(state)
