"""Paper figures of a study: velocity sections, class transports, overturning, map, inverse.

Two layers:

* plotting functions that draw into a given :class:`matplotlib.axes.Axes`
  (``plot_velocity_section``, ``plot_class_transports``,
  ``plot_overturning_depth``, ``plot_overturning_density``,
  ``plot_station_map``, ``plot_singular_values``, ``plot_residuals``,
  ``plot_resolution``), reusable by the workbench;
* figure builders (``velocity_figure``, ``transport_figure``, ...) and
  :func:`write_figures`, which saves every figure as PNG and PDF under
  ``folder/figures``.

Everything is drawn on :class:`matplotlib.figure.Figure` objects with an
explicit Agg canvas, so pyplot's global state is never touched. Saved files
carry no timestamps or software versions, so rerunning a study writes
identical files where matplotlib allows. Sign conventions: docs/conventions.md.

Every ``plot_*`` function draws into the :class:`~matplotlib.axes.Axes` ``ax``
it is given. Every function here that takes ``study`` and ``results`` takes a
:class:`~sectionkit.study.Study` and the :class:`~sectionkit.study.Results` it
solved; their docstrings list only the other parameters.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from pathlib import Path

import matplotlib as mpl
import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import Normalize, SymLogNorm, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FuncFormatter, MaxNLocator, NullLocator

from sectionkit.budget import level_end_pressure
from sectionkit.config import SOLVER_DISPLAY
from sectionkit.geometry import along_line_distance, pair_along_line_distance, sign_convention
from sectionkit.layers import class_display_name, constraint_display_name, sigma_label
from sectionkit.operator import SectionOperator
from sectionkit.study import Results, Study

DPI = 150
VELOCITY_LABEL = "velocity (m s⁻¹)"
VELOCITY_CMAP = "RdBu_r"  # diverging, centred on zero
SEQUENTIAL_CMAP = "viridis_r"  # perceptually uniform, for non-diverging quantities
INITIAL_COLOR = "#b8c4cc"
ADJUSTED_COLOR = "#1b5e8c"
BOTTOM_COLOR = "#8c8c8c"
PNG_METADATA = {"Software": None}
PDF_METADATA = {"Creator": None, "Producer": None, "CreationDate": None}
STYLE = {
    "font.size": 9.5,
    "axes.titlesize": 10.5,
    "axes.labelsize": 9.5,
    "xtick.labelsize": 8.5,
    "ytick.labelsize": 8.5,
    "legend.fontsize": 8.5,
    "legend.frameon": False,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "svg.hashsalt": "sectionkit",
    "pdf.fonttype": 42,
}
MAX_STATION_LABELS = 16


# --------------------------------------------------------------------------- data helpers
def new_figure(width: float, height: float) -> Figure:
    """A figure with its own Agg canvas and constrained layout (no pyplot).

    Parameters
    ----------
    width, height : float
        Size, inches.

    Returns
    -------
    Figure
    """
    fig = Figure(figsize=(width, height), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def station_distance(op: SectionOperator) -> np.ndarray:
    """Along-line distance of every station from the first one.

    Parameters
    ----------
    op : SectionOperator
        The section.

    Returns
    -------
    ndarray (station,)
        km.
    """
    return along_line_distance(op.pairs["distance"].values) / 1e3


def pair_distance(op: SectionOperator) -> np.ndarray:
    """Along-line distance of every pair mid-point, km."""
    return pair_along_line_distance(op.pairs["distance"].values) / 1e3


def section_velocity(
    study: Study, results: Results, name: str, adjusted: bool = True
) -> np.ndarray:
    """Absolute geostrophic velocity of one section.

    Parameters
    ----------
    name : str
        Section name.
    adjusted : bool
        Include the inverse's adjustments (when an inverse ran).

    Returns
    -------
    ndarray (pair, level)
        m s^-1, positive to the left of increasing station order; NaN below
        the deeper station's bottom.
    """
    op = study.operators[name]
    offset = results.references[name].offset
    adjustment = 0.0
    if adjusted and results.inverse is not None:
        adjustment = results.estimate[results.layout.pair_slices[name]]
    return op.absolute_velocity(offset, adjustment)


def output_block(
    results: Results, name: str, output: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Initial value, adjusted value and error of one registered output of one section.

    Parameters
    ----------
    results : Results
        The results.
    name : str
        Section name.
    output : str
        Registry name (:data:`sectionkit.outputs.REGISTRY`), e.g.
        ``"class_volume_transport"`` or ``"streamfunction_depth"``.

    Returns
    -------
    initial, adjusted, error : ndarray
        In the output's reporting units; ``error`` is NaN without an inverse.
    """
    sel = results.select(output, name)
    return sel.initial, sel.adjusted, sel.error


def interface_field(sigma: np.ndarray) -> np.ndarray:
    """Potential density made non-decreasing downward, for drawing interfaces.

    Small inversions in weakly stratified deep water would otherwise draw
    bubbles and ticks along an interface contour; the running maximum along
    pressure keeps each column crossing an interface value once.

    Parameters
    ----------
    sigma : ndarray (..., pair, level)
        Pair-mean potential density anomaly, kg m^-3; NaN below the bottom.

    Returns
    -------
    ndarray (..., pair, level)
        Running maximum downward, kg m^-3, NaN where ``sigma`` is NaN.
    """
    sigma = np.asarray(sigma, dtype=float)
    filled = np.fmax.accumulate(sigma, axis=-1)
    return np.where(np.isfinite(sigma), filled, np.nan)


