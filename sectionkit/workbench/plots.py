"""The workbench's interactive figures (bqplot): drawing only, no physics.

Each class owns one bqplot ``Figure`` and redraws it from a value object the
state model hands out (:class:`~sectionkit.workbench.model.VelocitySection`,
:class:`~sectionkit.workbench.snapshot.ReferenceSensitivity`,
:class:`~sectionkit.workbench.snapshot.InverseView`, station positions).
Figures fill the width of their container and keep their scales between
redraws, so a redraw sends only the arrays that changed.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import bqplot as bq
import ipywidgets as widgets
import numpy as np

from sectionkit.workbench.snapshot import (
    InverseView,
    LineDirection,
    ReferenceSensitivity,
    VelocitySection,
)

MAX_ROWS = 240  # pressure levels sent to the browser: about one per pixel of the plot
LINE_COLOURS = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#8c564b", "#e377c2")
#: One colour per class, light to dense (the sensitivity view's curves).
CLASS_COLOURS = ("#4c72b0", "#dd8452", "#55a868", "#c44e52", "#8172b3", "#937860",
                 "#da8bc3", "#8c8c8c", "#ccb974", "#64b5cd")
VELOCITY_COLOURS = ["#2166ac", "#f7f7f7", "#b2182b"]  # negative, zero, positive
SELECTED = "#d0a"
EMPTY2 = np.zeros((1, 2))  # a placeholder for marks drawing several lines
MARGIN = {"top": 30, "bottom": 45, "left": 70, "right": 20}
TITLE_STYLE = {"font-size": "13px"}


def _figure(marks: list, axes: list, css: str, height: str, **kwargs) -> bq.Figure:
    kwargs.setdefault("display_toolbar", False)  # zoom has its own button
    fig = bq.Figure(marks=marks, axes=axes, fig_margin=dict(MARGIN), animation_duration=0,
                    title_style=dict(TITLE_STYLE),
                    layout=widgets.Layout(width="100%", height=height, min_width="0"),
                    **kwargs)
    fig.add_class(css)
    return fig


def nice_ticks(low: float, high: float, count: int = 5) -> np.ndarray:
    """About ``count`` round tick values (steps of 1, 2, 2.5 or 5 times a power of ten)."""
    span = float(high) - float(low)
    if not math.isfinite(span) or span <= 0:
        return np.array([float(low)])
    raw = span / count
    power = 10.0 ** math.floor(math.log10(raw))
    step = min((m * power for m in (1.0, 2.0, 2.5, 5.0, 10.0)),
               key=lambda step: abs(math.log(step / raw)))
    first = math.ceil(low / step) * step
    return np.arange(first, high + 1e-9 * step, step)


def follow_ticks(axis: bq.Axis, scale: bq.Scale, count: int = 5) -> None:
    """Keep round tick values on ``axis`` whenever its scale's range changes (zoom, redraw)."""
    def update(_change=None) -> None:
        if scale.min is not None and scale.max is not None:
            low, high = sorted((float(scale.min), float(scale.max)))
            axis.tick_values = nice_ticks(low, high, count)

    scale.observe(update, names=["min", "max"])
    update()


