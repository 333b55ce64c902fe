"""Drawing the workbench's outputs: PNG figures and HTML tables from the state's value objects.

Pure functions with no widgets and no physics: each takes what
:class:`~sectionkit.workbench.model.WorkbenchState` hands out (a
:class:`VelocitySection`, a :class:`ClassTransports`, a :class:`BoxBudget`,
a section summary table, caution texts) and returns PNG bytes or an HTML
string. Figures are drawn on a bare matplotlib ``Figure`` with the Agg
canvas (no pyplot state), so they work in any kernel and thread.
"""

from __future__ import annotations

import html
import io
import math

import numpy as np
import pandas as pd

from sectionkit.workbench.model import BoxBudget, ClassTransports, VelocitySection

TABLE_STYLE = (
    "border-collapse:collapse;font-size:12px;font-variant-numeric:tabular-nums;"
    "margin:2px 0 6px 0"
)
CELL = "padding:1px 8px;border-bottom:1px solid #ddd;"
NUM = CELL + "text-align:right;white-space:nowrap;"
HEAD = "padding:2px 8px;border-bottom:2px solid #888;text-align:left;font-weight:600;"
MAX_ROWS = 400  # pressure levels drawn in a velocity section
LARGE_RESIDUAL = 2.0  # |adjusted / noise| above which a constraint row is flagged


def _fmt(value: float, digits: int = 2) -> str:
    return "–" if value is None or not math.isfinite(value) else f"{value:+.{digits}f}"


def _pm(value: float, error: float, digits: int = 2) -> str:
    if error is None or not math.isfinite(error):
        return _fmt(value, digits)
    return f"{_fmt(value, digits)} ± {error:.{digits}f}"