def interface_pressure(field: np.ndarray, pressure: np.ndarray, value: float) -> np.ndarray:
    """Pressure where each pair's (non-decreasing) density first reaches ``value``.

    Parameters
    ----------
    field : ndarray (pair, level)
        Potential density anomaly non-decreasing downward (see
        :func:`interface_field`), kg m^-3; NaN below the bottom.
    pressure : ndarray (level,)
        dbar.
    value : float
        Interface density anomaly, kg m^-3.

    Returns
    -------
    ndarray (pair,)
        Linearly interpolated pressure, dbar; NaN where the column never
        reaches the value or starts denser than it.
    """
    out = np.full(field.shape[0], np.nan)
    for j, col in enumerate(np.asarray(field, dtype=float)):
        ok = np.isfinite(col)
        c, pp = col[ok], pressure[ok]
        if c.size < 2 or c[0] >= value or c[-1] < value:
            continue
        k = int(np.argmax(c >= value))
        c0, c1 = c[k - 1], c[k]
        frac = (value - c0) / (c1 - c0) if c1 > c0 else 0.0
        out[j] = pp[k - 1] + frac * (pp[k] - pp[k - 1])
    return out


def _file_stem(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("_") or "section"


def _symmetric_limit(
    values: np.ndarray, weights: np.ndarray | None = None, percentile: float = 96.0
) -> float:
    """Colour limit: a rounded, area-weighted percentile of |values|.

    Narrow, fast boundary currents saturate (the colour bar extends) rather
    than washing out the interior.
    """
    values = np.asarray(values, dtype=float)
    w = np.ones_like(values) if weights is None else np.broadcast_to(weights, values.shape)
    ok = np.isfinite(values)
    a = np.abs(values[ok])
    if a.size == 0 or not np.any(a > 0):
        return 0.1
    w = np.asarray(w)[ok]
    order = np.argsort(a)
    cum = np.cumsum(w[order])
    k = int(np.searchsorted(cum, percentile / 100.0 * cum[-1]))
    vmax = float(a[order][min(k, a.size - 1)])
    if vmax <= 0:
        vmax = float(a.max())
    return _nice_ceiling(vmax)


def _nice_ceiling(x: float) -> float:
    """Smallest of 1, 1.5, 2, 2.5, 3, 4, 5, 6, 8 x 10^n not below x."""
    exponent = np.floor(np.log10(x))
    for m in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0):
        if m * 10**exponent >= x * (1 - 1e-9):
            return float(m * 10**exponent)
    return float(10 ** (exponent + 1))


