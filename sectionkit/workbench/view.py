"""The workbench's widgets: controls that change the state, outputs redrawn from it.

The view knows nothing of physics. Each control calls one method of
:class:`~sectionkit.workbench.model.WorkbenchState`; the state tells the view
what changed, and the view redraws from the state: the class table, the box
budget and the velocity section at once (the state updates them linearly),
the section numbers, the sensitivity and inverse views and the cautions
after a short pause (debounced on the kernel's event loop, so a dragged
slider does not queue work).

Layout (fits 1280 px wide screens): a title bar with undo/redo and a button
that hides the controls, the status line, then the control panels
("Reference", "Classes", "Wind", "Inverse", "Session", one open at a time)
beside the outputs (collapsible: section, map, class table, sensitivity,
budgets, inverse, cautions); the two columns wrap under each other when the
window is narrow. A refused input shows its message in an ``sk-error``
element next to the control that caused it, and the typed text stays for
correction. Ctrl+Z / Ctrl+Shift+Z undo and redo (outside text fields). Every
widget carries a CSS class ``sk-...`` (see :data:`CSS_CLASSES`).
"""

from __future__ import annotations

import asyncio
import html
import threading
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any

import ipywidgets as widgets
from ipyevents import Event

from sectionkit.config import SOLVER_DISPLAY, SOLVER_NAMES, Config, InverseSpec
from sectionkit.errors import SectionkitError
from sectionkit.layers import class_display_name
from sectionkit.workbench import render
from sectionkit.workbench.keys import UndoKeys
from sectionkit.workbench.model import Change, VelocitySection, WorkbenchState
from sectionkit.workbench.plots import (
    CLASS_COLOURS,
    SELECTED,
    InverseFigures,
    SectionFigure,
    SensitivityFigure,
    StationMap,
)

SLIDER_STEP = 10.0  # dbar per slider step (one arrow-key press)
REDRAW_DELAY = 0.3  # s of quiet before the slower outputs are redrawn
OVERRIDE_KINDS = ("pressure", "bottom", "isopycnal", "velocity")
SLIDER_GESTURE = "reference-slider"
PANEL_WIDTH = "360px"
ERROR_GROUPS = ("reference", "pair", "classes", "wind", "inverse", "session", "history")
STYLE = {"description_width": "initial"}
#: Page style of the workbench (ipywidgets draws HTML with a tall line height).
PAGE_CSS = """<style>
.sk-workbench .widget-html-content { line-height: 1.35; }
.sk-workbench .widget-html { margin-top: 1px; margin-bottom: 1px; }
</style>"""

#: CSS class of each widget, by role.
CSS_CLASSES = {
    "root": "sk-workbench",
    "title": "sk-title",
    "undo": "sk-undo",
    "redo": "sk-redo",
    "hide_controls": "sk-hide-controls",
    "panels": "sk-panels",
    "outputs": "sk-outputs",
    "reference_mode": "sk-reference-mode",
    "reference_slider": "sk-reference-slider",
    "isopycnal_sigma": "sk-isopycnal-sigma",
    "isopycnal_pref": "sk-isopycnal-pref",
    "isopycnal_apply": "sk-isopycnal-apply",
    "line": "sk-line",
    "pair": "sk-pair",
    "pair_info": "sk-pair-info",
    "override_kind": "sk-override-kind",
    "override_pressure": "sk-override-pressure",
    "override_sigma": "sk-override-sigma",
    "override_pref": "sk-override-pref",
    "override_velocity": "sk-override-velocity",
    "override_error": "sk-override-error",
    "override_apply": "sk-override-apply",
    "override_clear": "sk-override-clear",
    "override_list": "sk-override-list",
    "interfaces": "sk-interfaces",
    "class_names": "sk-class-names",
    "bottom_triangle": "sk-bottom-triangle",
    "interfaces_apply": "sk-interfaces-apply",
    "ekman_depth": "sk-ekman-depth",
    "ekman_east": "sk-ekman-east",
    "ekman_north": "sk-ekman-north",
    "ekman_apply": "sk-ekman-apply",
    "inverse_on": "sk-inverse-on",
    "solver": "sk-solver",
    "rank": "sk-rank",
    "rank_used": "sk-rank-used",
    "conserve": "sk-conserve",
    "prior_velocity": "sk-prior-velocity",
    "prior_diapycnal": "sk-prior-diapycnal",
    "prior_ekman": "sk-prior-ekman",
    "noise_total": "sk-noise-total",
    "class_noise": "sk-class-noise",
    "noise_layer": "sk-noise-layer",
    "noise_salt": "sk-noise-salt",
    "noise_heat": "sk-noise-heat",
    "known": "sk-known",
    "section_net": "sk-section-net",
    "bounds": "sk-bounds",
    "inverse_apply": "sk-inverse-apply",
    "path": "sk-path",
    "save": "sk-save",
    "load": "sk-load",
    "export_folder": "sk-export-folder",
    "export_figures": "sk-export-figures",
    "export": "sk-export",
    "export_progress": "sk-export-progress",
    "session_info": "sk-session-info",
    "colour_lock": "sk-colour-lock",
    "colour_reset": "sk-colour-reset",
    "zoom": "sk-zoom",
    "zoom_reset": "sk-zoom-reset",
    "readout": "sk-readout",
    "class_table": "sk-class-table",
    "box_budget": "sk-box-budget",
    "section_numbers": "sk-section-numbers",
    "transfers": "sk-transfers",
    "residuals": "sk-residuals",
    "cautions": "sk-cautions",
    "status": "sk-status",
    "error": "sk-error",
}


class Debouncer:
    """Call a function once input has been quiet for ``delay`` seconds.

    Uses the running asyncio loop (the kernel's); without one (a plain
    script) the call happens at once.

    Parameters
    ----------
    delay : float
        Quiet time before the call, s.
    fn : callable
        Called without arguments.
    """

    def __init__(self, delay: float, fn: Callable[[], None]) -> None:
        self.delay = delay
        self.fn = fn
        self._handle: asyncio.TimerHandle | None = None

    def __call__(self) -> None:
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:
            loop = None
        if self._handle is not None:
            self._handle.cancel()
            self._handle = None
        if loop is None or self.delay <= 0:
            self.fn()
        else:
            self._handle = loop.call_later(self.delay, self._fire)

    def _fire(self) -> None:
        self._handle = None
        self.fn()

    @property
    def pending(self) -> bool:
        """Whether a call is waiting."""
        return self._handle is not None