def data_position(fig: bq.Figure, x_scale: bq.Scale, y_scale: bq.Scale,
                  event: dict) -> tuple[float, float] | None:
    """Data coordinates of a mouse event (from ipyevents) on a figure, or None outside its plot.

    Parameters
    ----------
    fig : bq.Figure
        The figure the event happened on.
    x_scale, y_scale : bq.LinearScale
        Its scales, with ``min`` and ``max`` set (pan and zoom keep them in sync).
    event : dict
        An ipyevents mouse event (``relativeX``, ``relativeY``,
        ``boundingRectWidth``, ``boundingRectHeight``, px).
    """
    try:
        px, py = float(event["relativeX"]), float(event["relativeY"])
        width, height = float(event["boundingRectWidth"]), float(event["boundingRectHeight"])
    except (KeyError, TypeError, ValueError):
        return None
    m = fig.fig_margin
    plot_w = width - m["left"] - m["right"]
    plot_h = height - m["top"] - m["bottom"]
    if plot_w <= 0 or plot_h <= 0 or x_scale.min is None or y_scale.min is None:
        return None
    fx = (px - m["left"]) / plot_w
    fy = (py - m["top"]) / plot_h
    if not (0.0 <= fx <= 1.0 and 0.0 <= fy <= 1.0):
        return None
    x = x_scale.min + fx * (x_scale.max - x_scale.min)
    top, bottom = ((y_scale.min, y_scale.max) if getattr(y_scale, "reverse", False)
                   else (y_scale.max, y_scale.min))
    return x, top + fy * (bottom - top)