# --------------------------------------------------------------------------- axes plots
def plot_velocity_section(
    ax: Axes,
    op: SectionOperator,
    velocity: np.ndarray,
    *,
    bottom_pressure: np.ndarray | None = None,
    reference_pressure: np.ndarray | None = None,
    station_ids: Sequence[str] | None = None,
    vmax: float | None = None,
    cmap: str = VELOCITY_CMAP,
    interfaces: bool = True,
    colorbar: bool = True,
    sign: str | None = None,
    contours: bool = True,
):
    """Draw a velocity section: distance (km) against pressure (dbar, down).

    Colours: without ``vmax`` the scale reaches the fastest speed, so peak
    speeds can be read; when that peak is more than twice the interior speeds
    (the 96th area-weighted percentile) the scale is symmetric-logarithmic,
    linear within the interior range. Labelled velocity contours give the
    numbers.

    Parameters
    ----------
    op : SectionOperator
        The section (grid, pair geometry, class interfaces, pair densities).
    velocity : ndarray (pair, level)
        Velocity, m s^-1; each pair fills the span between its two stations.
    bottom_pressure : ndarray (station,), optional
        Sea-floor pressure at each station, dbar; shaded grey below. From the
        deepest level of each pair when None.
    reference_pressure : ndarray (pair,), optional
        Reference pressure used by each pair, dbar; drawn as black dashes.
    station_ids : sequence of str, optional
        Station names for the ticks on the top axis (numbers when None).
    vmax : float, optional
        Colour limit, m s^-1 (symmetric about zero); from the data when None.
    cmap : str
        Diverging colormap.
    interfaces : bool
        Contour each class interface in its own reference pressure.
    colorbar : bool
        Add a colour bar labelled ``velocity (m s⁻¹)``.
    sign : str, optional
        The sign convention in words (``"positive = northward across K1→K5"``),
        added to the colour bar label.
    contours : bool
        Draw labelled velocity contours.

    Returns
    -------
    QuadMesh
        The velocity mesh (for a shared colour bar).
    """
    p = op.pressure
    xs = station_distance(op)
    xp = pair_distance(op)
    v = np.ma.masked_invalid(np.asarray(velocity, dtype=float))
    norm = velocity_norm(np.asarray(velocity, dtype=float), op.pairs["distance"].values[:, None],
                         vmax)
    step = np.diff(p)
    edges = np.concatenate([[p[0]], 0.5 * (p[:-1] + p[1:]), [p[-1] + (step[-1] if step.size
                                                                        else 1.0) / 2]])
    edges = np.clip(edges, 0.0, None)
    mesh = ax.pcolormesh(xs, edges, v.T, cmap=cmap, norm=norm, shading="flat", rasterized=True)

    if bottom_pressure is None:
        deepest = np.clip(np.asarray(op.deepest), 0, p.size - 1)
        pair_bottom = p[deepest]
        bottom_pressure = np.concatenate([[pair_bottom[0]], np.maximum(pair_bottom[:-1],
                                                                       pair_bottom[1:]),
                                          [pair_bottom[-1]]])
    bottom_pressure = np.asarray(bottom_pressure, dtype=float)
    p_max = float(np.nanmax(bottom_pressure)) * 1.03
    ax.fill_between(xs, bottom_pressure, p_max, color=BOTTOM_COLOR, zorder=3, lw=0)
    ax.plot(xs, bottom_pressure, color="0.25", lw=0.8, zorder=3)

    if contours and xp.size >= 2:
        levels = velocity_contour_levels(norm)
        finite = np.asarray(velocity, dtype=float)
        if levels and np.any(np.isfinite(finite)):
            cv = ax.contour(xp, p, v.T, levels=levels, colors="0.35", linewidths=0.5,
                            linestyles="solid", zorder=2)
            ax.clabel(cv, fmt=lambda x: f"{x:g}", fontsize=6.5, inline=True, inline_spacing=2)

    if interfaces and op.interfaces and xp.size >= 2:
        n_face = len(op.interfaces)
        for i, face in enumerate(op.interfaces):
            field = interface_field(op.sigma_pair[face.p_ref])
            if not (np.nanmin(field) <= face.sigma <= np.nanmax(field)):
                continue
            cs = ax.contour(xp, p, np.ma.masked_invalid(field).T, levels=[face.sigma],
                            colors="0.1", linewidths=0.9, zorder=2)
            depth = interface_pressure(field, p, face.sigma)
            # stagger the labels along the line so they do not stack vertically
            target = xs[0] + (xs[-1] - xs[0]) * (0.15 + 0.7 * (i + 0.5) / n_face)
            ok = np.flatnonzero(np.isfinite(depth))
            if ok.size:
                j = ok[np.argmin(np.abs(xp[ok] - target))]
                ax.clabel(cs, fmt={face.sigma: sigma_label(face.sigma, face.p_ref)},
                          fontsize=7.5, inline=True, inline_spacing=3,
                          manual=[(xp[j], depth[j])])

    if reference_pressure is not None:
        ref = np.asarray(reference_pressure, dtype=float)
        ax.hlines(ref, xs[:-1], xs[1:], colors="k", linestyles=(0, (3, 1.5)), lw=1.4, zorder=4,
                  label="reference level")
        ax.legend(loc="lower left", fontsize=7.5, frameon=True, framealpha=0.85)

    ax.set_xlim(xs[0], xs[-1])
    ax.set_ylim(p_max, 0.0)
    ax.set_xlabel("distance along the line (km)")
    ax.set_ylabel("pressure (dbar)")
    ax.spines["top"].set_visible(True)
    ax.spines["right"].set_visible(True)

    top = ax.secondary_xaxis("top")
    ids = list(station_ids) if station_ids is not None else [str(k) for k in range(xs.size)]
    keep = station_label_indices(xs.size, positions=xs)
    top.set_xticks(xs[keep], labels=[str(ids[k]) for k in keep])
    top.set_xticks(xs, minor=True)
    top.tick_params(axis="x", labelsize=7, length=4, which="major")
    top.tick_params(axis="x", length=2, which="minor")
    top.set_xlabel("station", fontsize=8)

    if colorbar:
        peak = float(np.nanmax(np.abs(velocity))) if np.any(np.isfinite(velocity)) else 0.0
        cb = ax.figure.colorbar(mesh, ax=ax, extend="both" if peak > norm.vmax else "neither",
                                shrink=0.95, pad=0.02)
        cb.set_label(VELOCITY_LABEL + (f"\n{sign}" if sign else ""))
        if isinstance(norm, SymLogNorm):  # plain numbers at 0, the linear limit and decades
            lin = float(norm.linthresh)
            ticks = [lin] + [x for x in (10.0**e for e in range(-3, 2))
                             if 2.0 * lin < x < norm.vmax * 0.999] + [float(norm.vmax)]
            cb.set_ticks(sorted({0.0, *ticks, *(-t for t in ticks)}))
            cb.ax.yaxis.set_major_formatter(FuncFormatter(lambda x, _pos: f"{x:g}"))
            cb.ax.yaxis.set_minor_locator(NullLocator())
    return mesh


def velocity_norm(velocity: np.ndarray, widths: np.ndarray | None = None,
                  vmax: float | None = None) -> Normalize:
    """Symmetric colour scale of a velocity section that keeps peak speeds readable.

    Parameters
    ----------
    velocity : ndarray (pair, level)
        m s^-1.
    widths : ndarray (pair, 1), optional
        Pair widths, m (weights of the interior percentile).
    vmax : float, optional
        A fixed limit, m s^-1 (linear scale; faster flow saturates).

    Returns
    -------
    Normalize
        ``TwoSlopeNorm`` centred on 0 up to the peak speed, or a ``SymLogNorm``
        linear within the interior speeds when the peak exceeds twice them.
    """
    if vmax is not None:
        return TwoSlopeNorm(vcenter=0.0, vmin=-vmax, vmax=vmax)
    v = np.asarray(velocity, dtype=float)
    interior = _symmetric_limit(v, widths)
    finite = np.abs(v[np.isfinite(v)])
    peak = _nice_ceiling(float(finite.max())) if finite.size and finite.max() > 0 else interior
    peak = max(peak, interior)
    if peak > 2.0 * interior:
        return SymLogNorm(linthresh=interior, linscale=1.0, vmin=-peak, vmax=peak, base=10)
    return TwoSlopeNorm(vcenter=0.0, vmin=-peak, vmax=peak)


