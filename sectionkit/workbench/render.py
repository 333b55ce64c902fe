"""The workbench's tables as HTML, and its colour scale: no widgets, no physics.

Pure functions: each takes what
:class:`~sectionkit.workbench.model.WorkbenchState` hands out (a
:class:`ClassTransports`, a :class:`BoxBudget`, a section summary table, the
inverse's view, caution texts) and returns an HTML string. The interactive
figures are drawn by :mod:`sectionkit.workbench.plots`.
"""

from __future__ import annotations

import html
import math
from collections.abc import Mapping

import numpy as np
import pandas as pd

from sectionkit.layers import class_display_name
from sectionkit.workbench.snapshot import BoxBudget, ClassTransports, InverseView, LineDirection

TABLE_STYLE = (
    "border-collapse:collapse;font-size:12px;font-variant-numeric:tabular-nums;"
    "margin:2px 0 6px 0"
)
CELL = "padding:1px 8px;border-bottom:1px solid #ddd;"
NUM = CELL + "text-align:right;white-space:nowrap;"
HEAD = "padding:2px 8px;border-bottom:2px solid #888;text-align:left;font-weight:600;"
SCALE_PERCENTILE = 97.0  # the colour scale spans this percentile of |velocity|
MIN_SCALE = 0.5  # cm s^-1: the smallest colour-scale limit
LARGE_RESIDUAL = 2.0  # |adjusted / noise| above which a constraint row is flagged


def _fmt(value: float, digits: int = 2) -> str:
    return "–" if value is None or not math.isfinite(value) else f"{value:+.{digits}f}"


def _pm(value: float, error: float, digits: int = 2) -> str:
    if error is None or not math.isfinite(error):
        return _fmt(value, digits)
    return f"{_fmt(value, digits)} ± {error:.{digits}f}"