class SectionFigure:
    """Velocity section: pair x pressure cells, interfaces, reference levels, selected pair."""

    def __init__(self) -> None:
        self.x = bq.LinearScale()
        self.y = bq.LinearScale(reverse=True)
        self.c = bq.ColorScale(colors=VELOCITY_COLOURS, mid=0.0, min=-1.0, max=1.0)
        self.heat = bq.HeatMap(x=np.array([0.0, 1.0]), y=np.array([0.0, 1.0]),
                               color=np.zeros((2, 2)), scales={"x": self.x, "y": self.y,
                                                               "color": self.c},
                               null_color="#bdbdbd")
        self.floor = bq.Lines(x=[0.0, 1.0], y=[1.0, 1.0], scales={"x": self.x, "y": self.y},
                              fill="bottom", colors=["#555555"], fill_colors=["#8c8c8c"],
                              fill_opacities=[1.0])
        self.faces = bq.Lines(x=EMPTY2, y=EMPTY2,
                              scales={"x": self.x, "y": self.y},
                              colors=["black"], stroke_width=1.2)
        self.face_labels = bq.Label(x=[0.0], y=[0.0], text=[""], visible=False,
                                    scales={"x": self.x, "y": self.y},
                                    colors=["black"], default_size=11, align="start")
        self.refs = bq.Scatter(x=[0.0], y=[0.0], scales={"x": self.x, "y": self.y},
                               colors=["gold"], stroke="black", default_size=22,
                               marker="circle", labels=["reference level"],
                               display_legend=False)
        self.selected = bq.Lines(x=[0.0], y=[0.0], scales={"x": self.x, "y": self.y},
                                 colors=[SELECTED], stroke_width=2.0)
        self.colour_axis = bq.ColorAxis(scale=self.c, side="right", label="cm/s",
                                        num_ticks=5, tick_format=".1f")
        axes = [bq.Axis(scale=self.x, label="distance along the line (km)"),
                bq.Axis(scale=self.y, side="left", label="pressure (dbar)",
                        tick_format=".0f", label_offset="50px"),
                self.colour_axis]
        follow_ticks(axes[0], self.x)
        self.figure = _figure([self.heat, self.floor, self.faces, self.face_labels, self.refs,
                               self.selected], axes, "sk-velocity-figure", "360px")
        self.figure.fig_margin = {**MARGIN, "top": 10, "right": 75}
        self.section: VelocitySection | None = None
        self._stride = 1
        self._extent: tuple[float, float, float] | None = None

    def draw(self, section: VelocitySection, limit: float, selected_pair: int | None) -> None:
        """Redraw from ``section`` with the colour-scale limit ``limit`` (cm s^-1)."""
        self.section = section
        stride = max(1, math.ceil(section.pressure.size / MAX_ROWS))
        self._stride = stride
        xp = section.pair_distance
        p = section.pressure[::stride]
        v = (section.velocity[:, ::stride] * 100.0).T.astype(np.float32)  # (level, pair), cm/s
        bottom = float(np.nanmax(section.bottom_pressure)) * 1.03
        extent = (float(section.station_distance[0]), float(section.station_distance[-1]),
                  bottom)
        with self.figure.hold_sync():
            if self._extent != extent:  # a new line: new axes (keeps a zoom otherwise)
                self._extent = extent
                self.x.min, self.x.max = extent[0], extent[1]
                self.y.min, self.y.max = 0.0, bottom
            with self.c.hold_sync():
                self.c.min, self.c.max = -limit, limit
            with self.heat.hold_sync():
                self.heat.x, self.heat.y, self.heat.color = xp, p, v
            self.floor.x = section.station_distance
            self.floor.y = section.bottom_pressure
            self._draw_faces(section)
            with self.refs.hold_sync():
                self.refs.x, self.refs.y = xp, section.reference_pressure
            self.select(selected_pair)

    def update_velocity(self, section: VelocitySection, limit: float) -> None:
        """The fast redraw of a reference change: velocity, reference levels, colour limit."""
        if self.section is None or self.section.section != section.section:
            self.draw(section, limit, None)
            return
        self.section = section
        v = (section.velocity[:, ::self._stride] * 100.0).T.astype(np.float32)
        with self.figure.hold_sync():
            with self.c.hold_sync():
                self.c.min, self.c.max = -limit, limit
            self.heat.color = v
            self.refs.y = section.reference_pressure

    def _draw_faces(self, section: VelocitySection) -> None:
        xp = section.pair_distance
        xs, ys, lx, ly, text = [], [], [], [], []
        for label, pressure in section.interface_pressure:
            if np.isfinite(pressure).sum() < 2:
                continue
            xs.append(xp)
            ys.append(pressure)
            # the label where the interface is shallowest away from the ends (outcrops)
            lo, hi = pressure.size // 5, max(pressure.size - pressure.size // 5, 1)
            middle = pressure[lo:hi]
            k = (lo + int(np.nanargmin(middle)) if np.isfinite(middle).any()
                 else int(np.nanargmin(pressure)))
            lx.append(float(xp[k]))
            ly.append(float(pressure[k]) - 30.0)
            text.append(label)
        with self.faces.hold_sync():
            if xs:
                self.faces.x, self.faces.y = np.array(xs), np.array(ys)
            self.faces.visible = bool(xs)
        with self.face_labels.hold_sync():
            self.face_labels.x, self.face_labels.y, self.face_labels.text = lx, ly, text
            self.face_labels.visible = bool(text)

    def select(self, pair: int | None) -> None:
        """Outline one pair (None: none)."""
        s = self.section
        if s is None or pair is None or not 0 <= pair < s.pair_distance.size:
            self.selected.visible = False
            return
        x0, x1 = float(s.station_distance[pair]), float(s.station_distance[pair + 1])
        bottom = float(np.nanmax(s.bottom_pressure)) * 1.03
        with self.selected.hold_sync():
            self.selected.x = [x0, x1, x1, x0, x0]
            self.selected.y = [0.0, 0.0, bottom, bottom, 0.0]
            self.selected.visible = True

    def reset_zoom(self) -> None:
        """Back to the whole section."""
        if self._extent is not None:
            self.x.min, self.x.max = self._extent[0], self._extent[1]
            self.y.min, self.y.max = 0.0, self._extent[2]

    def readout(self, event: dict) -> tuple[int, int] | None:
        """Pair index and pressure-level index under the mouse, or None."""
        s = self.section
        pos = data_position(self.figure, self.x, self.y, event)
        if s is None or pos is None:
            return None
        x, p = pos
        pair = int(np.searchsorted(s.station_distance, x) - 1)
        if not 0 <= pair < s.pair_distance.size:
            return None
        level = int(np.clip(np.searchsorted(s.pressure, p), 0, s.pressure.size - 1))
        return pair, level