def velocity_contour_levels(norm: Normalize) -> list[float]:
    """Labelled contour levels (m s^-1) from 1-2-5 steps within the colour scale, both signs."""
    vmax = float(norm.vmax)
    ladder = [m * 10.0**e for e in range(-3, 2) for m in (1.0, 2.0, 5.0)]
    # from the interior speeds up (symmetric-log scale), else from an eighth of the peak
    low = float(norm.linthresh) if isinstance(norm, SymLogNorm) else vmax / 8.0
    steps = [x for x in ladder if low <= x <= vmax * (1 + 1e-9)]
    return sorted([-x for x in steps] + steps)


def station_label_indices(n_station: int, most: int | None = None,
                          positions: np.ndarray | None = None) -> np.ndarray:
    """Stations labelled on the top axis: every k-th from the first, one stride throughout.

    A constant stride in station number leaves no unexplained gaps (every
    station still has a minor tick). With ``positions`` the stride grows
    until no two labels crowd each other where stations are close together.

    Parameters
    ----------
    n_station : int
        Number of stations.
    most : int, optional
        Most labels wanted (default ``MAX_STATION_LABELS``).
    positions : ndarray (station,), optional
        Distance of each station along the line, km.

    Returns
    -------
    ndarray of int
    """
    most = MAX_STATION_LABELS if most is None else most
    stride = max(1, int(np.ceil((n_station - 1) / max(most - 1, 1))))
    if positions is not None and n_station > 1:
        x = np.asarray(positions, dtype=float)
        gap = 0.55 * (x[-1] - x[0]) / most
        while stride < n_station - 1 and np.min(np.diff(x[::stride])) < gap:
            stride += 1
    return np.arange(0, n_station, stride)


def line_sign_convention(study: Study, name: str) -> str:
    """``"positive = northward across K1→K5"`` for one section of a study."""
    ds = study.sections.get(name)
    if ds is None:
        op = study.operators[name]
        return sign_convention(op.pairs["lon"].values, op.pairs["lat"].values, "0",
                               str(op.n_pair))
    stations = [str(s) for s in ds["station"].values]
    return sign_convention(ds["lon"].values, ds["lat"].values, stations[0], stations[-1])


def plot_class_transports(
    ax: Axes,
    layer_names: Sequence[str],
    initial: np.ndarray,
    adjusted: np.ndarray | None = None,
    error: np.ndarray | None = None,
    *,
    title: str | None = None,
    sign: str | None = None,
) -> None:
    """Bar chart of class volume transports before and after the inverse.

    Parameters
    ----------
    layer_names : sequence of str
        Class names, light to dense.
    initial : ndarray (class,)
        Transports with the chosen references, Sv.
    adjusted : ndarray (class,), optional
        Transports after the inverse, Sv (omitted when None).
    error : ndarray (class,), optional
        One posterior standard deviation of ``adjusted``, Sv.
    title : str, optional
        Panel title.
    sign : str, optional
        The sign convention in words, printed under the title.
    """
    x = np.arange(len(layer_names))
    width = 0.38 if adjusted is not None else 0.6
    shift = width / 2 if adjusted is not None else 0.0
    ax.bar(x - shift, initial, width, color=INITIAL_COLOR, edgecolor="0.35", lw=0.6,
           label="initial")
    if adjusted is not None:
        err = None
        if error is not None and np.any(np.isfinite(error)):
            err = np.where(np.isfinite(error), error, 0.0)
        ax.bar(x + shift, adjusted, width, color=ADJUSTED_COLOR, edgecolor="0.1", lw=0.6,
               yerr=err, capsize=3, error_kw={"elinewidth": 1.0, "ecolor": "k"},
               label="adjusted ± 1σ" if err is not None else "adjusted")
    ax.axhline(0.0, color="k", lw=0.7)
    ax.set_xticks(x, labels=[class_display_name(n) for n in layer_names])
    if len(layer_names) > 4:
        ax.tick_params(axis="x", labelrotation=30)
    ax.set_xlabel("density class (light → dense)")
    ax.set_ylabel("volume transport (Sv)")
    ax.yaxis.set_major_locator(MaxNLocator(nbins=6))
    ax.grid(axis="y", lw=0.4, alpha=0.5)
    ax.set_axisbelow(True)
    if title or sign:
        ax.set_title("\n".join(t for t in (title, sign) if t),
                     fontsize=None if not sign else 8.5)


def plot_overturning_depth(
    ax: Axes,
    pressure: np.ndarray,
    psi: np.ndarray,
    error: np.ndarray | None = None,
    *,
    label: str | None = None,
    color=None,
    linestyle: str = "-",
) -> None:
    """Overturning streamfunction accumulated from the surface, against pressure.

    Parameters
    ----------
    pressure : ndarray (level,)
        dbar (drawn increasing downward).
    psi : ndarray (level,)
        Streamfunction, Sv.
    error : ndarray (level,), optional
        One standard deviation, Sv (shaded).
    label : str, optional
        Legend label.
    color : optional
        Line colour.
    linestyle : str
        Line style.
    """
    (line,) = ax.plot(psi, pressure, color=color, ls=linestyle, lw=1.5, label=label)
    if error is not None and np.any(np.isfinite(error)):
        ax.fill_betweenx(pressure, psi - error, psi + error, color=line.get_color(), alpha=0.18,
                         lw=0)
    ax.axvline(0.0, color="k", lw=0.6)
    lo, hi = ax.get_ylim()
    if lo < hi:
        ax.invert_yaxis()
    ax.set_xlabel("overturning streamfunction (Sv)")
    ax.set_ylabel("pressure (dbar)")