def _css(widget: widgets.Widget, role: str) -> widgets.Widget:
    widget.add_class(CSS_CLASSES[role])
    return widget


def _rows(text: str, fields: int, what: str) -> list[list[str]]:
    """Comma-separated lines of a text area, each with ``fields`` entries."""
    out = []
    for n, line in enumerate(text.splitlines()):
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        parts = [p.strip() for p in line.split(",")]
        if len(parts) != fields:
            raise SectionkitError(f"{what}, line {n + 1} {line!r}: give {fields} entries "
                                  "separated by commas")
        out.append(parts)
    return out


def _number(text: str, what: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise SectionkitError(f"{what}: {text!r} is not a number") from None


def _note(text: str) -> widgets.HTML:
    return widgets.HTML(f"<div style='font-size:12px;line-height:1.35'>{text}</div>",
                        layout=widgets.Layout(width="100%"))


def _button(description: str, **kwargs: Any) -> widgets.Button:
    """A button as wide as its words (never cut short)."""
    return widgets.Button(description=description, layout=widgets.Layout(width="auto"), **kwargs)


def _number_box(description: str, step: float, css_class: str) -> widgets.FloatText:
    """A labelled number box of the control column, with its CSS class for the browser tests."""
    return _css(widgets.FloatText(description=description, step=step, style=STYLE,
                                  layout=_wide()), css_class)


def _wide(**kwargs: Any) -> widgets.Layout:
    """Full width of the parent, less the 2 px margin ipywidgets puts on each side."""
    return widgets.Layout(width="calc(100% - 4px)", **kwargs)


class Collapsible(widgets.VBox):
    """A titled output block with a button that folds it away."""

    def __init__(self, title: str, children: list, *, opened: bool = True) -> None:
        self.toggle = widgets.ToggleButton(value=opened, description=title,
                                           icon="chevron-down" if opened else "chevron-right",
                                           layout=widgets.Layout(width="auto"))
        self.toggle.add_class("sk-collapse")
        self.body = widgets.VBox(children, layout=_wide(display="" if opened else "none"))
        super().__init__([self.toggle, self.body], layout=_wide(margin="2px 0 6px 0"))
        self.toggle.observe(self._flip, names="value")

    def _flip(self, change: dict) -> None:
        self.body.layout.display = "" if change["new"] else "none"
        self.toggle.icon = "chevron-down" if change["new"] else "chevron-right"


class WorkbenchView(widgets.VBox):
    """The workbench widget: controls, figures, tables, cautions and status.

    Parameters
    ----------
    state : WorkbenchState
        The state model the controls change and the outputs show.
    redraw_delay : float
        Quiet time before the slower outputs are redrawn, s.
    """

    def __init__(self, state: WorkbenchState, *, redraw_delay: float = REDRAW_DELAY) -> None:
        self.state = state
        self._syncing = False
        self.updates = 0
        self.draws = 0
        self._last_change = "opened"
        self._dragging = False
        self._redraw_later = Debouncer(redraw_delay, self.redraw)
        self.colours = render.ColourScale()
        self.errors = {g: _css(widgets.HTML(layout=_wide(display="none")), "error")
                       for g in ERROR_GROUPS}
        for group, error in self.errors.items():
            error.add_class(f"sk-error-{group}")

        # ---------------------------------------------------------- title bar and status
        self.title = _css(widgets.HTML(layout=widgets.Layout(flex="1 1 auto", min_width="0")),
                          "title")
        self.undo_button = _css(widgets.Button(description="undo", icon="undo",
                                               tooltip="undo (Ctrl+Z)",
                                               layout=widgets.Layout(width="80px")), "undo")
        self.redo_button = _css(widgets.Button(description="redo", icon="repeat",
                                               tooltip="redo (Ctrl+Shift+Z)",
                                               layout=widgets.Layout(width="80px")), "redo")
        self.hide_controls = _css(widgets.ToggleButton(description="hide controls",
                                                       icon="columns",
                                                       layout=widgets.Layout(width="130px")),
                                  "hide_controls")
        self.status = _css(widgets.HTML(value="opening", layout=_wide()), "status")

        # ---------------------------------------------------------- Reference panel
        self.mode = _css(widgets.ToggleButtons(
            options=[("pressure", "pressure"), ("deepest level", "bottom"),
                     ("isopycnal", "isopycnal")],
            tooltips=["a level of no motion at the pressure of the slider",
                      "a level of no motion at each pair's deepest common level",
                      "a level of no motion on the isopycnal below"],
            style={"button_width": "auto"}, layout=_wide()), "reference_mode")
        _, deepest, _ = state.pressure_range()
        self.slider = _css(widgets.FloatSlider(
            min=0.0, max=float(deepest), step=SLIDER_STEP, description="level (dbar)",
            continuous_update=True, readout_format=".0f", layout=_wide(), style=STYLE),
            "reference_slider")
        self.iso_sigma = _number_box("σ (kg m⁻³)", 0.01, "isopycnal_sigma")
        self.iso_pref = _number_box("σ reference pressure (dbar)", 1000.0, "isopycnal_pref")
        self.iso_apply = _css(_button("use this isopycnal"),
                              "isopycnal_apply")
        self.line = _css(widgets.Dropdown(description="line", style=STYLE, layout=_wide()),
                         "line")
        self.pair = _css(widgets.IntSlider(description="pair", min=0, style=STYLE,
                                           continuous_update=False, layout=_wide()), "pair")
        self.pair_info = _css(widgets.HTML(layout=_wide()), "pair_info")
        self.override_kind = _css(widgets.Dropdown(options=OVERRIDE_KINDS,
                                                   description="own reference", style=STYLE,
                                                   layout=_wide()), "override_kind")
        self.override_pressure = _css(widgets.FloatText(description="pressure (dbar)",
                                                        value=2000.0, style=STYLE,
                                                        layout=_wide()), "override_pressure")
        self.override_sigma = _css(widgets.FloatText(description="σ (kg m⁻³)", style=STYLE,
                                                     layout=_wide()), "override_sigma")
        self.override_pref = _css(widgets.FloatText(description="σ reference pressure (dbar)",
                                                    style=STYLE, layout=_wide()),
                                  "override_pref")
        self.override_velocity = _css(widgets.FloatText(description="velocity (m s⁻¹)",
                                                        style=STYLE, layout=_wide()),
                                      "override_velocity")
        self.override_error = _css(widgets.FloatText(description="± (m s⁻¹)", style=STYLE,
                                                     layout=_wide()), "override_error")
        self.override_apply = _css(_button("set for this pair"),
                                   "override_apply")
        self.override_clear = _css(_button("back to global"),
                                   "override_clear")
        self.override_list = _css(widgets.HTML(layout=_wide()), "override_list")
        self.velocity_sign = _note("")
        reference_panel = widgets.VBox([
            _note("<b>Level of no motion, every pair</b>"), self.mode, self.slider,
            self.iso_sigma, self.iso_pref, self.iso_apply, self.errors["reference"],
            _note("<hr style='margin:4px 0'><b>One pair</b> (or click a pair on the map)"),
            self.line, self.pair, self.pair_info, self.override_kind,
            self.override_pressure, self.override_velocity, self.velocity_sign,
            self.override_sigma, self.override_pref, self.override_error,
            widgets.HBox([self.override_apply, self.override_clear]), self.errors["pair"],
            self.override_list,
        ], layout=_wide())

        # ---------------------------------------------------------- Classes panel
        self.interfaces = _css(widgets.Textarea(
            description="interfaces", placeholder="one per line: sigma @ p_ref, e.g. 27.0 @ 0",
            style=STYLE, layout=_wide(height="110px")), "interfaces")
        self.class_names = _css(widgets.Text(description="class names", style=STYLE,
                                             layout=_wide()), "class_names")
        self.bottom_triangle = _css(widgets.Dropdown(
            options=[("constant below deepest common level", "constant"),
                     ("zero", "zero"), ("extrapolated shear", "shear")],
            description="bottom triangles", style=STYLE, layout=_wide()), "bottom_triangle")
        self.interfaces_apply = _css(_button("rebuild classes"),
                                     "interfaces_apply")
        classes_panel = widgets.VBox([
            _note("Interfaces light to dense, each a potential density anomaly (kg m⁻³) at "
                  "its reference pressure (dbar). Names, comma-separated, one per class; "
                  "without them a class keeps its name where it keeps both its interfaces. "
                  "Inverse settings follow each class by name; new classes get defaults "
                  "and are marked <i>new</i>."),
            self.interfaces, self.class_names, self.interfaces_apply, self.errors["classes"],
            _note("<hr style='margin:4px 0'>"), self.bottom_triangle,
        ], layout=_wide())

        # ---------------------------------------------------------- Wind panel
        self.ekman_depth = _css(widgets.FloatText(description="Ekman depth (m)", style=STYLE,
                                                  layout=_wide()), "ekman_depth")
        self.ekman_east: dict[str, widgets.FloatText] = {}
        self.ekman_north: dict[str, widgets.FloatText] = {}
        self.ekman_rows = widgets.VBox(layout=_wide())
        self.ekman_apply = _css(_button("apply wind"), "ekman_apply")
        wind_panel = widgets.VBox([
            _note("Uniform wind stress over each line (N m⁻², east and north); its Ekman "
                  "transport enters the classes of the top layer."),
            self.ekman_rows, self.ekman_depth, self.ekman_apply, self.errors["wind"],
        ], layout=_wide())

        # ---------------------------------------------------------- Inverse panel
        self.inverse_on = _css(widgets.Checkbox(description="adjust references by the box inverse",
                                                indent=False, layout=_wide()), "inverse_on")
        self.solver = _css(widgets.Dropdown(options=[(SOLVER_DISPLAY[k], k) for k in SOLVER_NAMES],
                                            description="solver", style=STYLE, layout=_wide()),
                           "solver")
        self.rank = _css(widgets.BoundedIntText(description="SVD rank (0 = automatic)", min=0,
                                                max=10_000, style=STYLE, layout=_wide()), "rank")
        self.rank_used = _css(widgets.HTML(layout=_wide()), "rank_used")
        self.conserve = {kind: _css(widgets.Checkbox(description=kind, indent=False,
                                                     layout=widgets.Layout(width="70px")),
                                    "conserve")
                         for kind in ("mass", "salt", "heat")}
        self.prior_velocity = _number_box("prior b (m s⁻¹)", 0.005, "prior_velocity")
        self.prior_diapycnal = _number_box("prior W (Sv)", 0.5, "prior_diapycnal")
        self.prior_ekman = _number_box("prior Ekman (fraction)", 0.1, "prior_ekman")
        self.noise_total = _number_box("noise of total mass (Sv)", 0.1, "noise_total")
        self.class_noise = _css(widgets.GridBox(layout=widgets.Layout(
            width="100%", grid_template_columns="minmax(0, 1.4fr) repeat(3, minmax(0, 1fr))",
            grid_gap="2px 4px")), "class_noise")
        self.noise_layer: dict[str, widgets.FloatText] = {}
        self.noise_salt: dict[str, widgets.FloatText] = {}
        self.noise_heat: dict[str, widgets.FloatText] = {}
        self.known = _css(widgets.Textarea(placeholder="name, Sv, ± Sv, class, box",
                                           layout=_wide(height="60px")), "known")
        self.section_net = _css(widgets.Textarea(placeholder="line, Sv, ± Sv",
                                                 layout=_wide(height="48px")), "section_net")
        self.section_net_sign = _note("")
        self.bounds = _css(widgets.Textarea(placeholder="pair, lower, upper (m s⁻¹)",
                                            layout=_wide(height="48px")), "bounds")
        self.inverse_apply = _css(_button("apply inverse settings"),
                                  "inverse_apply")
        self.inverse_box = widgets.VBox([
            self.solver, self.rank, self.rank_used,
            widgets.HBox([widgets.Label("conserve"), *self.conserve.values()]),
            self.prior_velocity, self.prior_diapycnal, self.prior_ekman, self.noise_total,
            _note("<b>Noise per class</b>: mass (Sv), salt (Sv g/kg), heat (PW); 0 for salt "
                  "or heat = automatic from the class's spread."),
            self.class_noise,
            _note("<b>Known transports</b> entering a box elsewhere (+ = into the box), one "
                  "per line: <code>name, Sv, ± Sv, class, box</code>"), self.known,
            _note("<b>Net transport of a line</b>, one per line: <code>line, Sv, ± Sv</code>"),
            self.section_net_sign, self.section_net,
            _note("<b>Bounds</b> of a pair's adjustment (bounded solver): "
                  "<code>pair, lower, upper</code> in m s⁻¹"), self.bounds,
            self.inverse_apply,
        ], layout=_wide())
        inverse_panel = widgets.VBox([self.inverse_on, self.inverse_box, self.errors["inverse"]],
                                     layout=_wide())

        # ---------------------------------------------------------- Session panel
        folder = state.session.parent if state.session else Path.cwd()
        stem = state.session.stem if state.session else "study"
        self.path = _css(widgets.Text(value=str(folder / f"{stem}.saved.toml"),
                                      description="config file", style=STYLE, layout=_wide()),
                         "path")
        self.save_button = _css(_button("save", icon="save"), "save")
        self.load_button = _css(_button("load", icon="folder-open"), "load")
        self.export_folder = _css(widgets.Text(value=str(folder / f"{stem}_results"),
                                               description="results folder", style=STYLE,
                                               layout=_wide()), "export_folder")
        self.export_figures = _css(widgets.Checkbox(value=True, description="with figures",
                                                    indent=False,
                                                    layout=widgets.Layout(width="auto")),
                                   "export_figures")
        self.export_button = _css(_button("export", icon="download"),
                                  "export")
        self.export_progress = _css(widgets.FloatProgress(
            value=0.0, min=0.0, max=1.0, description="", bar_style="info",
            layout=_wide(visibility="hidden")), "export_progress")
        self.export_step = widgets.HTML(layout=_wide())
        self.session_info = _css(widgets.HTML(layout=_wide()), "session_info")
        session_panel = widgets.VBox([
            self.path, widgets.HBox([self.save_button, self.load_button]),
            _note("<hr style='margin:4px 0'>"),
            self.export_folder, widgets.HBox([self.export_button, self.export_figures]),
            self.export_progress, self.export_step,
            _note("Export writes the same files as <code>sectionkit budget</code>, on a "
                  "worker thread: keep working meanwhile."),
            self.errors["session"], self.session_info,
        ], layout=_wide())

        self.panels = _css(widgets.Accordion(
            children=[reference_panel, classes_panel, wind_panel, inverse_panel, session_panel],
            titles=("Reference", "Classes", "Wind", "Inverse", "Session"), selected_index=0,
            layout=widgets.Layout(flex=f"1 1 {PANEL_WIDTH}", max_width="440px",
                                  min_width="300px")), "panels")

        # ---------------------------------------------------------- outputs
        self.section_plot = SectionFigure()
        self.figure = self.section_plot.figure
        self.colour_lock = _css(widgets.ToggleButton(description="lock colours", icon="lock",
                                                     tooltip="keep the colour scale",
                                                     layout=widgets.Layout(width="auto")),
                                "colour_lock")
        self.colour_reset = _css(widgets.Button(description="fit colours", icon="refresh",
                                                tooltip="fit the colour scale to this section",
                                                layout=widgets.Layout(width="auto")),
                                 "colour_reset")
        self.zoom = _css(widgets.ToggleButton(description="zoom", icon="search",
                                              tooltip="drag to pan, wheel to zoom",
                                              layout=widgets.Layout(width="auto")), "zoom")
        self.zoom_reset = _css(widgets.Button(description="whole section",
                                              layout=widgets.Layout(width="auto")), "zoom_reset")
        self.section_caption = _note("")
        self.readout = _css(widgets.HTML(value="<span style='font-size:12px;color:#555'>point "
                                               "at the section for values</span>",
                                         layout=_wide(min_height="20px")), "readout")
        self.map_plot = StationMap(
            {n: state.station_positions(n) for n in state.section_names},
            {n: state.pair_positions(n) for n in state.section_names},
            {n: state.direction(n) for n in state.section_names},
            [(b.name, b.enters + b.leaves) for b in state.config.effective_boxes()],
            self._pick_pair)
        self.sensitivity_plot = SensitivityFigure()
        self.sensitivity_legend = _note("")
        self.inverse_plots = InverseFigures()
        self.class_table = _css(widgets.HTML(layout=_wide(overflow="auto", max_height="320px")),
                                "class_table")
        self.box_budget = _css(widgets.HTML(layout=_wide(overflow="auto", max_height="380px")),
                               "box_budget")
        self.section_numbers = _css(widgets.HTML(layout=_wide(overflow="auto")),
                                    "section_numbers")
        self.transfers = _css(widgets.HTML(layout=_wide(overflow="auto", max_height="240px")),
                              "transfers")
        self.residuals = _css(widgets.HTML(layout=_wide(overflow="auto", max_height="300px")),
                              "residuals")
        self.inverse_note = _note("")
        self.cautions = _css(widgets.HTML(layout=_wide(overflow="auto", max_height="240px")),
                             "cautions")
        self.inverse_block = Collapsible("Inverse: adjustments, transfers, residuals", [
            self.inverse_note, self.inverse_plots.adjustments, self.inverse_plots.resolution,
            self.transfers, self.inverse_plots.singular, self.residuals], opened=False)
        self.outputs = _css(widgets.VBox([
            Collapsible("Velocity section", [
                widgets.HBox([self.colour_lock, self.colour_reset, self.zoom, self.zoom_reset],
                             layout=widgets.Layout(flex_flow="row wrap")),
                self.section_caption, self.readout, self.figure]),
            Collapsible("Station map", [_note("Stations (small dots) and pairs (large dots) of "
                                              "each line; click a pair to select it. Arrows "
                                              "point to positive flow."), self.map_plot.figure]),
            Collapsible("Transports by class", [self.class_table]),
            Collapsible("Sensitivity to the level of no motion",
                        [self.sensitivity_legend, self.sensitivity_plot.figure]),
            Collapsible("Budgets of each line", [self.section_numbers]),
            Collapsible("Box constraints (net inflow, + = into the box)", [self.box_budget]),
            self.inverse_block,
            Collapsible("Cautions", [self.cautions]),
        ], layout=widgets.Layout(flex="3 1 460px", min_width="0", padding="0 0 0 10px")),
            "outputs")

        self.undo_keys = UndoKeys(lambda: self._act(state.undo, "history"),
                             lambda: self._act(state.redo, "history"))
        super().__init__([
            widgets.HBox([self.title, self.undo_button, self.redo_button, self.hide_controls,
                          self.undo_keys, widgets.HTML(PAGE_CSS, layout=widgets.Layout(
                              display="none"))], layout=_wide(align_items="center")),
            self.status, self.errors["history"],
            widgets.HBox([self.panels, self.outputs],
                         layout=_wide(flex_flow="row wrap", align_items="flex-start")),
        ], layout=widgets.Layout(width="100%", max_width="100%", overflow="hidden"))
        self.add_class(CSS_CLASSES["root"])

        # ---------------------------------------------------------- wiring
        self.slider.observe(self._on_slider, names="value")
        self.mode.observe(self._on_mode, names="value")
        self.iso_apply.on_click(lambda _: self._act(lambda: state.set_reference_isopycnal(
            self.iso_sigma.value, self.iso_pref.value), "reference"))
        self.line.observe(self._on_line, names="value")
        self.pair.observe(self._on_pair, names="value")
        self.override_kind.observe(lambda _: self._show_override_fields(), names="value")
        self.override_apply.on_click(lambda _: self._act(self._apply_override, "pair"))
        self.override_clear.on_click(lambda _: self._act(
            lambda: state.clear_override(self._pair_label()), "pair"))
        self.interfaces_apply.on_click(lambda _: self._act(self._apply_interfaces, "classes"))
        self.bottom_triangle.observe(self._on_triangle, names="value")
        self.ekman_apply.on_click(lambda _: self._act(self._apply_wind, "wind"))
        self.inverse_on.observe(self._on_inverse_on, names="value")
        self.inverse_apply.on_click(lambda _: self._act(self._apply_inverse, "inverse"))
        self.undo_button.on_click(lambda _: self._act(state.undo, "history"))
        self.redo_button.on_click(lambda _: self._act(state.redo, "history"))
        self.save_button.on_click(lambda _: self._act(self._save, "session"))
        self.load_button.on_click(lambda _: self._act(
            lambda: state.load(self.path.value.strip()), "session"))
        self.export_button.on_click(lambda _: self._act(self._export, "session"))
        self.hide_controls.observe(self._on_hide_controls, names="value")
        self.colour_lock.observe(self._on_colour_lock, names="value")
        self.colour_reset.on_click(lambda _: self._fit_colours())
        self.zoom.observe(self._on_zoom, names="value")
        self.zoom_reset.on_click(lambda _: self.section_plot.reset_zoom())
        self._pointer = Event(source=self.figure, watched_events=["mousemove", "click"],
                              throttle_or_debounce="throttle", wait=60)
        self._pointer.on_dom_event(self._on_pointer)
        self._sens_click = Event(source=self.sensitivity_plot.figure, watched_events=["click"])
        self._sens_click.on_dom_event(self._on_sensitivity_click)
        state.add_listener(self._on_change)

        self._sync_controls()
        self._update_tables()
        self._last_change = "opened" if state.resumed_from is None else (
            f"resumed from {state.resumed_from.name}")
        self.redraw()

    # ------------------------------------------------------------ state -> view
    def _on_change(self, change: Change) -> None:
        self.updates += 1
        self._last_change = change.description
        self._dragging = change.gesture is not None
        self._sync_controls(change.kind)
        self._update_tables()
        self._update_figure()
        self._set_status(f"{change.description} · tables and section updated · "
                         "other views pending")
        self._redraw_later()

    def _directions(self) -> dict:
        return {n: self.state.direction(n) for n in self.state.section_names}

    def _update_tables(self) -> None:
        """Class table and box budget: they follow every change at once."""
        table = self.state.class_table()
        self.class_table.value = render.class_table_html(table, self._directions(),
                                                         self.state.flagged_classes)
        self.box_budget.value = render.box_budget_html(self.state.box_budget(), table.inverse)

    def _section(self) -> VelocitySection:
        return self.state.velocity_section(self.line.value or self.state.section_names[0])

    def _update_figure(self) -> None:
        """The fast redraw of the velocity section (colour scale kept while dragging)."""
        section = self._section()
        limit = self.colours.update(section.velocity * 100.0, dragging=self._dragging)
        self.section_plot.update_velocity(section, limit)
        self.sensitivity_plot.mark(self.state.reference_sensitivity().current)

    def redraw(self) -> None:
        """Redraw every output from the state; the status line last."""
        try:
            self._dragging = False
            name = self.line.value or self.state.section_names[0]
            section = self.state.velocity_section(name)
            direction = self.state.direction(name)
            limit = self.colours.update(section.velocity * 100.0, dragging=False)
            self.section_plot.draw(section, limit, self.pair.value)
            self.section_caption.value = (
                f"<div style='font-size:12px'><b>{html.escape(name)}</b>: "
                f"{html.escape(section.reference)}"
                + (", with the inverse's adjustments" if section.adjusted else "")
                + f"; velocity in cm/s, {html.escape(direction.describe())}; gold dots: "
                "reference level of each pair; black lines: class interfaces</div>")
            self.map_plot.select(name, self.pair.value)
            self._update_tables()  # exact values of the full budget
            self.section_numbers.value = render.section_numbers_html(
                self.state.section_numbers(), self._directions())
            sens = self.state.reference_sensitivity()
            self.sensitivity_plot.draw(sens, name, direction)
            self.sensitivity_legend.value = (
                "<div style='font-size:12px'>" + " ".join(
                    f"<span style='color:{CLASS_COLOURS[i % len(CLASS_COLOURS)]}'>━ "
                    f"{html.escape(class_display_name(layer))}</span>"
                    for i, layer in enumerate(sens.layers))
                + f" <span>╌ sum</span> <span style='color:{SELECTED}'>┃ current level</span>"
                + "; click the plot to choose a level</div>")
            self._draw_inverse()
            self.cautions.value = render.cautions_html(self.state.cautions(), self._notes())
            self.draws += 1
            self._set_status(f"{self._last_change} · drawn ({self.draws})")
        except Exception as exc:  # never lose an error in a timer callback
            self._set_status(f"redraw failed: {type(exc).__name__}: {exc}", error=True)
            self.cautions.value = ("<pre style='font-size:11px'>"
                                   + html.escape(traceback.format_exc()) + "</pre>")

    def _draw_inverse(self) -> None:
        view = self.state.inverse_view()
        used = self.state.rank_used()
        self.rank_used.value = ("" if used is None else
                                f"<span style='font-size:12px'>rank used: <b>{used}</b></span>")
        if view is None:
            self.inverse_note.value = ("<div style='font-size:12px'>The inverse is off "
                                       "(Inverse panel).</div>")
            self.transfers.value = self.residuals.value = ""
            return
        self.inverse_note.value = (
            f"<div style='font-size:12px'>{html.escape(view.solver)}"
            + (f", rank {view.rank}" if view.rank is not None else "")
            + "; b in cm/s with its posterior std; W in Sv, + from the lighter to the "
            "denser class; residuals over the noise (before) and over the posterior "
            "residual std (after).</div>")
        self.inverse_plots.draw(view)
        self.transfers.value = render.transfers_html(view)
        self.residuals.value = render.residuals_html(view)

    def _notes(self) -> list[str]:
        notes = []
        if self.state.resumed_from is not None:
            notes.append(f"this session resumed from {self.state.resumed_from}")
        if self.state.resume_error:
            notes.append(self.state.resume_error)
        if self.state.autosave_error:
            notes.append(self.state.autosave_error)
        return notes

    def _set_status(self, text: str, *, error: bool = False) -> None:
        colour = "#a40000" if error else "#222"
        self.status.value = (f"<div style='font-size:13px;color:{colour};padding:2px 4px;"
                             f"background:#f3f3f3;border-radius:3px'>{html.escape(text)}</div>")

    def _sync_controls(self, kind: str | None = None) -> None:
        """Show the state's configuration in the controls a change touched (all: None).

        Controls of other panels keep what the user typed there.
        """
        every = kind in (None, "undo", "redo", "load")
        self._syncing = True
        try:
            state = self.state
            cfg = state.config
            self.title.value = (f"<h3 style='margin:4px 8px 4px 0'>{html.escape(cfg.title)}"
                                "</h3>")
            self.undo_button.disabled = not state.can_undo
            self.redo_button.disabled = not state.can_redo
            names = state.section_names
            if every or kind == "reference":
                self._sync_reference(cfg, names)
            if every or kind == "classes":
                self.interfaces.value = "\n".join(f"{f.sigma:g} @ {f.p_ref:g}"
                                                  for f in cfg.interfaces)
                self.class_names.value = ", ".join(cfg.layer_names)
                self.bottom_triangle.value = cfg.bottom_triangle
            if every or kind in ("ekman", "classes"):
                self.ekman_depth.value = cfg.ekman_depth
                if sorted(self.ekman_east) != sorted(names):
                    self._build_wind_rows(names)
                for name in names:
                    east, north = cfg.ekman_stress.get(name, (0.0, 0.0))
                    self.ekman_east[name].value = east
                    self.ekman_north[name].value = north
            if every or kind in ("inverse", "classes"):
                self._sync_inverse(cfg)
            self.session_info.value = self._session_text()
        finally:
            self._syncing = False

    def _sync_reference(self, cfg: Config, names: list[str]) -> None:
        ref = cfg.reference
        _, deepest, _ = self.state.pressure_range()
        self.slider.max = float(deepest)
        self.mode.value = ref.kind if ref.kind in ("pressure", "bottom", "isopycnal") else None
        if ref.kind == "pressure" and ref.pressure is not None:
            self.slider.value = min(float(ref.pressure), self.slider.max)
        self.slider.disabled = ref.kind != "pressure"
        if ref.kind == "isopycnal":
            self.iso_sigma.value = float(ref.sigma)
            self.iso_pref.value = float(ref.sigma_p_ref)
        elif cfg.interfaces and not self.iso_sigma.value:
            self.iso_sigma.value = float(cfg.interfaces[-1].sigma)
            self.iso_pref.value = float(cfg.interfaces[-1].p_ref)
        if list(self.line.options) != names:
            self.line.options = names
        if self.line.value not in names:
            self.line.value = names[0]
        self.pair.max = len(self.state.pair_labels(self.line.value)) - 1
        self._show_pair()
        self._show_overrides()

    def _sync_inverse(self, cfg: Config) -> None:
        inv = cfg.inverse
        self.inverse_on.value = inv is not None
        self.inverse_box.layout.display = "" if inv is not None else "none"
        if inv is None:
            return
        self.solver.value = inv.solver
        self.rank.value = inv.rank
        for kind, box in self.conserve.items():
            box.value = kind in inv.conserve
        self.prior_velocity.value = inv.prior_velocity
        self.prior_diapycnal.value = inv.prior_diapycnal
        self.prior_ekman.value = inv.prior_ekman
        self.noise_total.value = inv.noise_total
        self._build_class_noise(cfg.layer_names, inv)
        self.known.value = "\n".join(f"{k.name}, {k.transport:g}, {k.noise:g}, {k.layer}, "
                                     f"{k.box or ''}" for k in inv.known)
        self.section_net.value = "\n".join(f"{n.section}, {n.transport:g}, {n.noise:g}"
                                           for n in inv.section_net)
        self.section_net_sign.value = (
            "<div style='font-size:11px;color:#555'>"
            + "<br>".join(html.escape(f"{n}: {self.state.direction(n).describe()}")
                          for n in self.state.section_names) + "</div>")
        self.bounds.value = "\n".join(f"{label}, {lo:g}, {hi:g}"
                                      for label, (lo, hi) in inv.bounds.items())

    def _build_class_noise(self, names: list[str], inv: InverseSpec) -> None:
        flagged = set(self.state.flagged_classes)
        cells: list[widgets.Widget] = [widgets.HTML(f"<b style='font-size:12px'>{h}</b>")
                                       for h in ("class", "mass", "salt", "heat")]
        self.noise_layer, self.noise_salt, self.noise_heat = {}, {}, {}
        for i, name in enumerate(names):
            mark = (" <span class='sk-flag' style='color:#b35900'>new</span>"
                    if name in flagged else "")
            label = html.escape(class_display_name(name))
            cells.append(widgets.HTML(f"<span style='font-size:12px'>{label}{mark}</span>",
                                      layout=widgets.Layout(min_width="0")))
            for store, values, role in ((self.noise_layer, inv.noise_layer, "noise_layer"),
                                        (self.noise_salt, inv.noise_salt, "noise_salt"),
                                        (self.noise_heat, inv.noise_heat, "noise_heat")):
                box = widgets.FloatText(value=float(values[i]) if values else 0.0, step=0.05,
                                        layout=_wide(min_width="0"))
                box.add_class(CSS_CLASSES[role])
                box.add_class(f"{CSS_CLASSES[role]}-{name}")
                store[name] = box
                cells.append(box)
        self.class_noise.children = cells

    def _build_wind_rows(self, names: list[str]) -> None:
        rows = []
        self.ekman_east, self.ekman_north = {}, {}
        for name in names:
            east = widgets.FloatText(description="east", step=0.01, style=STYLE,
                                     layout=widgets.Layout(flex="1 1 0", min_width="0"))
            north = widgets.FloatText(description="north", step=0.01, style=STYLE,
                                      layout=widgets.Layout(flex="1 1 0", min_width="0"))
            east.add_class(CSS_CLASSES["ekman_east"])
            east.add_class(f"{CSS_CLASSES['ekman_east']}-{name}")
            north.add_class(CSS_CLASSES["ekman_north"])
            north.add_class(f"{CSS_CLASSES['ekman_north']}-{name}")
            self.ekman_east[name], self.ekman_north[name] = east, north
            d = self.state.direction(name)
            rows.append(_note(f"<b>{html.escape(name)}</b>: Ekman transport "
                              f"{html.escape(d.describe())}"))
            rows.append(widgets.HBox([east, north], layout=_wide()))
        self.ekman_rows.children = rows

    def _session_text(self) -> str:
        state = self.state
        parts = []
        if state.session is not None:
            parts.append(f"session: <code>{html.escape(str(state.session))}</code>")
        if state.autosave_path is not None:
            parts.append(f"autosave after each change: "
                         f"<code>{html.escape(str(state.autosave_path))}</code>")
        else:
            parts.append("autosave is off")
        return ("<div style='font-size:11px;overflow-wrap:anywhere'>" + "<br>".join(parts)
                + "</div>")

    def _pair_label(self) -> str:
        return f"{self.line.value}:{self.pair.value}"

    def _show_pair(self) -> None:
        label = self._pair_label()
        lon, lat = self.state.pair_positions(self.line.value)
        k = self.pair.value
        used = self.state.reference_pressures(self.line.value)[k]
        own = label in self.state.overrides()
        self.pair_info.value = (
            f"<span style='font-size:12px'><b>{html.escape(label)}</b> at "
            f"{lat[k]:.2f}°N {lon[k]:.2f}°E: {html.escape(self.state.describe_reference(label))}"
            f"{' (own)' if own else ' (global)'}; level used {used:.0f} dbar</span>")
        d = self.state.direction(self.line.value)
        self.velocity_sign.value = (f"<div style='font-size:11px;color:#555'>velocity "
                                    f"{html.escape(d.describe())}</div>")
        self.map_plot.select(self.line.value, k)
        self.section_plot.select(k)

    def _show_overrides(self) -> None:
        items = [f"<li>{html.escape(k)}: {html.escape(v.describe())}</li>"
                 for k, v in sorted(self.state.overrides().items())]
        self.override_list.value = (
            "<div style='font-size:12px'>Pairs with their own reference:"
            + ("<ul style='margin:0;padding-left:18px'>" + "".join(items) + "</ul>"
               if items else " none") + "</div>")
        self._show_override_fields()

    def _show_override_fields(self) -> None:
        kind = self.override_kind.value
        self.override_pressure.disabled = kind not in ("pressure", "velocity")
        self.override_sigma.disabled = kind != "isopycnal"
        self.override_pref.disabled = kind != "isopycnal"
        self.override_velocity.disabled = kind != "velocity"
        self.override_error.disabled = kind != "velocity"

    # ------------------------------------------------------------ view -> state
    def _act(self, action: Callable[[], Any], group: str) -> bool:
        """Run a control's action; show a refusal next to the control, keep what was typed."""
        error = self.errors[group]
        try:
            action()
        except SectionkitError as exc:
            self._refuse(group, str(exc))
            return False
        except Exception as exc:
            self._refuse(group, f"{type(exc).__name__}: {exc}")
            return False
        error.value = ""
        error.layout.display = "none"
        return True

    def _refuse(self, group: str, message: str) -> None:
        error = self.errors[group]
        error.value = ("<div role='alert' style='font-size:12px;color:#a40000;background:#fff0f0;"
                       "border:1px solid #e0a0a0;border-radius:3px;padding:3px 6px;"
                       f"overflow-wrap:anywhere'>refused: {html.escape(message)}</div>")
        error.layout.display = ""
        self.undo_keys.reveal(f"sk-error-{group}")
        where = "above" if group == "history" else f"in the {group} controls"
        self._set_status(f"refused ({where}): {message}", error=True)

    def _on_slider(self, change: dict) -> None:
        if self._syncing or self.mode.value != "pressure":
            return
        self._act(lambda: self.state.set_reference_pressure(change["new"],
                                                            gesture=SLIDER_GESTURE), "reference")

    def _on_mode(self, change: dict) -> None:
        if self._syncing or change["new"] is None:
            return
        mode = change["new"]
        if mode == "pressure":
            action = lambda: self.state.set_reference_mode("pressure",  # noqa: E731
                                                           pressure=self.slider.value)
        elif mode == "bottom":
            action = lambda: self.state.set_reference_mode("bottom")  # noqa: E731
        else:
            action = lambda: self.state.set_reference_mode(  # noqa: E731
                "isopycnal", sigma=self.iso_sigma.value, p_ref=self.iso_pref.value)
        self._act(action, "reference")

    def _on_line(self, change: dict) -> None:
        if self._syncing:
            return
        self._syncing = True
        try:
            self.pair.value = 0
            self.pair.max = len(self.state.pair_labels(self.line.value)) - 1
        finally:
            self._syncing = False
        self.redraw()

    def _on_pair(self, change: dict) -> None:
        if self._syncing:
            return
        self._show_pair()

    def _pick_pair(self, line: str, pair: int) -> None:
        """A pair clicked on the map (or the section): select it in the Reference panel."""
        self.panels.selected_index = 0
        if line != self.line.value:
            self._syncing = True
            try:
                self.line.value = line
                self.pair.max = len(self.state.pair_labels(line)) - 1
                self.pair.value = pair
            finally:
                self._syncing = False
            self.redraw()
        else:
            self._syncing = True
            try:
                self.pair.value = pair
            finally:
                self._syncing = False
        self._show_pair()
        self._last_change = (f"selected pair {self._pair_label()}: give it its own reference "
                             "in the Reference panel")
        self._set_status(self._last_change)

    def _apply_override(self) -> None:
        kind = self.override_kind.value
        if kind == "pressure":
            value: Any = float(self.override_pressure.value)
        elif kind == "bottom":
            value = "bottom"
        elif kind == "isopycnal":
            value = {"sigma": self.override_sigma.value, "p_ref": self.override_pref.value}
        else:
            value = {"velocity": self.override_velocity.value,
                     "pressure": self.override_pressure.value,
                     "error": self.override_error.value}
        self.state.set_override(self._pair_label(), value)

    def _apply_interfaces(self) -> None:
        faces = []
        for n, line in enumerate(self.interfaces.value.splitlines()):
            line = line.strip()
            if not line:
                continue
            sigma, _, p_ref = line.partition("@")
            try:
                faces.append((float(sigma), float(p_ref or 0.0)))
            except ValueError:
                raise SectionkitError(f"interface line {n + 1} {line!r}: write "
                                      "'sigma @ p_ref', e.g. '27.0 @ 0'") from None
        names = [s.strip() for s in self.class_names.value.split(",") if s.strip()]
        unchanged = names == self.state.layer_names
        self._set_status("rebuilding the class operators …")
        self.state.set_interfaces(faces, names=None if unchanged and len(names) != len(faces) + 1
                                  else names or None)

    def _on_triangle(self, change: dict) -> None:
        if self._syncing:
            return
        self._act(lambda: self.state.set_bottom_triangle(change["new"]), "classes")

    def _apply_wind(self) -> None:
        stress = {name: (self.ekman_east[name].value, self.ekman_north[name].value)
                  for name in self.state.section_names}
        self.state.set_wind(stress, depth=self.ekman_depth.value)

    def _on_inverse_on(self, change: dict) -> None:
        if self._syncing:
            return
        self._act(lambda: self.state.set_inverse(bool(change["new"])), "inverse")

    def _apply_inverse(self) -> None:
        names = self.state.layer_names
        known = [{"name": name, "transport": _number(t, f"known transport {name}"),
                  "noise": _number(e, f"known transport {name} noise"), "class": layer,
                  **({"box": box} if box else {})}
                 for name, t, e, layer, box in _rows(self.known.value, 5, "known transports")]
        nets = [{"section": line, "transport": _number(t, f"net transport of {line}"),
                 "noise": _number(e, f"net transport of {line} noise")}
                for line, t, e in _rows(self.section_net.value, 3, "net transport")]
        bounds = {label: [_number(lo, f"bounds {label}"), _number(hi, f"bounds {label}")]
                  for label, lo, hi in _rows(self.bounds.value, 3, "bounds")}
        salt = [self.noise_salt[n].value for n in names]
        heat = [self.noise_heat[n].value for n in names]
        self.state.set_inverse_settings(
            solver=self.solver.value, rank=self.rank.value,
            conserve=[k for k, box in self.conserve.items() if box.value],
            prior_velocity=self.prior_velocity.value, prior_diapycnal=self.prior_diapycnal.value,
            prior_ekman=self.prior_ekman.value, noise_total=self.noise_total.value,
            noise_layer=[self.noise_layer[n].value for n in names],
            noise_salt=salt if any(salt) else [], noise_heat=heat if any(heat) else [],
            known=known, section_net=nets, bounds=bounds)

    def _save(self) -> None:
        path = self.state.save(self.path.value.strip())
        self._set_status(f"saved {path}")

    def _export(self) -> None:
        """Export on a worker thread with a progress bar (at once without a kernel loop)."""
        folder = self.export_folder.value.strip()
        run = self.state.prepare_export(folder, figures=self.export_figures.value)
        self.export_button.disabled = True
        self.export_progress.value = 0.0
        self.export_progress.bar_style = "info"
        self.export_progress.layout.visibility = "visible"
        self._set_status(f"exporting to {folder} …")

        def progress(done: int, total: int, what: str) -> None:
            self.export_progress.value = done / total
            self.export_step.value = (f"<span style='font-size:12px'>{html.escape(what)}"
                                      f"{' …' if done < total else ''}</span>")

        def work() -> None:
            try:
                written = run(progress)
            except Exception as exc:  # shown beside the export button
                self.export_progress.bar_style = "danger"
                self._refuse("session", f"export to {folder} failed: {exc}")
            else:
                self.export_progress.bar_style = "success"
                self._set_status(f"exported {len(written)} files to {folder}")
            finally:
                self.export_button.disabled = False

        try:
            asyncio.get_running_loop()
        except RuntimeError:
            work()
            return
        threading.Thread(target=work, name="sectionkit-export", daemon=True).start()

    # ------------------------------------------------------------ view-only controls
    def _on_hide_controls(self, change: dict) -> None:
        self.panels.layout.display = "none" if change["new"] else ""
        self.hide_controls.description = "show controls" if change["new"] else "hide controls"

    def _on_colour_lock(self, change: dict) -> None:
        self.colours.locked = bool(change["new"])
        self.colour_lock.icon = "lock" if change["new"] else "unlock"

    def _fit_colours(self) -> None:
        section = self._section()
        limit = self.colours.reset(section.velocity * 100.0)
        self.section_plot.update_velocity(section, limit)

    def _on_zoom(self, change: dict) -> None:
        import bqplot as bq

        plot = self.section_plot
        self.figure.interaction = (bq.interacts.PanZoom(scales={"x": [plot.x], "y": [plot.y]})
                                   if change["new"] else None)

    def _on_pointer(self, event: dict) -> None:
        """Hover readout (pair, pressure, velocity, σ); a click selects the pair."""
        hit = self.section_plot.readout(event)
        if hit is None:
            return
        pair, level = hit
        section = self.section_plot.section
        if event.get("event") == "click":
            self._pick_pair(section.section, pair)
            return
        v = section.velocity[pair, level] * 100.0
        parts = [f"pair <b>{html.escape(section.section)}:{pair}</b>",
                 f"{section.pressure[level]:.0f} dbar",
                 "below the bottom" if v != v else f"velocity {v:+.2f} cm/s"]
        seen = set()
        for label, field, _ in section.interfaces:
            key = label.split(" ")[0]
            if key in seen:
                continue
            seen.add(key)
            value = field[pair, level]
            if value == value:
                parts.append(f"{html.escape(key)} {value:.3f}")
        self.readout.value = "<span style='font-size:12px'>" + " · ".join(parts) + "</span>"

    def _on_sensitivity_click(self, event: dict) -> None:
        """A click on the sensitivity view chooses that global level of no motion."""
        from sectionkit.workbench.plots import data_position

        plot = self.sensitivity_plot
        pos = data_position(plot.figure, plot.x, plot.y, event)
        if pos is None:
            return
        pressure = round(pos[0] / SLIDER_STEP) * SLIDER_STEP
        pressure = min(max(pressure, 0.0), self.slider.max)
        self._act(lambda: self.state.set_reference_pressure(pressure), "reference")