class StationMap:
    """Stations and pairs of every line on longitude and latitude; click a pair to select it.

    Parameters
    ----------
    lines : dict of str -> (lon, lat)
        Station positions by line, degrees.
    pairs : dict of str -> (lon, lat)
        Pair mid-points by line, degrees.
    directions : dict of str -> LineDirection
        What positive means for each line (drawn as an arrow with its words).
    boxes : list of (str, list of str)
        Each box and the lines that bound it.
    on_pick : callable
        ``on_pick(line, pair)`` when a pair is clicked.
    """

    def __init__(self, lines: dict[str, tuple[np.ndarray, np.ndarray]],
                 pairs: dict[str, tuple[np.ndarray, np.ndarray]],
                 directions: dict[str, LineDirection],
                 boxes: Sequence[tuple[str, Sequence[str]]],
                 on_pick: Callable[[str, int], None]) -> None:
        lon = np.concatenate([v[0] for v in lines.values()])
        lat = np.concatenate([v[1] for v in lines.values()])
        pad_lon = 0.08 * max(float(np.ptp(lon)), 1.0)
        pad_lat = 0.12 * max(float(np.ptp(lat)), 1.0)
        self.x = bq.LinearScale(min=float(lon.min()) - pad_lon, max=float(lon.max()) + pad_lon)
        # room above the top line for its arrow and words
        self.y = bq.LinearScale(min=float(lat.min()) - pad_lat,
                                max=float(lat.max()) + 2.5 * pad_lat)
        sc = {"x": self.x, "y": self.y}
        marks: list = []
        for name, members in boxes:
            ring_x, ring_y = _box_ring([lines[m] for m in members if m in lines])
            if ring_x.size:
                marks.append(bq.Lines(x=ring_x, y=ring_y, scales=sc, fill="inside",
                                      colors=["#9ecae1"], fill_colors=["#deebf7"],
                                      fill_opacities=[0.6], stroke_width=0.5))
                marks.append(bq.Label(x=[float(np.mean(ring_x))], y=[float(np.mean(ring_y))],
                                      text=[f"box {name}"], scales=sc, colors=["#08519c"],
                                      default_size=13, align="middle", font_weight="bold"))
        self.pair_marks: dict[str, bq.Scatter] = {}
        for n, (name, (slon, slat)) in enumerate(lines.items()):
            colour = LINE_COLOURS[n % len(LINE_COLOURS)]
            marks.append(bq.Lines(x=slon, y=slat, scales=sc, colors=[colour], stroke_width=1))
            marks.append(bq.Scatter(x=slon, y=slat, scales=sc, colors=["#444444"],
                                    default_size=8))
            plon, plat = pairs[name]
            dots = bq.Scatter(x=plon, y=plat, scales=sc, colors=[colour], default_size=40,
                              interactions={"click": "select"},
                              tooltip=bq.Tooltip(fields=["index"], labels=[f"{name} pair"]))
            dots.on_element_click(lambda _mark, event, name=name: on_pick(
                name, int(event["data"]["index"])))
            self.pair_marks[name] = dots
            marks.append(dots)
            marks.extend(_direction_marks(name, slon, slat, directions.get(name), sc, colour))
        self.selected = bq.Scatter(x=[0.0], y=[0.0], scales=sc, colors=["white"], fill=False,
                                   visible=False,
                                   stroke=SELECTED, stroke_width=3, default_size=160)
        marks.append(self.selected)
        self.pairs = pairs
        span_x = (self.x.max - self.x.min) * math.cos(math.radians(float(np.mean(lat))))
        aspect = float(np.clip(span_x / (self.y.max - self.y.min), 0.6, 3.0))
        axes = [bq.Axis(scale=self.x, label="longitude (°E)", tick_format=".1f"),
                bq.Axis(scale=self.y, side="left", label="latitude (°N)",
                        tick_format=".1f")]
        follow_ticks(axes[0], self.x)
        self.figure = _figure(marks, axes, "sk-map", "340px", min_aspect_ratio=aspect,
                              max_aspect_ratio=aspect)
        self.figure.fig_margin = {**MARGIN, "top": 10}

    def select(self, line: str, pair: int) -> None:
        """Ring the chosen pair."""
        lon, lat = self.pairs[line]
        with self.selected.hold_sync():
            self.selected.x, self.selected.y = [float(lon[pair])], [float(lat[pair])]
            self.selected.visible = True