def plot_overturning_density(
    ax: Axes,
    interface_labels: Sequence[str],
    psi: np.ndarray,
    error: np.ndarray | None = None,
    *,
    label: str | None = None,
    color=None,
    linestyle: str = "-",
    offset: float = 0.0,
) -> None:
    """Overturning streamfunction in density classes, at each interface.

    Parameters
    ----------
    interface_labels : sequence of str
        Interface names, light to dense (drawn top to bottom).
    psi : ndarray (interface,)
        Transport of all lighter classes, Sv.
    error : ndarray (interface,), optional
        One standard deviation, Sv (error bars).
    label, color, linestyle
        Legend label, line colour and style, as for :func:`plot_overturning_depth`.
    offset : float
        Vertical shift of the points, in interface spacings, so that several
        series' error bars do not overlap.
    """
    y = np.arange(len(interface_labels)) + offset
    err = None
    if error is not None and np.any(np.isfinite(error)):
        err = np.where(np.isfinite(error), error, 0.0)
    ax.errorbar(psi, y, xerr=err, color=color, ls=linestyle, marker="o", ms=4, lw=1.5,
                capsize=3, label=label)
    ax.axvline(0.0, color="k", lw=0.6)
    ax.set_yticks(np.arange(len(interface_labels)), labels=list(interface_labels))
    ax.set_ylim(len(interface_labels) - 0.5, -0.5)
    ax.set_xlabel("overturning streamfunction (Sv)")
    ax.set_ylabel("class interface (light → dense)")


def plot_station_map(
    ax: Axes,
    lines: dict[str, tuple[np.ndarray, np.ndarray]],
    *,
    depths: dict[str, np.ndarray] | None = None,
    colors: Sequence | None = None,
    colorbar: bool = True,
):
    """Stations of every line on a longitude-latitude map (no coastlines).

    Each line is drawn from its first station, which is ringed; an arrow at
    the middle of the line points to its positive transport direction (to the
    left of increasing station order).

    Parameters
    ----------
    lines : dict of str -> (lon, lat)
        Station longitudes (degrees_east) and latitudes (degrees_north) by line.
    depths : dict of str -> ndarray (station,), optional
        Bottom depth of every station, m; stations are coloured by it
        (perceptually uniform ``SEQUENTIAL_CMAP``, deeper is darker).
    colors : sequence, optional
        One colour per line.
    colorbar : bool
        Add a colour bar for the depths.

    Returns
    -------
    PathCollection or None
        The depth-coloured stations of the last line (for a colour bar), or
        None without depths.
    """
    palette = colors or [mpl.colormaps["tab10"](k % 10) for k in range(len(lines))]
    ref_lon = None
    tracks: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for name, (lon, lat) in lines.items():
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        if ref_lon is None:
            ref_lon = lon[0]
        # continuous across the dateline, relative to the first line's first station
        tracks[name] = (ref_lon + (lon - ref_lon + 180.0) % 360.0 - 180.0, lat)
    lon_all = np.concatenate([t[0] for t in tracks.values()]) if tracks else np.zeros(1)
    lat_all = np.concatenate([t[1] for t in tracks.values()]) if tracks else np.zeros(1)
    mean_lat = float(np.clip(np.mean(lat_all), -80, 80))
    coslat = float(np.cos(np.radians(mean_lat)))
    extent = max(np.ptp(lon_all) * coslat, np.ptp(lat_all), 1.0)  # degrees of latitude
    arrow = 0.1 * extent
    depth_range = None
    if depths:
        every = np.concatenate([np.asarray(d, dtype=float) for d in depths.values()])
        if np.any(np.isfinite(every)):
            depth_range = (float(np.nanmin(every)), float(np.nanmax(every)))
    mappable = None
    for k, (name, (lon, lat)) in enumerate(tracks.items()):
        c = palette[k]
        ax.plot(lon, lat, "-", color=c, lw=1.6, zorder=2)
        if depth_range is not None and name in depths:
            mappable = ax.scatter(lon, lat, s=18, c=np.asarray(depths[name], dtype=float),
                                  cmap=SEQUENTIAL_CMAP, vmin=depth_range[0],
                                  vmax=depth_range[1], edgecolor="k", lw=0.4, zorder=3,
                                  label=name)
        else:
            ax.scatter(lon, lat, s=14, color=c, edgecolor="k", lw=0.4, zorder=3, label=name)
        ax.scatter(lon[:1], lat[:1], s=70, facecolor="none", edgecolor=c, lw=1.4, zorder=3)
        ax.annotate(name, (lon[0], lat[0]), xytext=(-6, 6), textcoords="offset points",
                    ha="right", fontsize=8.5, color=c, fontweight="bold")
        if lon.size >= 2:
            m = lon.size // 2
            j = m - 1
            tx = (lon[m] - lon[j]) * coslat
            ty = lat[m] - lat[j]
            norm = float(np.hypot(tx, ty)) or 1.0
            mx, my = 0.5 * (lon[j] + lon[m]), 0.5 * (lat[j] + lat[m])
            # the left normal of the along-line direction (tx, ty) is (-ty, tx)
            ax.annotate("", xy=(mx - ty / norm * arrow / coslat, my + tx / norm * arrow),
                        xytext=(mx, my),
                        arrowprops={"arrowstyle": "-|>", "color": c, "lw": 1.3,
                                    "mutation_scale": 12})
    ax.set_aspect(1.0 / coslat, adjustable="datalim")
    ax.margins(0.12)
    ax.xaxis.set_major_formatter(FuncFormatter(_lon_text))
    ax.yaxis.set_major_formatter(FuncFormatter(_lat_text))
    ax.set_xlabel("longitude (degrees)")
    ax.set_ylabel("latitude (degrees)")
    ax.grid(lw=0.4, alpha=0.5)
    ax.spines["top"].set_visible(True)
    ax.spines["right"].set_visible(True)
    if mappable is not None and colorbar:
        cb = ax.figure.colorbar(mappable, ax=ax, shrink=0.8, pad=0.02)
        cb.set_label("bottom depth (m)")
        cb.ax.invert_yaxis()
    return mappable