# ---------------------------------------------------------------- figure
def velocity_png(
    section: VelocitySection,
    *,
    selected_pair: int | None = None,
    size: tuple[float, float] = (8.0, 3.9),
    dpi: int = 90,
) -> bytes:
    """The velocity section as a PNG image.

    Pair x pressure cells coloured by velocity (diverging colormap centred
    on zero), class interfaces as contours, each pair's reference level
    marked, the sea floor shaded, and the selected pair outlined.

    Parameters
    ----------
    section : VelocitySection
        What to draw (velocity in m s^-1, shown in cm s^-1).
    selected_pair : int, optional
        Index of a pair to outline.
    size : (float, float)
        Figure size, inches.
    dpi : int
        Resolution, dots per inch.

    Returns
    -------
    bytes
        PNG image.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, dpi=dpi)
    FigureCanvasAgg(fig)
    fig.subplots_adjust(left=0.09, right=0.99, bottom=0.13, top=0.92)
    ax = fig.add_subplot()
    xs = section.station_distance
    xp = section.pair_distance
    # a figure a few hundred pixels high needs no more than MAX_ROWS levels
    stride = max(1, int(np.ceil(section.pressure.size / MAX_ROWS)))
    p = section.pressure[::stride]
    dp = float(p[1] - p[0]) if p.size > 1 else 1.0
    p_edges = np.concatenate([[p[0]], 0.5 * (p[:-1] + p[1:]), [p[-1] + 0.5 * dp]])
    v = section.velocity[:, ::stride] * 100.0  # cm s^-1
    finite = np.abs(v[np.isfinite(v)])
    limit = float(np.percentile(finite, 97)) if finite.size else 1.0
    limit = max(limit, 0.5)
    mesh = ax.pcolormesh(xs, p_edges, np.ma.masked_invalid(v.T), cmap="RdBu_r",
                         vmin=-limit, vmax=limit, shading="flat", rasterized=True)
    bar = fig.colorbar(mesh, ax=ax, pad=0.01, extend="both")
    bar.set_label("velocity (cm s$^{-1}$), + to the left")
    if xp.size >= 2:
        for label, sigma, value in section.interfaces:
            field = np.ma.masked_invalid(sigma[:, ::stride].T)
            if field.count() == 0 or not (field.min() < value < field.max()):
                continue
            cs = ax.contour(xp, p, field, levels=[value], colors="k", linewidths=0.9)
            ax.clabel(cs, fmt={value: label}, fontsize=7, inline=True)
    ax.plot(xp, section.reference_pressure, ls="none", marker="o", ms=3.5, mfc="gold",
            mec="k", mew=0.5, label="reference level", zorder=5)
    bottom_limit = float(np.nanmax(section.bottom_pressure)) * 1.03
    ax.fill_between(xs, section.bottom_pressure, bottom_limit, color="0.45", zorder=4,
                    label="sea floor")
    if selected_pair is not None and 0 <= selected_pair < xp.size:
        ax.axvspan(xs[selected_pair], xs[selected_pair + 1], fill=False, edgecolor="#d0a",
                   lw=1.4, zorder=6, label="selected pair")
    ax.set_xlim(xs[0], xs[-1])
    ax.set_ylim(bottom_limit, 0.0)
    ax.set_xlabel("distance along the line (km)")
    ax.set_ylabel("pressure (dbar)")
    title = f"{section.section}: {section.reference}"
    if section.adjusted:
        title += ", with the inverse's adjustments"
    ax.set_title(title, fontsize=10)
    ax.legend(loc="lower left", fontsize=7, framealpha=0.85)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    return buffer.getvalue()


# ---------------------------------------------------------------- tables
def class_table_html(table: ClassTransports) -> str:
    """Class transports of every section, before and after the inverse, with errors.

    Parameters
    ----------
    table : ClassTransports
        Transports in Sv (section frame: positive to the left of increasing
        station order).

    Returns
    -------
    str
        An HTML table.
    """
    after = "after inverse (Sv)" if table.inverse else "after (no inverse)"
    rows = [
        f"<table style='{TABLE_STYLE}'><tr><th style='{HEAD}'>section</th>"
        f"<th style='{HEAD}'>class</th><th style='{HEAD}'>initial (Sv)</th>"
        f"<th style='{HEAD}'>{after}</th><th style='{HEAD}'>change (Sv)</th></tr>"
    ]
    for s, section in enumerate(table.sections):
        for i, layer in enumerate(table.layers):
            first = (f"<td style='{CELL}' rowspan='{len(table.layers) + 1}'>"
                     f"<b>{html.escape(section)}</b></td>" if i == 0 else "")
            initial = float(table.initial[s, i])
            adjusted = float(table.adjusted[s, i])
            rows.append(
                f"<tr>{first}<td style='{CELL}'>{html.escape(layer)}</td>"
                f"<td style='{NUM}'>{_fmt(initial)}</td>"
                f"<td style='{NUM}'>{_pm(adjusted, float(table.error[s, i]))}</td>"
                f"<td style='{NUM}'>{_fmt(adjusted - initial)}</td></tr>"
            )
        total0 = float(table.initial[s].sum())
        total1 = float(table.adjusted[s].sum())
        rows.append(
            f"<tr><td style='{CELL}'><i>sum</i></td><td style='{NUM}'><i>{_fmt(total0)}</i></td>"
            f"<td style='{NUM}'><i>{_fmt(total1)}</i></td>"
            f"<td style='{NUM}'><i>{_fmt(total1 - total0)}</i></td></tr>"
        )
    rows.append("</table>")
    return "".join(rows)


def box_budget_html(budget: BoxBudget, inverse: bool) -> str:
    """Box constraints: net inflow before and after, noise and normalized residual.

    Parameters
    ----------
    budget : BoxBudget
        Rows in their own units (Sv, Sv g/kg, PW); positive into the box.
    inverse : bool
        Whether the rows come from an inverse (else only initial inflows).

    Returns
    -------
    str
        An HTML table; rows with ``|residual| > 2`` are flagged.
    """
    ratio_head = "adjusted/posterior std" if inverse else "adjusted/noise"
    head = ("box", "constraint", "initial", "adjusted", "noise", ratio_head, "unit")
    rows = [f"<div style='overflow-x:auto'><table style='{TABLE_STYLE}'><tr>"
            + "".join(f"<th style='{HEAD}white-space:nowrap'>{h}</th>" for h in head) + "</tr>"]
    # judged against what the estimate can achieve, sqrt(diag(N - E P E^T)) (Wunsch 1996,
    # ch. 3); without an inverse the initial inflow over the noise
    ratio = budget.posterior_normalized_residual if inverse else budget.normalized_residual
    for k, (box, constraint) in enumerate(budget.rows):
        r = float(ratio[k])
        flag = math.isfinite(r) and abs(r) > LARGE_RESIDUAL
        style = " style='background:#fde2c8'" if flag else ""
        noise = float(budget.noise[k])
        rows.append(
            f"<tr{style}><td style='{CELL}white-space:nowrap'>{html.escape(box)}</td>"
            f"<td style='{CELL}white-space:nowrap'>{html.escape(constraint)}</td>"
            f"<td style='{NUM}'>{_fmt(float(budget.initial[k]))}</td>"
            f"<td style='{NUM}'>{_fmt(float(budget.adjusted[k])) if inverse else '–'}</td>"
            f"<td style='{NUM}'>{f'{noise:.2f}' if math.isfinite(noise) else '–'}</td>"
            f"<td style='{NUM}'>{_fmt(r)}</td>"
            f"<td style='{CELL}white-space:nowrap'>{html.escape(budget.units[k])}</td></tr>"
        )
    rows.append("</table></div>")
    note = ("" if inverse else "<div style='font-size:11px;color:#555'>No inverse: the "
            "initial net mass inflow of each class (Sv, positive into the box).</div>")
    return "".join(rows) + note


def section_numbers_html(summary: pd.DataFrame) -> str:
    """Net, heat, freshwater and overturning of each section with errors.

    Parameters
    ----------
    summary : DataFrame
        The section_summary table (``report.summary_table``).

    Returns
    -------
    str
        An HTML table.
    """
    items = (
        ("net (Sv)", "net_sv", "net_err_sv", 2),
        ("heat (PW)", "heat_pw", "heat_err_pw", 3),
        ("freshwater (Sv)", "freshwater_sv", "freshwater_err_sv", 3),
        ("overturning, depth (Sv)", "overturning_sv", "overturning_err_sv", 2),
        ("overturning, density (Sv)", "overturning_density_sv", "overturning_density_err_sv", 2),
    )
    rows = [f"<table style='{TABLE_STYLE}'><tr><th style='{HEAD}'></th>"
            + "".join(f"<th style='{HEAD}'>{html.escape(str(s))}</th>"
                      for s in summary["section"]) + "</tr>"]
    for label, col, err, digits in items:
        cells = "".join(
            f"<td style='{NUM}'>{_pm(float(row[col]), float(row[err]), digits)}</td>"
            for _, row in summary.iterrows()
        )
        rows.append(f"<tr><td style='{CELL}'>{label}</td>{cells}</tr>")
    rows.append("</table>")
    return "".join(rows)


def cautions_html(cautions: list[str], notes: list[str] | None = None) -> str:
    """The cautions a scientist should read before quoting a number.

    Parameters
    ----------
    cautions : list of str
        Texts of the study's cautions (``[kind] message``).
    notes : list of str, optional
        Workbench notes (autosave problems, a resumed session).

    Returns
    -------
    str
        An HTML list.
    """
    items = [f"<li>{html.escape(c)}</li>" for c in cautions]
    items += [f"<li><i>{html.escape(n)}</i></li>" for n in notes or []]
    if not items:
        return "<div style='font-size:12px'>No cautions.</div>"
    return ("<ul style='font-size:12px;margin:2px 0;padding-left:18px'>"
            + "".join(items) + "</ul>")