def _box_ring(lines: list[tuple[np.ndarray, np.ndarray]]) -> tuple[np.ndarray, np.ndarray]:
    """A closed outline through the stations of a box's lines, each joined end to near end."""
    if len(lines) < 2:
        return np.array([]), np.array([])
    xs, ys = [np.asarray(lines[0][0])], [np.asarray(lines[0][1])]
    for lon, lat in lines[1:]:
        end = (xs[-1][-1], ys[-1][-1])
        if np.hypot(lon[0] - end[0], lat[0] - end[1]) > np.hypot(lon[-1] - end[0],
                                                                 lat[-1] - end[1]):
            lon, lat = lon[::-1], lat[::-1]
        xs.append(np.asarray(lon))
        ys.append(np.asarray(lat))
    x = np.concatenate([*xs, xs[0][:1]])
    y = np.concatenate([*ys, ys[0][:1]])
    return x, y


def _direction_marks(name: str, lon: np.ndarray, lat: np.ndarray,
                     direction: LineDirection | None, sc: dict, colour: str) -> list:
    """An arrow from the line's middle towards positive flow, with the line's name and words."""
    mid = lon.size // 2
    x0, y0 = float(lon[mid]), float(lat[mid])
    along_x = float(lon[-1] - lon[0]) * math.cos(math.radians(y0))
    along_y = float(lat[-1] - lat[0])
    length = math.hypot(along_x, along_y) or 1.0
    # to the left of increasing station order (DESIGN.md §4), drawn in map degrees
    nx, ny = -along_y / length, along_x / length
    size = 0.12 * length
    x1 = x0 + nx * size / max(math.cos(math.radians(y0)), 0.2)
    y1 = y0 + ny * size
    words = f"{name}: + {direction.compass}" if direction is not None else name
    if direction is not None and direction.boxes:
        words += " (" + ", ".join(("in" if into else "out") for _, into in direction.boxes) + ")"
    return [
        bq.Lines(x=[x0, x1], y=[y0, y1], scales=sc, colors=[colour], stroke_width=3),
        bq.Scatter(x=[x1], y=[y1], scales=sc, colors=[colour], marker="triangle-up",
                   default_size=60, rotation=[math.degrees(math.atan2(nx, ny))]),
        bq.Label(x=[x1], y=[y1], text=[words], scales=sc, colors=[colour], default_size=12,
                 align="start", x_offset=8, y_offset=-6),
    ]