def _lon_text(x: float, _pos=None) -> str:
    x = (x + 180.0) % 360.0 - 180.0
    if abs(x) < 1e-9 or abs(abs(x) - 180) < 1e-9:
        return f"{abs(x):g}°"
    return f"{abs(x):g}°{'E' if x > 0 else 'W'}"


def _lat_text(y: float, _pos=None) -> str:
    if abs(y) < 1e-9:
        return "0°"
    return f"{abs(y):g}°{'N' if y > 0 else 'S'}"


def plot_singular_values(
    ax: Axes, values: np.ndarray, rank: int | None = None, *, source: str = ""
) -> None:
    """Singular values of the scaled system on a log axis, with the noise level 1.

    Parameters
    ----------
    values : ndarray
        Singular values, descending, dimensionless.
    rank : int, optional
        Rank kept by a truncated SVD (marked).
    source : str
        Where the values come from (shown in the title).
    """
    values = np.asarray(values, dtype=float)
    n = np.arange(1, values.size + 1)
    top = float(values.max()) if values.size else 1.0
    zero = values <= top * max(values.size, 1) * np.finfo(float).eps * 10
    shown = values[~zero]
    floor = min(float(shown.min()) if shown.size else 1.0, 1.0) / 5.0
    ax.semilogy(n[~zero], shown, "o-", color=ADJUSTED_COLOR, ms=4, lw=1.2,
                label="singular values")
    if np.any(zero):
        ax.plot(n[zero], np.full(int(zero.sum()), floor), "v", color="#c0392b", ms=6,
                label="≈ 0 (rank deficient)")
    ax.axhline(1.0, color="0.3", ls="--", lw=0.9, label="noise level (λ = 1)")
    if rank:
        ax.axvline(rank + 0.5, color="#c0392b", lw=1.0, label=f"rank kept = {rank}")
    ax.set_ylim(floor / 1.5, max(top, 1.0) * 2.0)
    ax.set_xlim(0.5, values.size + 0.5)
    ax.set_xlabel("index")
    ax.set_ylabel("singular value λ (scaled)")
    ax.xaxis.set_major_locator(MaxNLocator(integer=True, nbins=8))
    ax.set_title("scaled singular values" + (f" ({source})" if source else ""))
    ax.legend(loc="upper right")
    ax.grid(lw=0.4, alpha=0.5, which="major")


def plot_residuals(
    ax: Axes,
    labels: Sequence[str],
    before: np.ndarray,
    after: np.ndarray,
) -> None:
    """Normalized residual (inflow / noise) of every constraint before and after.

    Parameters
    ----------
    labels : sequence of str
        Constraint names.
    before, after : ndarray (constraint,)
        Initial and adjusted net inflow divided by the constraint noise,
        dimensionless.
    """
    y = np.arange(len(labels))
    ax.axvspan(-1, 1, color="0.88", lw=0, label="|r| ≤ 1")
    ax.axvline(0.0, color="k", lw=0.6)
    for yy, b, a in zip(y, before, after, strict=True):
        ax.plot([b, a], [yy, yy], color="0.6", lw=0.8, zorder=2)
    ax.scatter(before, y, s=28, facecolor="white", edgecolor="0.3", lw=1.0, zorder=3,
               label="before")
    ax.scatter(after, y, s=28, color=ADJUSTED_COLOR, zorder=4, label="after")
    ax.set_yticks(y, labels=list(labels))
    ax.set_ylim(len(labels) - 0.5, -0.5)
    ax.set_xscale("symlog", linthresh=2.0, linscale=1.0)
    extreme = float(np.nanmax(np.abs(np.concatenate([before, after, [2.0]]))))
    ticks = [t for t in (1, 3, 10, 30, 100, 300, 1000) if t <= extreme * 1.05]
    ticks = sorted({0, *ticks, *(-t for t in ticks)})
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_minor_locator(NullLocator())
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    ax.set_xlim(-extreme * 1.25, extreme * 1.25)
    ax.set_xlabel("normalized residual (inflow / noise)")
    ax.set_title("constraint residuals", pad=20)
    ax.legend(loc="lower center", bbox_to_anchor=(0.5, 1.0), ncols=3, borderaxespad=0.2,
              handletextpad=0.3, columnspacing=1.0)
    ax.tick_params(axis="y", labelsize=7.5)