# ---------------------------------------------------------------- tables
def class_table_html(table: ClassTransports,
                     directions: Mapping[str, LineDirection] | None = None,
                     flagged: list[str] | None = None) -> str:
    """Class transports of every section, before and after the inverse, with errors.

    Parameters
    ----------
    table : ClassTransports
        Transports in Sv (section frame: positive to the left of increasing
        station order).
    directions : mapping of str -> LineDirection, optional
        What positive means for each line, written under its name.
    flagged : list of str, optional
        Classes whose inverse settings are new defaults (marked "new").

    Returns
    -------
    str
        An HTML table.
    """
    directions = directions or {}
    flagged = flagged or []
    after = "after inverse (Sv)" if table.inverse else "after (no inverse)"
    rows = [
        f"<table style='{TABLE_STYLE}'><tr><th style='{HEAD}'>section</th>"
        f"<th style='{HEAD}'>class</th><th style='{HEAD}'>initial (Sv)</th>"
        f"<th style='{HEAD}'>{after}</th><th style='{HEAD}'>change (Sv)</th></tr>"
    ]
    for s, section in enumerate(table.sections):
        d = directions.get(section)
        sign = (f"<br><span class='sk-direction' style='font-size:11px;color:#555'>"
                f"{html.escape(d.describe())}</span>" if d is not None else "")
        rows.append(f"<tr><td style='{CELL}' colspan='5'><b>{html.escape(section)}</b>"
                    f"{sign}</td></tr>")
        for i, layer in enumerate(table.layers):
            initial = float(table.initial[s, i])
            adjusted = float(table.adjusted[s, i])
            mark = (" <span class='sk-flag' style='color:#b35900' title='new class: inverse "
                    "settings are defaults'>new</span>" if layer in flagged else "")
            rows.append(
                f"<tr><td style='{CELL}'></td>"
                f"<td style='{CELL}'>{html.escape(class_display_name(layer))}{mark}</td>"
                f"<td style='{NUM}'>{_fmt(initial)}</td>"
                f"<td style='{NUM}'>{_pm(adjusted, float(table.error[s, i]))}</td>"
                f"<td style='{NUM}'>{_fmt(adjusted - initial)}</td></tr>"
            )
        total0 = float(table.initial[s].sum())
        total1 = float(table.adjusted[s].sum())
        rows.append(
            f"<tr><td style='{CELL}'></td><td style='{CELL}'><i>sum</i></td>"
            f"<td style='{NUM}'><i>{_fmt(total0)}</i></td>"
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
    ratio_head = "adjusted / posterior std" if inverse else "adjusted / noise"
    head = ("constraint (unit)", "initial", "adjusted", "noise", ratio_head)
    rows = [f"<div style='overflow-x:auto'><table style='{TABLE_STYLE}'><tr>"
            + "".join(f"<th style='{HEAD}'>{h}</th>" for h in head) + "</tr>"]
    # judged against what the estimate can achieve, sqrt(diag(N - E P E^T)) (Wunsch 1996,
    # ch. 3); without an inverse the initial inflow over the noise
    ratio = budget.posterior_normalized_residual if inverse else budget.normalized_residual
    current = None
    for k, (box, constraint) in enumerate(budget.rows):
        if box != current:  # one heading row per box keeps the table narrow
            current = box
            rows.append(f"<tr><td style='{CELL}' colspan='5'><b>{html.escape(box)}</b></td></tr>")
        r = float(ratio[k])
        flag = math.isfinite(r) and abs(r) > LARGE_RESIDUAL
        style = " style='background:#fde2c8'" if flag else ""
        noise = float(budget.noise[k])
        rows.append(
            f"<tr{style}><td style='{CELL}white-space:nowrap'>{html.escape(constraint)} "
            f"<span style='color:#777'>({html.escape(budget.units[k])})</span></td>"
            f"<td style='{NUM}'>{_fmt(float(budget.initial[k]))}</td>"
            f"<td style='{NUM}'>{_fmt(float(budget.adjusted[k])) if inverse else '–'}</td>"
            f"<td style='{NUM}'>{f'{noise:.2f}' if math.isfinite(noise) else '–'}</td>"
            f"<td style='{NUM}'>{_fmt(r)}</td></tr>"
        )
    rows.append("</table></div>")
    note = ("" if inverse else "<div style='font-size:11px;color:#555'>No inverse: the "
            "initial net mass inflow of each class (Sv, positive into the box).</div>")
    return "".join(rows) + note


def section_numbers_html(summary: pd.DataFrame,
                         directions: Mapping[str, LineDirection] | None = None) -> str:
    """Net, heat, freshwater and overturning of each section with errors.

    Parameters
    ----------
    summary : DataFrame
        The section_summary table (``report.summary_table``) with a
        ``heat_kind`` column ("heat transport" or "temperature transport").
    directions : mapping of str -> LineDirection, optional
        What positive means for each line, written under its name.

    Returns
    -------
    str
        An HTML table; beside a heat number whose line carries net mass the
        words "temperature transport".
    """
    directions = directions or {}
    items = (
        ("net volume (Sv)", "net_sv", "net_err_sv", 2),
        ("net mass / ρ₀ (Sv)", "net_mass_sv", "net_mass_err_sv", 2),
        ("heat (PW)", "heat_pw", "heat_err_pw", 3),
        ("freshwater (Sv)", "freshwater_sv", "freshwater_err_sv", 3),
        ("overturning, depth (Sv)", "overturning_sv", "overturning_err_sv", 2),
        ("overturning, density (Sv)", "overturning_density_sv", "overturning_density_err_sv", 2),
    )
    heads = []
    for s in summary["section"]:
        d = directions.get(str(s))
        sign = (f"<br><span style='font-weight:400;font-size:11px;color:#555'>"
                f"{html.escape(d.across)}</span>" if d is not None else "")
        heads.append(f"<th style='{HEAD}'>{html.escape(str(s))}{sign}</th>")
    rows = [f"<table style='{TABLE_STYLE}'><tr><th style='{HEAD}'></th>" + "".join(heads)
            + "</tr>"]
    for label, col, err, digits in items:
        cells = []
        for _, row in summary.iterrows():
            text = _pm(float(row[col]), float(row[err]), digits)
            if col == "heat_pw" and row.get("heat_kind") == "temperature transport":
                text += ("<span class='sk-heat-kind' style='display:block;white-space:normal;"
                         "color:#b35900;font-size:11px'"
                         f" title='net mass transport {float(row['net_mass_sv']):+.2f} Sv: the "
                         "number depends on the temperature scale'>temperature transport, net "
                         f"mass {float(row['net_mass_sv']):+.1f} Sv</span>")
            cells.append(f"<td style='{NUM}'>{text}</td>")
        rows.append(f"<tr><td style='{CELL}'>{label}</td>{''.join(cells)}</tr>")
    rows.append("</table>")
    return "".join(rows)


def transfers_html(view: InverseView) -> str:
    """Diapycnal transfers W ± posterior std with their resolution.

    Parameters
    ----------
    view : InverseView
        The inverse's estimates (W in Sv, positive from the lighter to the
        denser class).
    """
    if not view.transfers:
        return "<div style='font-size:12px'>No diapycnal transfers are solved for.</div>"
    rows = [f"<table style='{TABLE_STYLE}'><tr><th style='{HEAD}'>interface</th>"
            f"<th style='{HEAD}'>W (Sv, + light→dense)</th>"
            f"<th style='{HEAD}'>resolution</th></tr>"]
    for label, w, err, res in view.transfers:
        rows.append(f"<tr><td style='{CELL}white-space:nowrap'>{html.escape(label)}</td>"
                    f"<td style='{NUM}'>{_pm(w, err)}</td><td style='{NUM}'>{res:.2f}</td></tr>")
    rows.append("</table>")
    return "".join(rows)


def residuals_html(view: InverseView) -> str:
    """Constraint residuals before and after the inverse, each over its standard deviation.

    Parameters
    ----------
    view : InverseView
        ``before``: initial inflow / noise; ``after``: adjusted inflow /
        posterior residual std (dimensionless).
    """
    rows = [f"<table style='{TABLE_STYLE}'><tr><th style='{HEAD}'>constraint</th>"
            f"<th style='{HEAD}'>before / noise</th>"
            f"<th style='{HEAD}'>after / posterior std</th></tr>"]
    for k, label in enumerate(view.rows):
        b, a = float(view.before[k]), float(view.after[k])
        flag = math.isfinite(a) and abs(a) > LARGE_RESIDUAL
        style = " style='background:#fde2c8'" if flag else ""
        rows.append(f"<tr{style}><td style='{CELL}white-space:nowrap'>{html.escape(label)}</td>"
                    f"<td style='{NUM}'>{_fmt(b)}</td><td style='{NUM}'>{_fmt(a)}</td></tr>")
    rows.append("</table>")
    return "".join(rows)


# ---------------------------------------------------------------- colour scale
class ColourScale:
    """A symmetric colour-scale limit that changes only when it should.

    The limit spans the ``SCALE_PERCENTILE`` percentile of |value|. It is
    fixed while a control is dragged (so one colour means one speed during
    the drag), fixed for good when locked, and set again on request.

    Attributes
    ----------
    limit : float or None
        Current limit, in the unit of the values (None before the first use).
    locked : bool
        Whether the limit is kept whatever the values.
    """

    def __init__(self) -> None:
        self.limit: float | None = None
        self.locked = False

    @staticmethod
    def fit(values: np.ndarray) -> float:
        """The limit the values call for."""
        finite = np.abs(values[np.isfinite(values)])
        limit = float(np.percentile(finite, SCALE_PERCENTILE)) if finite.size else 1.0
        return max(limit, MIN_SCALE)

    def update(self, values: np.ndarray, *, dragging: bool) -> float:
        """The limit for a redraw of ``values``.

        Parameters
        ----------
        values : ndarray
            What is about to be drawn.
        dragging : bool
            Whether a control is being dragged (keeps the limit).
        """
        if self.limit is None or not (self.locked or dragging):
            self.limit = self.fit(values)
        return self.limit

    def reset(self, values: np.ndarray) -> float:
        """Fit the limit to ``values`` now (also when locked)."""
        self.limit = self.fit(values)
        return self.limit


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