class SensitivityFigure:
    """Class transports of one line against the global level of no motion."""

    def __init__(self) -> None:
        self.x = bq.LinearScale(min=0.0, max=1.0)
        self.y = bq.LinearScale()
        sc = {"x": self.x, "y": self.y}
        self.lines = bq.Lines(x=EMPTY2, y=EMPTY2,
                              scales=sc, colors=list(CLASS_COLOURS), stroke_width=1.6)
        self.total = bq.Lines(x=[0.0], y=[0.0], scales=sc, colors=["black"], line_style="dashed")
        self.current = bq.Lines(x=[0.0, 0.0], y=[0.0, 0.0], scales=sc, colors=[SELECTED],
                                stroke_width=2)
        self.zero = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=["#999999"],
                             stroke_width=0.8)
        self.y_axis = bq.Axis(scale=self.y, side="left", label="transport (Sv)")
        axes = [bq.Axis(scale=self.x, label="global level of no motion (dbar); click to choose"),
                self.y_axis]
        follow_ticks(axes[0], self.x)
        self.figure = _figure([self.zero, self.lines, self.total, self.current], axes,
                              "sk-sensitivity", "300px")
        self.figure.fig_margin = {**MARGIN, "right": 30}

    def draw(self, sens: ReferenceSensitivity, section: str,
             direction: LineDirection | None = None) -> None:
        """Curves of ``section``'s classes and their sum; the current level marked."""
        s = sens.sections.index(section)
        t = sens.transports[s]  # (level, class)
        p = sens.pressure
        low = float(min(np.nanmin(t), np.nanmin(t.sum(axis=1)), 0.0))
        high = float(max(np.nanmax(t), np.nanmax(t.sum(axis=1)), 0.0))
        pad = 0.05 * (high - low or 1.0)
        with self.figure.hold_sync():
            self.x.min, self.x.max = float(p[0]), float(p[-1])
            self.y.min, self.y.max = low - pad, high + pad
            with self.lines.hold_sync():
                self.lines.x = np.tile(p, (t.shape[1], 1))
                self.lines.y = t.T
            with self.total.hold_sync():
                self.total.x, self.total.y = p, t.sum(axis=1)
            self.zero.x = [float(p[0]), float(p[-1])]
            self.mark(sens.current)
            label = "transport (Sv)"
            if direction is not None:
                label += f", + {direction.compass}"
            self.y_axis.label = label
            note = f" ({sens.overrides} pair(s) keep their own reference)" if sens.overrides \
                else ""
            self.figure.title = f"{section}: initial class transports{note}"

    def mark(self, pressure: float | None) -> None:
        """Mark the current global level (None: not a pressure reference)."""
        with self.current.hold_sync():
            self.current.visible = pressure is not None
            if pressure is not None:
                self.current.x = [pressure, pressure]
                self.current.y = [self.y.min, self.y.max]