def plot_resolution(
    ax: Axes,
    sections: dict[str, np.ndarray],
    *,
    colors: Sequence | None = None,
) -> None:
    """Resolution diagonal of every pair's reference-velocity adjustment.

    Parameters
    ----------
    sections : dict of str -> ndarray (pair,)
        Resolution diagonal of each section's pairs, dimensionless.
    colors : sequence, optional
        One colour per section.
    """
    palette = colors or [mpl.colormaps["tab10"](k % 10) for k in range(len(sections))]
    total = sum(d.size for d in sections.values())
    step = next((s for s in (1, 2, 5, 10, 20, 50, 100, 200, 500) if total / s <= 12), 1000)
    start = 0
    ticks: list[int] = []
    labels: list[str] = []
    top = 0.0
    for k, (name, diag) in enumerate(sections.items()):
        x = start + np.arange(diag.size)
        ax.vlines(x, 0.0, diag, color=palette[k], lw=1.6 if diag.size < 40 else 1.0)
        ax.plot(x, diag, "o", color=palette[k], ms=3.0, label=name)
        if start:
            ax.axvline(start - 0.5, color="0.5", lw=0.6, ls=":")
        local = np.arange(0, diag.size, step)
        ticks += list(start + local)
        labels += [str(j) for j in local]
        if np.any(np.isfinite(diag)):
            top = max(top, float(np.nanmax(diag)))
        start += diag.size
    # resolution lies in [0, 1]; zoom in when every pair is poorly resolved
    ax.set_ylim(0.0, min(1.05, max(1.25 * top, 0.1)))
    ax.set_xlim(-0.8, max(start - 0.2, 0.8))
    ax.set_xlabel("station pair (index within each section)")
    ax.set_ylabel("resolution diagonal (1 = fully resolved)")
    ax.set_xticks(ticks, labels=labels)
    ax.grid(axis="y", lw=0.4, alpha=0.5)
    ax.set_title("resolution of pair adjustments")
    ax.legend(loc="upper right", ncols=min(len(sections), 3))


# --------------------------------------------------------------------------- figures
def velocity_figure(study: Study, results: Results, name: str) -> Figure:
    """Velocity section of one line (adjusted when an inverse ran, else initial).

    Parameters
    ----------
    name : str
        Section name.

    Returns
    -------
    Figure
    """
    op = study.operators[name]
    ds = study.sections.get(name)
    adjusted = results.inverse is not None
    velocity = section_velocity(study, results, name, adjusted=adjusted)
    fig = new_figure(8.0, 4.6)
    ax = fig.add_subplot()
    plot_velocity_section(
        ax, op, velocity,
        bottom_pressure=None if ds is None else ds["bottom_pressure"].values,
        reference_pressure=results.references[name].pressure,
        station_ids=None if ds is None else [str(s) for s in ds["station"].values],
        sign=line_sign_convention(study, name),
    )
    state = "after the inverse" if adjusted else "initial references, no inverse"
    ax.set_title(f"{name}: absolute geostrophic velocity ({state})", loc="left")
    return fig


def transport_figure(study: Study, results: Results) -> Figure:
    """Class transports of every section, before and after the inverse, with errors.

    Returns
    -------
    Figure
    """
    names = list(study.operators)
    ncol = min(len(names), 3)
    nrow = int(np.ceil(len(names) / ncol))
    fig = new_figure(3.3 * ncol + 0.6, 3.2 * nrow)
    axes = fig.subplots(nrow, ncol, squeeze=False, sharey=True)
    inverse = results.inverse is not None
    for ax, name in zip(axes.flat, names, strict=False):
        op = study.operators[name]
        initial, adjusted, error = output_block(results, name, "class_volume_transport")
        plot_class_transports(ax, op.layer_names, initial, adjusted if inverse else None,
                              error if inverse else None, title=name,
                              sign=line_sign_convention(study, name))
    for ax in axes.flat[len(names):]:
        ax.set_visible(False)
    for ax in axes[:, 1:].flat:
        ax.set_ylabel("")
    axes.flat[0].legend(loc="best")
    fig.suptitle("Volume transport by density class" + ("" if inverse else ": no inverse"),
                 fontsize=11)
    return fig


def overturning_figure(study: Study, results: Results) -> Figure:
    """Overturning streamfunction of every section in depth and in density classes.

    Returns
    -------
    Figure
    """
    any_density = any(op.interfaces for op in study.operators.values())
    if any_density:
        fig = new_figure(9.0, 4.6)
        ax_z, ax_r = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.25, 1.0]})
    else:  # a single class: only the depth-space streamfunction exists
        fig = new_figure(5.2, 4.8)
        ax_z, ax_r = fig.add_subplot(), None
    inverse = results.inverse is not None
    palette = [mpl.colormaps["tab10"](k % 10) for k in range(len(study.operators))]
    n_series = len(study.operators) * (2 if inverse else 1)
    dodge = 0.3 / max(n_series - 1, 1) if n_series > 1 else 0.0
    for k, (name, op) in enumerate(study.operators.items()):
        c = palette[k]
        positive = line_sign_convention(study, name).replace("positive = ", "+ ")
        ini, adj, err = output_block(results, name, "streamfunction_depth")
        ends = level_end_pressure(op.pressure)  # where each accumulated integral ends
        if inverse:
            plot_overturning_depth(ax_z, ends, ini, label=f"{name} initial", color=c,
                                   linestyle=":")
            plot_overturning_depth(ax_z, ends, adj, err,
                                   label=f"{name} adjusted ({positive})", color=c)
        else:
            plot_overturning_depth(ax_z, ends, ini, label=f"{name} ({positive})",
                                   color=c)
        n_face = len(op.interfaces)
        if n_face and ax_r is not None:
            # from nothing lighter (0) through each interface to all classes (0: the net
            # transport is removed)
            labels = ["top", *(sigma_label(f.sigma, f.p_ref) for f in op.interfaces), "all"]
            ini, adj, err = output_block(results, name, "streamfunction_density")
            ini, adj, err = (np.concatenate([[0.0], a, [0.0]]) for a in (ini, adj, err))
            first = (2 * k if inverse else k) * dodge - 0.15 * (n_series > 1)
            if inverse:
                plot_overturning_density(ax_r, labels, ini, label=f"{name} initial", color=c,
                                         linestyle=":", offset=first)
                plot_overturning_density(ax_r, labels, adj, err, label=f"{name} adjusted",
                                         color=c, offset=first + dodge)
            else:
                plot_overturning_density(ax_r, labels, ini, label=name, color=c, offset=first)
    ax_z.set_ylim(max(op.pressure[-1] for op in study.operators.values()), 0.0)
    ax_z.set_title("in depth (from the surface down)")
    handles, labels = ax_z.get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncols=min(len(labels), 4))
    ax_z.grid(lw=0.4, alpha=0.5)
    if ax_r is not None:
        ax_r.set_title("in density classes (lighter classes summed)")
        ax_r.grid(lw=0.4, alpha=0.5)
    bands = "shading and bars" if ax_r is not None else "shading"
    note = f"{bands}: ±1 posterior std" if inverse else "no inverse: initial references"
    fig.suptitle(f"Overturning streamfunction, net transport removed as a uniform velocity "
                 f"({note})\n"
                 "positive: the water above (lighter than) that level flows in net in the "
                 "line's positive direction", fontsize=10)
    return fig


