"""The workbench's widgets: controls that change the state, outputs redrawn from it.

The view knows nothing of physics. Each control calls one method of
:class:`~sectionkit.workbench.model.WorkbenchState`; the state tells the view
what changed, and the view redraws from the state: the class table and the
box budget at once (the state updates them linearly), the velocity section,
the section numbers and the cautions after a short pause (debounced on the
kernel's event loop, so a dragged slider does not queue figures).

Layout: a title bar with undo/redo, then control panels ("Reference",
"Classes", "Wind", "Inverse", "Session") beside the outputs ("Section",
"Transports", "Budgets", "Cautions"), and a status line that is updated last
in every redraw. Every widget carries a CSS class ``sk-...`` (see
:data:`CSS_CLASSES`) for styling and for browser tests.
"""

from __future__ import annotations

import asyncio
import html
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any

import ipywidgets as widgets

from sectionkit.errors import SectionkitError
from sectionkit.workbench import render
from sectionkit.workbench.model import Change, WorkbenchState

SLIDER_STEP = 10.0  # dbar per slider step (one arrow-key press)
REDRAW_DELAY = 0.3  # s of quiet before the figure and summaries are redrawn
OVERRIDE_KINDS = ("pressure", "bottom", "isopycnal", "velocity")

#: CSS class of each widget, by role.
CSS_CLASSES = {
    "root": "sk-workbench",
    "title": "sk-title",
    "undo": "sk-undo",
    "redo": "sk-redo",
    "panels": "sk-panels",
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
    "conserve": "sk-conserve",
    "prior_velocity": "sk-prior-velocity",
    "prior_diapycnal": "sk-prior-diapycnal",
    "prior_ekman": "sk-prior-ekman",
    "noise_total": "sk-noise-total",
    "noise_layer": "sk-noise-layer",
    "inverse_apply": "sk-inverse-apply",
    "path": "sk-path",
    "save": "sk-save",
    "load": "sk-load",
    "export_folder": "sk-export-folder",
    "export_figures": "sk-export-figures",
    "export": "sk-export",
    "session_info": "sk-session-info",
    "figure": "sk-velocity-figure",
    "class_table": "sk-class-table",
    "box_budget": "sk-box-budget",
    "section_numbers": "sk-section-numbers",
    "cautions": "sk-cautions",
    "status": "sk-status",
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


def _numbers(text: str) -> list[float]:
    return [float(v) for v in text.replace(",", " ").split()]


class WorkbenchView(widgets.VBox):
    """The workbench widget: controls, velocity section, tables, cautions and status.

    Parameters
    ----------
    state : WorkbenchState
        The state model the controls change and the outputs show.
    redraw_delay : float
        Quiet time before the figure and summaries are redrawn, s.
    """

    def __init__(self, state: WorkbenchState, *, redraw_delay: float = REDRAW_DELAY) -> None:
        self.state = state
        self._syncing = False
        self.updates = 0
        self.draws = 0
        self._last_change = "opened"
        self._redraw_later = Debouncer(redraw_delay, self.redraw)
        wide = widgets.Layout(width="98%")
        label_style = {"description_width": "110px"}

        # ---------------------------------------------------------- title bar
        self.title = _css(widgets.HTML(), "title")
        self.undo_button = _css(widgets.Button(description="undo", icon="undo",
                                               layout=widgets.Layout(width="80px")), "undo")
        self.redo_button = _css(widgets.Button(description="redo", icon="repeat",
                                               layout=widgets.Layout(width="80px")), "redo")

        # ---------------------------------------------------------- Reference panel
        self.mode = _css(widgets.ToggleButtons(
            options=[("at a pressure", "pressure"), ("deepest common", "bottom"),
                     ("on an isopycnal", "isopycnal")],
            tooltips=["a level of no motion at the pressure of the slider",
                      "a level of no motion at each pair's deepest common level",
                      "a level of no motion on the isopycnal below"],
            style={"button_width": "135px"}), "reference_mode")
        _, deepest, _ = state.pressure_range()
        self.slider = _css(widgets.FloatSlider(
            min=0.0, max=float(deepest), step=SLIDER_STEP, description="level (dbar)",
            continuous_update=True, readout_format=".0f", layout=wide, style=label_style),
            "reference_slider")
        self.iso_sigma = _css(widgets.FloatText(description="σ (kg m⁻³)", step=0.01,
                                                style=label_style,
                                                layout=widgets.Layout(width="210px")),
                              "isopycnal_sigma")
        self.iso_pref = _css(widgets.FloatText(description="σ ref. (dbar)", step=1000.0,
                                               style=label_style,
                                               layout=widgets.Layout(width="210px")),
                             "isopycnal_pref")
        self.iso_apply = _css(widgets.Button(description="use isopycnal"), "isopycnal_apply")
        self.line = _css(widgets.Dropdown(description="line", style=label_style), "line")
        self.pair = _css(widgets.IntSlider(description="pair", min=0, style=label_style,
                                           continuous_update=False, layout=wide), "pair")
        self.pair_info = _css(widgets.HTML(), "pair_info")
        self.override_kind = _css(widgets.Dropdown(options=OVERRIDE_KINDS,
                                                   description="own reference",
                                                   style=label_style), "override_kind")
        small = widgets.Layout(width="210px")
        self.override_pressure = _css(widgets.FloatText(description="pressure (dbar)",
                                                        value=2000.0, style=label_style,
                                                        layout=small), "override_pressure")
        self.override_sigma = _css(widgets.FloatText(description="σ (kg m⁻³)", style=label_style,
                                                     layout=small), "override_sigma")
        self.override_pref = _css(widgets.FloatText(description="σ ref. (dbar)",
                                                    style=label_style, layout=small),
                                  "override_pref")
        self.override_velocity = _css(widgets.FloatText(description="velocity (m s⁻¹)",
                                                        style=label_style, layout=small),
                                      "override_velocity")
        self.override_error = _css(widgets.FloatText(description="± (m s⁻¹)",
                                                     style=label_style, layout=small),
                                   "override_error")
        self.override_apply = _css(widgets.Button(description="set for this pair"),
                                   "override_apply")
        self.override_clear = _css(widgets.Button(description="back to global"),
                                   "override_clear")
        self.override_list = _css(widgets.HTML(), "override_list")
        reference_panel = widgets.VBox([
            widgets.HTML("<b>Level of no motion, every pair</b>"), self.mode, self.slider,
            widgets.HBox([self.iso_sigma, self.iso_pref]), self.iso_apply,
            widgets.HTML("<hr style='margin:4px 0'><b>One pair</b>"),
            self.line, self.pair, self.pair_info, self.override_kind,
            widgets.HBox([self.override_pressure, self.override_velocity]),
            widgets.HBox([self.override_sigma, self.override_pref]),
            self.override_error,
            widgets.HBox([self.override_apply, self.override_clear]),
            self.override_list,
        ])

        # ---------------------------------------------------------- Classes panel
        self.interfaces = _css(widgets.Textarea(
            description="interfaces", placeholder="one per line: sigma @ p_ref, e.g. 27.0 @ 0",
            style=label_style, layout=widgets.Layout(width="98%", height="110px")), "interfaces")
        self.class_names = _css(widgets.Text(description="class names", style=label_style,
                                             layout=wide), "class_names")
        self.bottom_triangle = _css(widgets.Dropdown(
            options=[("constant below deepest common level", "constant"),
                     ("zero", "zero"), ("extrapolated shear", "shear")],
            description="bottom triangles", style=label_style, layout=wide), "bottom_triangle")
        self.interfaces_apply = _css(widgets.Button(description="rebuild classes"),
                                     "interfaces_apply")
        classes_panel = widgets.VBox([
            widgets.HTML("<span style='font-size:12px'>Interfaces light to dense, each a "
                         "potential density anomaly (kg m⁻³) at its reference pressure "
                         "(dbar). Rebuilding recomputes the class operators.</span>"),
            self.interfaces, self.class_names, self.interfaces_apply,
            widgets.HTML("<hr style='margin:4px 0'>"), self.bottom_triangle,
        ])

        # ---------------------------------------------------------- Wind panel
        self.ekman_depth = _css(widgets.FloatText(description="Ekman depth (m)",
                                                  style=label_style, layout=small), "ekman_depth")
        self.ekman_east: dict[str, widgets.FloatText] = {}
        self.ekman_north: dict[str, widgets.FloatText] = {}
        self.ekman_rows = widgets.VBox()
        self.ekman_apply = _css(widgets.Button(description="apply wind"), "ekman_apply")
        wind_panel = widgets.VBox([
            widgets.HTML("<span style='font-size:12px'>Uniform wind stress over each line "
                         "(N m⁻², east and north); its Ekman transport enters the classes "
                         "of the top layer.</span>"),
            self.ekman_rows, self.ekman_depth, self.ekman_apply,
        ])

        # ---------------------------------------------------------- Inverse panel
        self.inverse_on = _css(widgets.Checkbox(description="adjust references by the box inverse",
                                                indent=False), "inverse_on")
        self.solver = _css(widgets.Dropdown(options=[("Gauss–Markov", "gauss-markov"),
                                                     ("truncated SVD", "svd"),
                                                     ("bounded", "bounded")],
                                            description="solver", style=label_style), "solver")
        self.rank = _css(widgets.BoundedIntText(description="rank (0 = auto)", min=0, max=10_000,
                                                style=label_style, layout=small), "rank")
        self.conserve = {kind: _css(widgets.Checkbox(description=kind, indent=False,
                                                     layout=widgets.Layout(width="80px")),
                                    "conserve")
                         for kind in ("mass", "salt", "heat")}
        self.prior_velocity = _css(widgets.FloatText(description="prior b (m s⁻¹)", step=0.005,
                                                     style=label_style, layout=small),
                                   "prior_velocity")
        self.prior_diapycnal = _css(widgets.FloatText(description="prior W (Sv)", step=0.5,
                                                      style=label_style, layout=small),
                                    "prior_diapycnal")
        self.prior_ekman = _css(widgets.FloatText(description="prior Ekman (frac.)", step=0.1,
                                                  style=label_style, layout=small), "prior_ekman")
        self.noise_total = _css(widgets.FloatText(description="noise total (Sv)", step=0.1,
                                                  style=label_style, layout=small), "noise_total")
        self.noise_layer = _css(widgets.Text(description="noise / class (Sv)", style=label_style,
                                             layout=wide), "noise_layer")
        self.inverse_apply = _css(widgets.Button(description="apply inverse settings"),
                                  "inverse_apply")
        self.inverse_box = widgets.VBox([
            self.solver, self.rank,
            widgets.HBox([widgets.Label("conserve", layout=widgets.Layout(width="120px")),
                          *self.conserve.values()]),
            self.prior_velocity, self.prior_diapycnal, self.prior_ekman,
            self.noise_total, self.noise_layer, self.inverse_apply,
        ])
        inverse_panel = widgets.VBox([self.inverse_on, self.inverse_box])

        # ---------------------------------------------------------- Session panel
        folder = state.session.parent if state.session else Path.cwd()
        stem = state.session.stem if state.session else "study"
        self.path = _css(widgets.Text(value=str(folder / f"{stem}.saved.toml"),
                                      description="config file", style=label_style,
                                      layout=wide), "path")
        self.save_button = _css(widgets.Button(description="save", icon="save"), "save")
        self.load_button = _css(widgets.Button(description="load", icon="folder-open"), "load")
        self.export_folder = _css(widgets.Text(value=str(folder / f"{stem}_results"),
                                               description="results folder", style=label_style,
                                               layout=wide), "export_folder")
        self.export_figures = _css(widgets.Checkbox(value=True, description="with figures",
                                                    indent=False), "export_figures")
        self.export_button = _css(widgets.Button(description="export", icon="download"),
                                  "export")
        self.session_info = _css(widgets.HTML(), "session_info")
        session_panel = widgets.VBox([
            self.path, widgets.HBox([self.save_button, self.load_button]),
            widgets.HTML("<hr style='margin:4px 0'>"),
            self.export_folder, widgets.HBox([self.export_button, self.export_figures]),
            widgets.HTML("<span style='font-size:12px'>Export writes the same files as "
                         "<code>sectionkit budget</code>.</span>"),
            self.session_info,
        ])

        self.panels = _css(widgets.Tab(
            children=[reference_panel, classes_panel, wind_panel, inverse_panel, session_panel],
            titles=["Reference", "Classes", "Wind", "Inverse", "Session"],
            layout=widgets.Layout(width="470px", min_width="470px")), "panels")

        # ---------------------------------------------------------- outputs
        self.figure = _css(widgets.Image(format="png", layout=widgets.Layout(width="720px")),
                           "figure")
        self.class_table = _css(widgets.HTML(), "class_table")
        self.box_budget = _css(widgets.HTML(), "box_budget")
        self.section_numbers = _css(widgets.HTML(), "section_numbers")
        self.cautions = _css(widgets.HTML(), "cautions")
        self.status = _css(widgets.Label(value="opening"), "status")

        def head(text: str) -> widgets.HTML:
            return widgets.HTML(f"<b>{text}</b>")

        outputs = widgets.VBox([
            head("Section"), self.figure,
            head("Transports by class"), self.class_table,
            head("Budgets: each line"), self.section_numbers,
            head("Budgets: box constraints (net inflow)"), self.box_budget,
            head("Cautions"), self.cautions,
        ], layout=widgets.Layout(padding="0 0 0 12px"))

        super().__init__([
            widgets.HBox([self.title, self.undo_button, self.redo_button]),
            widgets.HBox([self.panels, outputs]),
            self.status,
        ])
        self.add_class(CSS_CLASSES["root"])

        # ---------------------------------------------------------- wiring
        self.slider.observe(self._on_slider, names="value")
        self.mode.observe(self._on_mode, names="value")
        self.iso_apply.on_click(lambda _: self._act(lambda: state.set_reference_isopycnal(
            self.iso_sigma.value, self.iso_pref.value)))
        self.line.observe(self._on_line, names="value")
        self.pair.observe(self._on_pair, names="value")
        self.override_kind.observe(lambda _: self._show_override_fields(), names="value")
        self.override_apply.on_click(lambda _: self._act(self._apply_override))
        self.override_clear.on_click(lambda _: self._act(
            lambda: state.clear_override(self._pair_label())))
        self.interfaces_apply.on_click(lambda _: self._act(self._apply_interfaces))
        self.bottom_triangle.observe(self._on_triangle, names="value")
        self.ekman_apply.on_click(lambda _: self._act(self._apply_wind))
        self.inverse_on.observe(self._on_inverse_on, names="value")
        self.inverse_apply.on_click(lambda _: self._act(self._apply_inverse))
        self.undo_button.on_click(lambda _: self._act(state.undo))
        self.redo_button.on_click(lambda _: self._act(state.redo))
        self.save_button.on_click(lambda _: self._act(self._save))
        self.load_button.on_click(lambda _: self._act(
            lambda: state.load(self.path.value.strip())))
        self.export_button.on_click(lambda _: self._act(self._export))
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
        self._sync_controls()
        self._update_tables()
        self._set_status(f"{change.description} · tables updated · figure pending")
        self._redraw_later()

    def _update_tables(self) -> None:
        """Class table and box budget: they follow every change at once."""
        table = self.state.class_table()
        self.class_table.value = render.class_table_html(table)
        self.box_budget.value = render.box_budget_html(self.state.box_budget(), table.inverse)

    def redraw(self) -> None:
        """Redraw the figure, section numbers and cautions; the status line last."""
        try:
            section = self.line.value or self.state.section_names[0]
            self.figure.value = render.velocity_png(self.state.velocity_section(section),
                                                    selected_pair=self.pair.value)
            self._update_tables()  # exact values of the full budget
            self.section_numbers.value = render.section_numbers_html(
                self.state.section_numbers())
            self.cautions.value = render.cautions_html(self.state.cautions(), self._notes())
            self.draws += 1
            self._set_status(f"{self._last_change} · drawn ({self.draws})")
        except Exception as exc:  # never lose an error in a timer callback
            self._set_status(f"redraw failed: {type(exc).__name__}: {exc}")
            self.cautions.value = ("<pre style='font-size:11px'>"
                                   + html.escape(traceback.format_exc()) + "</pre>")

    def _notes(self) -> list[str]:
        notes = []
        if self.state.resumed_from is not None:
            notes.append(f"this session resumed from {self.state.resumed_from}")
        if self.state.resume_error:
            notes.append(self.state.resume_error)
        if self.state.autosave_error:
            notes.append(self.state.autosave_error)
        return notes

    def _set_status(self, text: str) -> None:
        self.status.value = text

    def _sync_controls(self) -> None:
        """Show the state's configuration in every control (after undo, load, ...)."""
        self._syncing = True
        try:
            state = self.state
            cfg = state.config
            self.title.value = (f"<h3 style='margin:4px 8px 4px 0'>{html.escape(cfg.title)}"
                                "</h3>")
            self.undo_button.disabled = not state.can_undo
            self.redo_button.disabled = not state.can_redo
            ref = cfg.reference
            _, deepest, _ = state.pressure_range()
            self.slider.max = float(deepest)
            self.mode.value = ref.kind if ref.kind in ("pressure", "bottom", "isopycnal") \
                else None
            if ref.kind == "pressure" and ref.pressure is not None:
                self.slider.value = min(float(ref.pressure), self.slider.max)
            self.slider.disabled = ref.kind != "pressure"
            if ref.kind == "isopycnal":
                self.iso_sigma.value = float(ref.sigma)
                self.iso_pref.value = float(ref.sigma_p_ref)
            elif cfg.interfaces and not self.iso_sigma.value:
                self.iso_sigma.value = float(cfg.interfaces[-1].sigma)
                self.iso_pref.value = float(cfg.interfaces[-1].p_ref)
            names = state.section_names
            if list(self.line.options) != names:
                self.line.options = names
            if self.line.value not in names:
                self.line.value = names[0]
            self.pair.max = len(state.pair_labels(self.line.value)) - 1
            self._show_pair()
            self._show_overrides()
            self.interfaces.value = "\n".join(f"{f.sigma:g} @ {f.p_ref:g}"
                                              for f in cfg.interfaces)
            self.class_names.value = ", ".join(cfg.layer_names)
            self.bottom_triangle.value = cfg.bottom_triangle
            self.ekman_depth.value = cfg.ekman_depth
            if sorted(self.ekman_east) != sorted(names):
                self._build_wind_rows(names)
            for name in names:
                east, north = cfg.ekman_stress.get(name, (0.0, 0.0))
                self.ekman_east[name].value = east
                self.ekman_north[name].value = north
            inv = cfg.inverse
            self.inverse_on.value = inv is not None
            self.inverse_box.layout.display = "" if inv is not None else "none"
            if inv is not None:
                self.solver.value = inv.solver
                self.rank.value = inv.rank
                for kind, box in self.conserve.items():
                    box.value = kind in inv.conserve
                self.prior_velocity.value = inv.prior_velocity
                self.prior_diapycnal.value = inv.prior_diapycnal
                self.prior_ekman.value = inv.prior_ekman
                self.noise_total.value = inv.noise_total
                self.noise_layer.value = ", ".join(f"{v:g}" for v in inv.noise_layer)
            self.session_info.value = self._session_text()
        finally:
            self._syncing = False

    def _build_wind_rows(self, names: list[str]) -> None:
        rows = []
        self.ekman_east, self.ekman_north = {}, {}
        for name in names:
            east = widgets.FloatText(description=f"{name}: east", step=0.01,
                                     style={"description_width": "110px"},
                                     layout=widgets.Layout(width="210px"))
            north = widgets.FloatText(description="north", step=0.01,
                                      style={"description_width": "50px"},
                                      layout=widgets.Layout(width="150px"))
            east.add_class(CSS_CLASSES["ekman_east"])
            east.add_class(f"{CSS_CLASSES['ekman_east']}-{name}")
            north.add_class(CSS_CLASSES["ekman_north"])
            north.add_class(f"{CSS_CLASSES['ekman_north']}-{name}")
            self.ekman_east[name], self.ekman_north[name] = east, north
            rows.append(widgets.HBox([east, north]))
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
        return "<div style='font-size:11px'>" + "<br>".join(parts) + "</div>"

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
    def _act(self, action: Callable[[], Any]) -> None:
        """Run a control's action; show a refusal in the status line."""
        try:
            action()
        except SectionkitError as exc:
            self._sync_controls()
            self._set_status(f"refused: {exc}")
        except Exception as exc:
            self._sync_controls()
            self._set_status(f"error: {type(exc).__name__}: {exc}")

    def _on_slider(self, change: dict) -> None:
        if self._syncing or self.mode.value != "pressure":
            return
        self._act(lambda: self.state.set_reference_pressure(change["new"]))

    def _on_mode(self, change: dict) -> None:
        if self._syncing or change["new"] is None:
            return
        mode = change["new"]
        if mode == "pressure":
            self._act(lambda: self.state.set_reference_mode("pressure",
                                                            pressure=self.slider.value))
        elif mode == "bottom":
            self._act(lambda: self.state.set_reference_mode("bottom"))
        else:
            self._act(lambda: self.state.set_reference_mode(
                "isopycnal", sigma=self.iso_sigma.value, p_ref=self.iso_pref.value))

    def _on_line(self, change: dict) -> None:
        if self._syncing:
            return
        self._syncing = True
        try:
            self.pair.value = 0
            self.pair.max = len(self.state.pair_labels(self.line.value)) - 1
            self._show_pair()
        finally:
            self._syncing = False
        self._redraw_later()

    def _on_pair(self, change: dict) -> None:
        if self._syncing:
            return
        self._show_pair()
        self._redraw_later()

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
        self._set_status("rebuilding the class operators …")
        self.state.set_interfaces(faces, names=names if len(names) == len(faces) + 1 else None)

    def _on_triangle(self, change: dict) -> None:
        if self._syncing:
            return
        self._act(lambda: self.state.set_bottom_triangle(change["new"]))

    def _apply_wind(self) -> None:
        stress = {name: (self.ekman_east[name].value, self.ekman_north[name].value)
                  for name in self.state.section_names}
        self.state.set_wind(stress, depth=self.ekman_depth.value)

    def _on_inverse_on(self, change: dict) -> None:
        if self._syncing:
            return
        self._act(lambda: self.state.set_inverse(bool(change["new"])))

    def _apply_inverse(self) -> None:
        try:
            noise_layer = _numbers(self.noise_layer.value)
        except ValueError:
            raise SectionkitError("noise / class: give one number (Sv) per class, "
                                  "separated by commas") from None
        self.state.set_inverse_settings(
            solver=self.solver.value, rank=self.rank.value,
            conserve=[k for k, box in self.conserve.items() if box.value],
            prior_velocity=self.prior_velocity.value, prior_diapycnal=self.prior_diapycnal.value,
            prior_ekman=self.prior_ekman.value, noise_total=self.noise_total.value,
            noise_layer=noise_layer)

    def _save(self) -> None:
        path = self.state.save(self.path.value.strip())
        self._set_status(f"saved {path}")

    def _export(self) -> None:
        folder = self.export_folder.value.strip()
        self._set_status(f"exporting to {folder} …")
        written = self.state.export(folder, figures=self.export_figures.value)
        self._set_status(f"exported {len(written)} files to {folder}")