class InverseFigures:
    """Pair adjustments b ± std along each line, resolution, and singular values."""

    def __init__(self) -> None:
        self.bx, self.by = bq.LinearScale(), bq.LinearScale()
        sc = {"x": self.bx, "y": self.by}
        self.b_dots = bq.Scatter(x=[0.0], y=[0.0], scales={**sc, "color": bq.OrdinalColorScale(
            colors=list(LINE_COLOURS))}, color=[0], default_size=16)
        self.b_bars = bq.Lines(x=EMPTY2, y=EMPTY2,
                              scales=sc, colors=["#777777"],
                               stroke_width=1)
        self.b_zero = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=["#999999"])
        self.b_label = bq.Label(x=[0.0], y=[0.0], text=[""], scales=sc, colors=list(LINE_COLOURS),
                                default_size=12)
        b_axes = [bq.Axis(scale=self.bx,
                          label="distance along the line (km); lines one after another"),
                  bq.Axis(scale=self.by, side="left", label="adjustment b (cm/s) ± std")]
        follow_ticks(b_axes[0], self.bx)
        self.adjustments = _figure(
            [self.b_zero, self.b_bars, self.b_dots, self.b_label], b_axes,
            "sk-adjustments", "260px", title="reference-velocity adjustments")
        self.rx, self.ry = bq.LinearScale(), bq.LinearScale(min=0.0, max=1.05)
        self.res = bq.Scatter(x=[0.0], y=[0.0], scales={"x": self.rx, "y": self.ry,
                                                        "color": bq.OrdinalColorScale(
                                                            colors=list(LINE_COLOURS))},
                              color=[0], default_size=16)
        r_axes = [bq.Axis(scale=self.rx, label="distance along the line (km)"),
                  bq.Axis(scale=self.ry, side="left", label="resolution of b")]
        follow_ticks(r_axes[0], self.rx)
        self.resolution = _figure(
            [self.res], r_axes,
            "sk-resolution", "220px",
            title="resolution of b (1 = fully determined), lines coloured as above")
        self.sx, self.sy = bq.LinearScale(), bq.LogScale()
        self.sv = bq.Lines(x=[0.0], y=[1.0], scales={"x": self.sx, "y": self.sy},
                           marker="circle", marker_size=14, colors=["#333333"])
        self.rank = bq.Lines(x=[0.0, 0.0], y=[1.0, 1.0], scales={"x": self.sx, "y": self.sy},
                             colors=[SELECTED], stroke_width=2)
        self.singular = _figure(
            [self.sv, self.rank], [bq.Axis(scale=self.sx, label="index"),
                                   bq.Axis(scale=self.sy, side="left", tick_format=".0e",
                                           label="singular value (scaled)",
                                           label_offset="55px")],
            "sk-singular-values", "220px", title="singular values")

    def draw(self, view: InverseView) -> None:
        """Redraw every inverse figure."""
        xs, ys, colours, bars_x, bars_y, lx, ly, text = [], [], [], [], [], [], [], []
        offset = 0.0
        rx, ry = [], []
        for n, (name, d) in enumerate(view.pair_distance.items()):
            b = view.adjustment[name] * 100.0
            e = view.adjustment_std[name] * 100.0
            x = d + offset
            xs.append(x)
            ys.append(b)
            colours.append(np.full(d.size, n))
            bars_x.extend([[xi, xi] for xi in x])
            bars_y.extend([[bi - ei, bi + ei] for bi, ei in zip(b, e, strict=True)])
            lx.append(float(x[0]))
            ly.append(float(np.max(b + e)) if b.size else 0.0)
            text.append(name)
            rx.append(d)
            ry.append(view.adjustment_resolution[name])
            offset = float(x[-1]) + 0.1 * max(float(d[-1]), 1.0)
        x_all = np.concatenate(xs)
        bars = np.asarray(bars_y, dtype=float).reshape(-1, 2)
        y_low = float(np.nanmin(bars[:, 0])) if bars.size else -1.0
        y_high = float(np.nanmax(bars[:, 1])) if bars.size else 1.0
        pad = 0.05 * ((y_high - y_low) or 1.0)
        with self.adjustments.hold_sync():
            self.bx.min, self.bx.max = float(x_all.min()), float(x_all.max())
            self.by.min, self.by.max = min(y_low - pad, 0.0), max(y_high + pad, 0.0)
            with self.b_dots.hold_sync():
                self.b_dots.x, self.b_dots.y = x_all, np.concatenate(ys)
                self.b_dots.color = np.concatenate(colours)
            with self.b_bars.hold_sync():
                self.b_bars.x, self.b_bars.y = np.array(bars_x), np.array(bars_y)
            self.b_zero.x = [float(x_all.min()), float(x_all.max())]
            with self.b_label.hold_sync():
                self.b_label.x, self.b_label.y, self.b_label.text = lx, ly, text
        with self.resolution.hold_sync():
            self.rx.min = 0.0
            self.rx.max = float(max(np.max(r) for r in rx))
            with self.res.hold_sync():
                self.res.x = np.concatenate(rx)
                self.res.y = np.concatenate(ry)
                self.res.color = np.concatenate(colours)
        s = view.singular_values
        s = s[s > 0]
        with self.singular.hold_sync():
            if s.size:
                idx = np.arange(1, s.size + 1, dtype=float)
                self.sx.min, self.sx.max = 0.5, s.size + 0.5
                self.sy.min, self.sy.max = float(s.min()) * 0.7, float(s.max()) * 1.4
                with self.sv.hold_sync():
                    self.sv.x, self.sv.y = idx, s
                if view.rank is not None:
                    r = view.rank + 0.5
                    self.rank.x, self.rank.y = [r, r], [self.sy.min, self.sy.max]
                self.rank.visible = view.rank is not None
            title = "singular values"
            if view.rank is not None:
                title += f" (rank used: {view.rank})"
            self.singular.title = title