def map_figure(study: Study) -> Figure:
    """Station map of every line.

    Parameters
    ----------
    study : Study
        The study (station positions from its sections).

    Returns
    -------
    Figure
    """
    lines = {}
    depths = {}
    for name, op in study.operators.items():
        ds = study.sections.get(name)
        if ds is not None:
            lines[name] = (ds["lon"].values, ds["lat"].values)
            if "bottom_depth" in ds:
                depths[name] = ds["bottom_depth"].values
        else:  # pair mid-points only
            lines[name] = (op.pairs["lon"].values, op.pairs["lat"].values)
    fig = new_figure(6.2, 4.8)
    ax = fig.add_subplot()
    plot_station_map(ax, lines, depths=depths or None)
    ax.set_title("Stations (ring: first station; arrow: positive transport)", fontsize=9.5)
    return fig


def inverse_figure(study: Study, results: Results) -> Figure | None:
    """Diagnostics of the inverse: singular values, residuals, resolution.

    Returns
    -------
    Figure or None
        None when no inverse ran.
    """
    inv = results.inverse
    if inv is None:
        return None
    system = inv.system
    values = inv.scaled_singular_values
    rank = inv.rank
    boxes = {r[0] for r in system.rows}
    labels = [f"{b}: {constraint_display_name(c)}" if len(boxes) > 1
              else constraint_display_name(c) for b, c in system.rows]
    before = system.initial / system.noise
    after = inv.normalized_residuals
    diag = np.where(inv.solved_for, inv.resolution_diagonal, np.nan)
    per_section = {name: diag[results.layout.pair_slices[name]] for name in study.operators}

    fig = new_figure(13.0, max(4.2, 0.22 * len(labels) + 1.6))
    axes = fig.subplots(1, 3, gridspec_kw={"width_ratios": [1.0, 1.15, 1.35]})
    plot_singular_values(axes[0], values, rank)
    plot_residuals(axes[1], labels, before, after)
    plot_resolution(axes[2], per_section)
    solver = SOLVER_DISPLAY.get(study.config.inverse.solver, study.config.inverse.solver)
    fig.suptitle(f"{solver} inverse: diagnostics", fontsize=11)
    return fig


def _save(fig: Figure, folder: Path, stem: str) -> list[Path]:
    png = folder / f"{stem}.png"
    pdf = folder / f"{stem}.pdf"
    fig.savefig(png, dpi=DPI, metadata=PNG_METADATA)
    fig.savefig(pdf, metadata=PDF_METADATA)
    return [png, pdf]


def build_figures(study: Study, results: Results) -> dict[str, Figure]:
    """Every figure of a study by file stem.

    Returns
    -------
    dict of str -> Figure
        ``velocity_<section>``, ``class_transports``, ``overturning``,
        ``station_map`` and, when an inverse ran, ``inverse_diagnostics``.
    """
    with mpl.rc_context(STYLE):
        figs: dict[str, Figure] = {}
        for name in study.operators:
            figs[f"velocity_{_file_stem(name)}"] = velocity_figure(study, results, name)
        figs["class_transports"] = transport_figure(study, results)
        figs["overturning"] = overturning_figure(study, results)
        figs["station_map"] = map_figure(study)
        diagnostics = inverse_figure(study, results)
        if diagnostics is not None:
            figs["inverse_diagnostics"] = diagnostics
    return figs


def write_figures(study: Study, results: Results, folder: str | Path) -> list[Path]:
    """Write every figure as PNG (150 dpi) and PDF into ``folder/figures``.

    ``folder`` is the output folder (the report's temporary folder during a batch
    run); returns the files written.
    """
    out = Path(folder) / "figures"
    out.mkdir(parents=True, exist_ok=True)
    written: list[Path] = []
    with mpl.rc_context(STYLE):
        for stem, fig in build_figures(study, results).items():
            written += _save(fig, out, stem)
    return written


__all__ = [
    "build_figures",
    "inverse_figure",
    "map_figure",
    "new_figure",
    "output_block",
    "overturning_figure",
    "pair_distance",
    "plot_class_transports",
    "plot_overturning_density",
    "plot_overturning_depth",
    "plot_residuals",
    "plot_resolution",
    "plot_singular_values",
    "plot_station_map",
    "plot_velocity_section",
    "section_velocity",
    "station_distance",
    "transport_figure",
    "velocity_figure",
    "write_figures",
]
