"""Paper-ready tables: the four §7 tables as LaTeX (booktabs + siunitx) and Markdown.

The tables hold the same rows as the CSV files of :mod:`sectionkit.tables`
(they are built from the same DataFrames) but are rounded for print:

**Rounding rule.** A value with an error is quoted to the decimal place of
the first significant digit of its error, or of the second one when that
first digit is 1 (``12.3456 ± 0.234 -> 12.3 ± 0.2``, ``12.3456 ± 0.134 ->
12.35 ± 0.13``); the error is rounded to the same place. Rounding is half
away from zero on the decimal representation of the number. A value
without an error (no inverse, a prior-free quantity) gets a fixed precision
per unit (:data:`FIXED_DECIMALS`: 0.1 Sv, 0.01 Sv for freshwater, 0.01 PW,
1 mm s^-1, 1 km^2, ...).

Each table has a caption stating the reference choices (global reference,
number of per-pair overrides, bottom-triangle rule) and the inverse (solver,
constraints, priors and noise) or that no inverse was run. Output is
deterministic: rerunning a study writes byte-identical files.

LaTeX needs ``\\usepackage{booktabs,siunitx,longtable}`` in the preamble.

Every function here that takes ``study`` and ``results`` takes a
:class:`~sectionkit.study.Study` and the :class:`~sectionkit.study.Results` it
solved; their docstrings list only the other parameters.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sectionkit.config import SOLVER_DISPLAY
from sectionkit.geostrophy import ReferenceChoice
from sectionkit.labels import split_pair_label
from sectionkit.layers import (
    class_display_name,
    constraint_display_name,
    sigma_label,
    sigma_symbol,
)
from sectionkit.operator import SALINITY_NAMES
from sectionkit.study import NET_MASS_HEAT_TOLERANCE, Results, Study
from sectionkit.tables import tables
from sectionkit.tracers import TOTAL, split_output_name

#: Decimals quoted for a value without an error, by unit key.
FIXED_DECIMALS: dict[str, int] = {
    "Sv": 1,
    "freshwater Sv": 2,
    "PW": 2,
    "Sv g/kg": 2,
    "m/s": 3,
    "cm/s": 1,
    "km2": 0,
    "km": 1,
    "deg": 2,
    "dbar": 0,
    "1": 2,
    "kmol/s": 0,
}
#: Most decimals ever quoted (guards against a vanishing error).
MAX_DECIMALS = 8
#: Tables with more rows than this are written as ``longtable``.
LONG_TABLE_ROWS = 30

_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
}

# unit key -> (LaTeX, Markdown)
_UNITS: dict[str, tuple[str, str]] = {
    "Sv": ("Sv", "Sv"),
    "PW": ("PW", "PW"),
    "Sv g/kg": (r"Sv\,g\,kg$^{-1}$", "Sv g kg⁻¹"),
    "m/s": (r"m\,s$^{-1}$", "m s⁻¹"),
    "cm/s": (r"cm\,s$^{-1}$", "cm s⁻¹"),
    "km2": (r"km$^{2}$", "km²"),
    "km": ("km", "km"),
    "degE": (r"$^{\circ}$E", "°E"),
    "degN": (r"$^{\circ}$N", "°N"),
    "dbar": ("dbar", "dbar"),
    "kg/m3": (r"kg\,m$^{-3}$", "kg m⁻³"),
    "1": ("", ""),
    "kmol/s": (r"kmol\,s$^{-1}$", "kmol s⁻¹"),
}


# --------------------------------------------------------------------------- rounding
def _leading_digit_and_exponent(x: float) -> tuple[int, int]:
    """First significant digit and decimal exponent of ``x`` itself (not of a rounded ``x``).

    ``0.019993`` gives ``(1, -2)``: its first significant digit is 1, so it is
    quoted with two significant digits (``0.020``), not rounded first to
    ``0.02`` and quoted with one.
    """
    mantissa, exponent = f"{abs(x):.15e}".split("e")
    return int(mantissa[0]), int(exponent)


def error_decimals(error: float) -> int | None:
    """Decimal place at which a value with this error is quoted.

    Parameters
    ----------
    error : float
        One standard deviation, in the value's unit.

    Returns
    -------
    int or None
        Number of decimals (negative for tens, hundreds, ...): that of the
        error's first significant digit, one more when that digit is 1.
        None when the error is missing, zero or not finite.
    """
    if error is None or not np.isfinite(error) or error <= 0:
        return None
    lead, exponent = _leading_digit_and_exponent(error)
    decimals = -exponent + (1 if lead == 1 else 0)
    return min(decimals, MAX_DECIMALS)


def format_fixed(value: float, decimals: int) -> str:
    """A number rounded half away from zero to ``decimals`` places.

    Parameters
    ----------
    value : float
        The number, any unit.
    decimals : int
        Decimal places; negative rounds to tens, hundreds, ...

    Returns
    -------
    str
        ASCII text such as ``-12.35`` or ``1230``; an empty string for NaN.
        A result that rounds to zero never carries a minus sign.
    """
    if value is None or not np.isfinite(value):
        return ""
    quantum = Decimal(1).scaleb(-decimals)
    rounded = Decimal(repr(float(value))).quantize(quantum, rounding=ROUND_HALF_UP)
    if rounded == 0:
        rounded = abs(rounded)
    if decimals < 0:
        return f"{int(rounded):d}"
    return f"{rounded:.{decimals}f}"


def round_with_error(
    value: float, error: float | None, unit: str = "Sv"
) -> tuple[str, str | None]:
    """Round a value and its error for print.

    Parameters
    ----------
    value : float
        The value, in ``unit``.
    error : float or None
        Its standard deviation, in ``unit``; None or NaN when there is none.
    unit : str
        Unit key of :data:`FIXED_DECIMALS`, used only without an error.

    Returns
    -------
    value_text : str
        The rounded value ('' for NaN).
    error_text : str or None
        The rounded error, or None without one.

    Examples
    --------
    >>> round_with_error(12.3456, 0.234)
    ('12.3', '0.2')
    >>> round_with_error(12.3456, 0.134)
    ('12.35', '0.13')
    >>> round_with_error(12.3456, None, "PW")
    ('12.35', None)
    """
    decimals = error_decimals(error) if error is not None else None
    if decimals is None or not np.isfinite(value):
        return format_fixed(value, FIXED_DECIMALS.get(unit, 2)), None
    return format_fixed(value, decimals), format_fixed(error, decimals)


def format_with_error(
    value: float, error: float | None, unit: str = "Sv", pm: str = " ± "
) -> str:
    """``value ± error`` rounded by the rule of this module.

    Parameters
    ----------
    value : float
        The value, in ``unit``.
    error : float or None
        Its standard deviation, in ``unit``.
    unit : str
        Unit key of :data:`FIXED_DECIMALS` (used without an error).
    pm : str
        Separator between value and error.

    Returns
    -------
    str
        E.g. ``'12.3 ± 0.2'``, or the value alone without an error.
    """
    v, e = round_with_error(value, error, unit)
    return v if e is None else f"{v}{pm}{e}"


# --------------------------------------------------------------------------- markup
def latex_escape(text: str) -> str:
    """Escape LaTeX special characters in a name (section, class, box).

    Parameters
    ----------
    text : str
        Plain text.

    Returns
    -------
    str
        Text safe inside a LaTeX paragraph or table cell.
    """
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in str(text))


def markdown_escape(text: str) -> str:
    """Plain ``text`` with ``|``, ``\\``, ``*``, ``_`` and backticks escaped for a Markdown cell."""
    out = str(text)
    for ch in ("\\", "|", "*", "_", "`"):
        out = out.replace(ch, "\\" + ch)
    return out


_TEX_UNICODE = {
    "–": "--",
    "—": "---",
    "×": r"$\times$",
    "±": r"$\pm$",
    "°": r"$^{\circ}$",
    "⁻³": r"$^{-3}$",
    "⁻¹": r"$^{-1}$",
    "ρ₀": r"$\rho_0$",
    "σ₀": r"$\sigma_0$",
}


def _tex_text(text: str) -> str:
    """Replace the Unicode symbols used in prose by their LaTeX forms (pdfLaTeX-safe)."""
    for uni, tex in _TEX_UNICODE.items():
        text = text.replace(uni, tex)
    return text


def _unit(key: str, tex: bool) -> str:
    return _UNITS[key][0 if tex else 1]


def _num(x: float) -> str:
    """A configured number as written (no float noise): 0.02, 1500, 26.8."""
    return f"{float(x):.10g}"


def _interface_text(sigma: float, p_ref: float, tex: bool) -> str:
    if not np.isfinite(sigma):
        return "---" if tex else "—"
    return sigma_label(sigma, p_ref, tex)


@dataclass
class Cell:
    """One table cell: a number (with optional error) or text in both markups.

    Attributes
    ----------
    value : str
        Rounded number for numeric cells ('' when missing).
    error : str or None
        Rounded error, or None.
    latex, markdown : str
        Text of a text cell in each markup (numeric cells leave them empty).
    """

    value: str = ""
    error: str | None = None
    latex: str = ""
    markdown: str = ""
    numeric: bool = True

    @classmethod
    def text(cls, plain: str, latex: str | None = None, markdown: str | None = None) -> Cell:
        """A text cell; names are escaped unless markup is given explicitly."""
        return cls(
            latex=latex_escape(plain) if latex is None else latex,
            markdown=markdown_escape(plain) if markdown is None else markdown,
            numeric=False,
        )

    @classmethod
    def number(cls, value: float, error: float | None = None, unit: str = "Sv") -> Cell:
        """A numeric cell rounded by :func:`round_with_error`."""
        v, e = round_with_error(value, error, unit)
        return cls(value=v, error=e)

    def render(self, tex: bool) -> str:
        """The cell in LaTeX (siunitx S column) or Markdown."""
        if not self.numeric:
            return self.latex if tex else self.markdown
        if not self.value:
            return "{---}" if tex else "—"
        if self.error is None:
            return self.value
        if tex:
            return f"{{{self.value} $\\pm$ {self.error}}}"
        return f"{self.value} ± {self.error}"


@dataclass
class Column:
    """A table column: header text in both markups and whether it holds numbers."""

    latex: str
    markdown: str
    numeric: bool = True

    @classmethod
    def plain(cls, text: str, numeric: bool = True) -> Column:
        """A column whose header reads the same in both markups."""
        return cls(text, text, numeric)


@dataclass
class PaperTable:
    """One formatted table.

    Attributes
    ----------
    key : str
        Label suffix and the CSV it mirrors.
    title : str
        Short title (first sentence of the caption), plain text.
    caption_latex, caption_markdown : str
        Full caption in each markup.
    columns : list of Column
    rows : list of list of Cell
    empty_note : str
        Plain text shown instead of rows when there are none.
    """

    key: str
    title: str
    caption_latex: str
    caption_markdown: str
    columns: list[Column]
    rows: list[list[Cell]] = field(default_factory=list)
    empty_note: str = ""


# --------------------------------------------------------------------------- captions
def _reference_phrase(ref: ReferenceChoice, tex: bool) -> str:
    """A reference choice in words (``ReferenceChoice`` of the configuration)."""
    if ref.kind == "pressure":
        return f"level of no motion at {_num(ref.pressure)} dbar"
    if ref.kind == "bottom":
        return "level of no motion at the deepest common level"
    if ref.kind == "isopycnal":
        return (f"level of no motion on the {sigma_symbol(ref.sigma_p_ref, tex)} "
                f"= {_num(ref.sigma)} {_unit('kg/m3', tex)} isopycnal")
    pm = r"$\pm$" if tex else "±"
    return (f"known velocity {_num(ref.velocity)} {pm} {_num(ref.velocity_error)} "
            f"{_unit('m/s', tex)} at {_num(ref.pressure)} dbar")


_TRIANGLE_PHRASE = {
    "constant": "velocity held constant below the deepest common level",
    "zero": "zero velocity below the deepest common level",
    "shear": "shear extrapolated linearly below the deepest common level",
}
_SOLVER_PHRASE = {key: name + (" estimate" if key == "gauss-markov" else "")
                  for key, name in SOLVER_DISPLAY.items()}


def reference_description(study: Study, results: Results, tex: bool = False) -> str:
    """Sentence on the reference choices: global reference, overrides, bottom triangles.

    Parameters
    ----------
    study : Study
        The study (its configuration holds the choices).
    results : Results
        Its results (references actually used).
    tex : bool
        LaTeX markup when True, Markdown/plain text otherwise.

    Returns
    -------
    str
    """
    cfg = study.config
    esc = latex_escape if tex else markdown_escape
    text = f"Reference: {_reference_phrase(cfg.reference, tex)}"
    order = {name: k for k, name in enumerate(cfg.section_names())}

    def pair_key(label: str) -> tuple:
        section, k = split_pair_label(label)
        return (order.get(section, len(order)), section, -1 if k is None else k, label)

    overrides = {k: cfg.overrides[k] for k in sorted(cfg.overrides, key=pair_key)}
    n = len(overrides)
    if n == 0:
        text += " for every pair (no overrides)"
    else:
        text += f" with {n} pair override{'s' if n != 1 else ''}"
        if n <= 3:
            listed = "; ".join(f"{esc(k)}: {_reference_phrase(v, tex)}"
                               for k, v in overrides.items())
            text += f" ({listed})"
    shallower = 0
    for name, op in study.operators.items():
        ref = results.references[name]
        for k, label in enumerate(op.pair_labels):
            choice = cfg.reference_for(label)
            if choice.kind == "pressure" and ref.pressure[k] < float(choice.pressure) - 1e-6:
                shallower += 1
    if shallower:
        text += (f"; in {shallower} pair{'s' if shallower != 1 else ''} the reference pressure "
                 "lies below the deepest common level, which was used instead")
    text += f". Bottom triangles: {_TRIANGLE_PHRASE.get(cfg.bottom_triangle, cfg.bottom_triangle)}."
    stresses = {k: v for k, v in sorted(cfg.ekman_stress.items(),
                                        key=lambda kv: (order.get(kv[0], len(order)), kv[0]))
                if tuple(v) != (0.0, 0.0)}
    if stresses:
        nm2 = r"N\,m$^{-2}$" if tex else "N m⁻²"
        listed = "; ".join(f"{esc(k)} ({_num(v[0])}, {_num(v[1])}) {nm2}"
                           for k, v in stresses.items())
        text += (f" Ekman transport in the top {_num(cfg.ekman_depth)} m from wind stress "
                 f"(east, north): {listed}.")
    return text


def _direct_phrase(study: Study, tex: bool) -> str:
    """How direct velocity profiles entered (empty when none did)."""
    adcp = study.config.adcp
    pairs = sum(int(np.isfinite(d.velocity).sum()) for d in study.direct.values())
    if adcp is None or not pairs:
        return ""
    span = (f"{_num(adcp.pressure_range[0])}–{_num(adcp.pressure_range[1])} dbar"
            if not tex else f"{_num(adcp.pressure_range[0])}--{_num(adcp.pressure_range[1])} dbar")
    role = ("the prior means of their reference velocities (standard deviation the stated "
            f"error {_num(adcp.error)} {_unit('m/s', tex)} combined with the standard error of "
            "the average)" if adcp.use == "prior" else "their known reference velocities")
    return (f"; direct velocity profiles (LADCP/ADCP), rotated into the section normal and "
            f"averaged over {span}, give {pairs} pairs {role}")


def inverse_description(study: Study, results: Results, tex: bool = False) -> str:
    """Sentence on the inverse: solver, constraints, priors, noise, known transports.

    Parameters
    ----------
    study : Study
        The study.
    results : Results
        Its results (the fitted solver gives the SVD rank used).
    tex : bool
        LaTeX markup when True.

    Returns
    -------
    str
        ``'No inverse: initial budgets ...'`` when none was run.
    """
    inv = study.config.inverse
    if inv is None or results.inverse is None:
        return "No inverse: initial budgets (adjusted values equal initial ones; no errors)."
    esc = latex_escape if tex else markdown_escape
    pm = r"$\pm$" if tex else "±"
    percent = r"\%" if tex else "%"
    solver = _SOLVER_PHRASE.get(inv.solver, esc(inv.solver))
    if inv.solver == "svd":
        used = results.inverse.rank
        total = f" of {len(results.inverse.scaled_singular_values)}"
        rule = "" if inv.rank else ", chosen where the scaled singular values exceed 1"
        solver += f" (rank {used}{total}{rule})"
    text = f"Inverse: {solver} conserving {' and '.join(inv.conserve)}"
    priors = [f"{_num(inv.prior_velocity)} {_unit('m/s', tex)} (reference velocity)"]
    if inv.prior_diapycnal > 0 and study.config.interfaces:
        priors.append(f"{_num(inv.prior_diapycnal)} Sv (diapycnal transfer per interface)")
    if results.layout.ekman:
        priors.append(f"{_num(100 * inv.prior_ekman)}{percent} (Ekman transport)")
    text += "; prior standard deviations " + ", ".join(priors)
    noise = [f"{_num(inv.noise_total)} Sv (total mass)"]
    if inv.noise_layer:
        names = ", ".join(esc(class_display_name(n)) for n in study.config.layer_names) \
            or "classes"
        noise.append(f"{', '.join(_num(x) for x in inv.noise_layer)} Sv ({names})")
    text += "; noise " + ", ".join(noise)
    if inv.known:
        listed = "; ".join(f"{esc(k.name)} {_num(k.transport)} {pm} {_num(k.noise)} Sv "
                           f"({esc(class_display_name(k.layer))})" for k in inv.known)
        text += f"; known transports {listed}"
    if inv.section_net:
        listed = "; ".join(f"{esc(n.section)} {_num(n.transport)} {pm} {_num(n.noise)} Sv"
                           for n in inv.section_net)
        text += f"; net transport constrained across {listed}"
    if inv.noise_salt:
        text += ("; salt-anomaly noise "
                 + ", ".join(_num(x) if x > 0 else "automatic" for x in inv.noise_salt)
                 + " Sv g/kg")
    text += _direct_phrase(study, tex)
    text += ". Errors are one posterior standard deviation."
    return text


def study_setup(study: Study, results: Results, tex: bool = False) -> str:
    """The study setup (references, bottom triangles, Ekman, inverse), said once for all tables."""
    text = " ".join([reference_description(study, results, tex),
                     inverse_description(study, results, tex)]).strip()
    return _tex_text(text) if tex else text


def _caption(first: str, body: str, tex: bool) -> str:
    """A table caption: its title, what it shows and the pointer to the setup note."""
    text = " ".join([first, body, "Setup: see the note under the tables."]).strip()
    return _tex_text(text) if tex else text


def _table(key: str, title: str, describe: Callable[[bool], str], columns: list[Column],
           rows: list[list[Cell]], **kwargs: Any) -> PaperTable:
    """A table captioned, in both markups, by ``title``, ``describe(tex)`` and the setup note."""
    return PaperTable(key, title, _caption(title, describe(True), True),
                      _caption(title, describe(False), False), columns, rows, **kwargs)


def _both(fn, *args) -> tuple[str, str]:
    return fn(*args, True), fn(*args, False)


# --------------------------------------------------------------------------- tables
def _err(value: float) -> float | None:
    return None if value is None or not np.isfinite(value) else float(value)


def _class_table(df: pd.DataFrame, study: Study, results: Results) -> PaperTable:
    title = "Volume transport by density class across each section."
    inverse = results.inverse is not None

    def describe(tex: bool) -> str:
        sigma = r"$\sigma_n$" if tex else "σₙ"
        rho0 = r"$\rho_0$" if tex else "ρ₀"
        return ("These are volume transports; the inverse balances mass transports "
                f"(divided by {rho0} = 1025 {_unit('kg/m3', tex)}), which differ from them "
                "by the density variations within each class. "
                + ("Initial values use the chosen references; adjusted values include the "
                   "inverse's reference-velocity adjustments. " if inverse else
                   "Values use the chosen references (no inverse). ")
                + "Transports are in the section's own frame (positive to the left of "
                "increasing station order). Class bounds are potential density anomalies "
                f"({_unit('kg/m3', tex)}), {sigma} referenced to n × 1000 dbar; the lighter "
                "bound is the top of the class. Area is the cross-sectional area of the class.")

    cols = [
        Column.plain("Section", False),
        Column.plain("Class", False),
        Column(f"Lighter bound ({_unit('kg/m3', True)})",
               f"Lighter bound ({_unit('kg/m3', False)})", False),
        Column(f"Denser bound ({_unit('kg/m3', True)})",
               f"Denser bound ({_unit('kg/m3', False)})", False),
        Column(f"Area ({_unit('km2', True)})", f"Area ({_unit('km2', False)})"),
        Column("Initial volume (Sv)" if inverse else "Volume (Sv)",
               "Initial volume (Sv)" if inverse else "Volume (Sv)"),
    ]
    if inverse:
        cols.append(Column.plain("Adjusted volume (Sv)"))
    rows = []
    for r in df.rename(columns={"class": "class_name"}).itertuples(index=False):
        row = [
            Cell.text(r.section),
            Cell.text(class_display_name(r.class_name)),
            Cell.text("", *_both(_interface_text, r.sigma_top, r.p_ref_top)),
            Cell.text("", *_both(_interface_text, r.sigma_bottom, r.p_ref_bottom)),
            Cell.number(r.area_km2, None, "km2"),
            Cell.number(r.initial_sv, None, "Sv"),
        ]
        if inverse:
            row.append(Cell.number(r.adjusted_sv, _err(r.adjusted_err_sv), "Sv"))
        rows.append(row)
    return _table("class_transports", title, describe, cols, rows)


def _pair_table(df: pd.DataFrame, study: Study, results: Results) -> PaperTable:
    inverse = results.inverse is not None
    title = ("Reference level and reference-velocity adjustment of each station pair."
             if inverse else "Reference level of each station pair.")

    def describe(tex: bool) -> str:
        body = ("Pair k lies between the two stations named; position is the pair mid-point; "
                "the reference pressure is the level of the reference actually used (the "
                "deepest common level where the chosen one lies deeper).")
        if inverse:
            body += (" The adjustment is added to the velocity at every level, positive to the "
                     "left of increasing station order.")
        return body

    cols = [
        Column.plain("Section", False),
        Column.plain("Pair"),
        Column.plain("Stations", False),
        Column(f"Longitude ({_unit('degE', True)})", f"Longitude ({_unit('degE', False)})"),
        Column(f"Latitude ({_unit('degN', True)})", f"Latitude ({_unit('degN', False)})"),
        Column.plain("Spacing (km)"),
        Column.plain("Reference", False),
        Column.plain("Reference pressure (dbar)"),
    ]
    if inverse:
        cols.append(Column(f"Adjustment ({_unit('cm/s', True)})",
                           f"Adjustment ({_unit('cm/s', False)})"))
    rows = []
    for r in df.itertuples(index=False):
        row = [
            Cell.text(r.section),
            Cell(value=str(int(r.pair))),
            Cell.text(f"{r.first_station}–{r.second_station}",
                      f"{latex_escape(str(r.first_station))}--"
                      f"{latex_escape(str(r.second_station))}"),
            Cell.number(r.lon, None, "deg"),
            Cell.number(r.lat, None, "deg"),
            Cell.number(r.distance_km, None, "km"),
            Cell.text(_REFERENCE_KIND_TEXT.get(str(r.ref_kind), str(r.ref_kind))),
            Cell.number(r.ref_pressure, None, "dbar"),
        ]
        if inverse:  # m s^-1 in the CSV, cm s^-1 in print
            err = _err(r.adjustment_err_m_s)
            row.append(Cell.number(100.0 * r.adjustment_m_s,
                                   None if err is None else 100.0 * err, "cm/s"))
        rows.append(row)
    return _table("pair_adjustments", title, describe, cols, rows)


_ROW_UNITS = {"Sv": "Sv", "Sv g/kg": "Sv g/kg", "PW": "PW"}
_REFERENCE_KIND_TEXT = {"pressure": "pressure", "bottom": "deepest common",
                        "isopycnal": "isopycnal", "velocity": "known velocity"}


def _box_table(df: pd.DataFrame, study: Study, results: Results) -> PaperTable:
    title = "Box constraints before and after the inverse."

    def describe(tex: bool) -> str:
        return ("Net inflow into each box (positive in), initial and adjusted, with the "
                "constraint's a priori noise; the normalized residual is adjusted / noise, and "
                "the last column judges the adjusted inflow against the residual std the "
                "estimate can achieve (the square root of the diagonal of N - E P E-transpose, "
                "Wunsch 1996). "
                "Values are rounded to the precision of the noise. Salt rows are salt-anomaly "
                f"transports of {SALINITY_NAMES[study.config.salt_salinity]} relative to each "
                "class's mean; a diapycnal transfer carries the mean of its two classes.")

    cols = [
        Column.plain("Box", False),
        Column.plain("Constraint", False),
        Column.plain("Unit", False),
        Column.plain("Initial"),
        Column.plain("Adjusted"),
        Column.plain("Noise"),
        Column.plain("Normalized residual"),
        Column.plain("Adjusted / posterior std"),
    ]
    rows = []
    for r in df.itertuples(index=False):
        posterior = getattr(r, "posterior_normalized_residual", float("nan"))
        unit = _ROW_UNITS.get(str(getattr(r, "unit", "Sv")), "Sv")
        decimals = error_decimals(r.noise)
        if decimals is None:
            decimals = FIXED_DECIMALS[unit]
        rows.append([
            Cell.text(r.box),
            Cell.text(constraint_display_name(str(r.constraint))),
            Cell.text("", _unit(unit, True), _unit(unit, False)),
            Cell(value=format_fixed(r.initial, decimals)),
            Cell(value=format_fixed(r.adjusted, decimals)),
            Cell(value=format_fixed(r.noise, decimals)),
            Cell(value=format_fixed(r.normalized_residual, FIXED_DECIMALS["1"])),
            Cell(value=format_fixed(posterior, FIXED_DECIMALS["1"])
                 if np.isfinite(posterior) else "–"),
        ])
    return _table("box_budget", title, describe, cols, rows,
                      empty_note="No inverse: there are no box constraints.")


def _summary_table(df: pd.DataFrame, study: Study, results: Results) -> PaperTable:
    title = "Section totals."
    flagged = [str(r.section) for r in df.itertuples(index=False)
               if np.isfinite(r.net_mass_sv) and abs(r.net_mass_sv) > NET_MASS_HEAT_TOLERANCE]

    def describe(tex: bool) -> str:
        esc = latex_escape if tex else markdown_escape
        body = ("Net volume transport and net mass transport divided by ρ₀ = 1025 kg m⁻³; "
                "heat is the "
                "potential-enthalpy transport; freshwater is relative to "
                + (f"the section's mean {SALINITY_NAMES[study.config.salt_salinity]}"
                   if study.config.reference_salinity is None
                   else f"{_num(study.config.reference_salinity)} g kg⁻¹ of "
                   + SALINITY_NAMES[study.config.salt_salinity])
                + "; overturning is the extreme of the streamfunction accumulated from the "
                "surface in depth and from the lightest class in density, both after removing "
                "the section's net transport as a uniform velocity over the section's area. "
                "Section frame: "
                "positive to the left of increasing station order.")
        if flagged:
            body += (f" For {', '.join(esc(s) for s in flagged)} the net mass transport exceeds "
                     f"{_num(NET_MASS_HEAT_TOLERANCE)} Sv, so the heat column there is a "
                     "temperature transport relative to 0 °C, not a heat transport.")
        return body

    cols = [
        Column.plain("Section", False),
        Column.plain("Net volume (Sv)"),
        Column(r"Net mass$/\rho_0$ (Sv)", "Net mass/ρ₀ (Sv)"),
        Column.plain("Heat (PW)"),
        Column.plain("Freshwater (Sv)"),
        Column.plain("Overturning, depth (Sv)"),
        Column.plain("Overturning, density (Sv)"),
    ]
    rows = []
    for r in df.itertuples(index=False):
        rows.append([
            Cell.text(r.section),
            Cell.number(r.net_sv, _err(r.net_err_sv), "Sv"),
            Cell.number(r.net_mass_sv, _err(getattr(r, "net_mass_err_sv", np.nan)), "Sv"),
            Cell.number(r.heat_pw, _err(r.heat_err_pw), "PW"),
            Cell.number(r.freshwater_sv, _err(r.freshwater_err_sv), "freshwater Sv"),
            Cell.number(r.overturning_sv, _err(r.overturning_err_sv), "Sv"),
            Cell.number(r.overturning_density_sv, _err(r.overturning_density_err_sv), "Sv"),
        ])
    return _table("section_summary", title, describe, cols, rows)


def _transfer_table(df: pd.DataFrame, study: Study, results: Results) -> PaperTable:
    """Diapycnal transfers and Ekman adjustments (the box-scale unknowns)."""
    title = "Diapycnal transfers and Ekman adjustments from the inverse."
    faces = study.config.interfaces
    names = study.config.layer_names

    def describe(tex: bool) -> str:
        return ("Transfer across each interface inside each box, positive from the lighter "
                "to the denser class (Sv), and the fractional adjustment of each section's "
                "Ekman transport, with prior and posterior standard deviations and the "
                "diagonal of the resolution matrix (1: fully determined by the constraints; "
                "0: the prior alone).")

    cols = [
        Column.plain("Unknown", False),
        Column.plain("Between", False),
        Column.plain("Prior std"),
        Column.plain("Estimate"),
        Column.plain("Resolution"),
    ]
    rows = []
    for r in df.itertuples(index=False):
        if r.kind == "reference_velocity":
            continue
        if r.kind == "diapycnal_transfer":
            n = int(str(r.unknown).rsplit(":W", 1)[1])
            lighter, denser = class_display_name(names[n]), class_display_name(names[n + 1])
            between = f"{lighter} / {denser}"
            between_tex = f"{latex_escape(lighter)} / {latex_escape(denser)}"
            between_md = f"{markdown_escape(lighter)} / {markdown_escape(denser)}"
            label = f"W across {_interface_text(faces[n].sigma, faces[n].p_ref, False)}"
            label_tex = (f"$W$ across {_interface_text(faces[n].sigma, faces[n].p_ref, True)}")
            box = str(r.unknown).rsplit(":W", 1)[0]
            unit = "Sv"
            rows.append([
                Cell.text(f"{box}: {label}", f"{latex_escape(box)}: {label_tex}",
                          f"{markdown_escape(box)}: {label}"),
                Cell.text(between, between_tex, between_md),
                Cell.number(r.prior_std, None, unit),
                Cell.number(r.estimate, _err(r.posterior_std), unit),
                Cell(value=format_fixed(r.resolution, FIXED_DECIMALS["1"])),
            ])
        else:
            section = str(r.unknown).rsplit(":", 1)[0]
            rows.append([
                Cell.text(f"{section}: Ekman adjustment"),
                Cell.text(""),
                Cell(value=format_fixed(r.prior_std, FIXED_DECIMALS["1"])),
                Cell.number(r.estimate, _err(r.posterior_std), "1"),
                Cell(value=format_fixed(r.resolution, FIXED_DECIMALS["1"])),
            ])
    return _table("inverse_unknowns", title, describe, cols, rows,
                      empty_note="No diapycnal or Ekman unknowns in this inverse.")


def _property_table(study: Study, results: Results) -> PaperTable:
    """Bottle-tracer transports by class, with each section's total."""
    title = "Tracer transports by density class across each section."

    def describe(tex: bool) -> str:
        unit = _unit("kmol/s", tex)
        return (f"Transport of each bottle tracer ({unit}): in-situ density times "
                "concentration (µmol kg⁻¹) times the absolute velocity, integrated over the "
                "class, through the same operator as volume and salt; bottle profiles are "
                "PCHIP interpolations between good bottles (WOCE flags 2 and 6; 3, 7 and 8 "
                "with a caution), extended unchanged above the shallowest and below the "
                "deepest bottle. Section frame: positive to the left of increasing station "
                "order.")

    cols = [
        Column.plain("Section", False),
        Column.plain("Tracer", False),
        Column.plain("Class", False),
        Column(f"Initial ({_unit('kmol/s', True)})", f"Initial ({_unit('kmol/s', False)})"),
    ]
    inverse = results.inverse is not None
    if inverse:  # without an inverse, adjusted equals initial: no column of copies
        cols.append(Column(f"Adjusted ({_unit('kmol/s', True)})",
                           f"Adjusted ({_unit('kmol/s', False)})"))
    rows = []
    for name in results.tracers:
        sel = results.tracer_values(name)
        for k, label in enumerate(sel.keys):
            tracer, layer = split_output_name(label)
            row = [
                Cell.text(name),
                Cell.text(tracer),
                Cell.text("all classes" if layer == TOTAL else class_display_name(layer)),
                Cell.number(sel.initial[k], None, "kmol/s"),
            ]
            if inverse:
                row.append(Cell.number(sel.adjusted[k], _err(sel.error[k]), "kmol/s"))
            rows.append(row)
    return _table("property_transports", title, describe, cols, rows)


def paper_tables(study: Study, results: Results) -> list[PaperTable]:
    """The four §7 tables, rounded and captioned, in the order of DESIGN.md §7.

    Returns
    -------
    list of PaperTable
        Class transports, pair adjustments, box budget, section summary, and
        (when an inverse ran) its diapycnal transfers and Ekman adjustments,
        and (when tracers are configured) the tracer transports.
    """
    frames = tables(study, results)
    out = [
        _class_table(frames["class_transports.csv"], study, results),
        _pair_table(frames["pair_adjustments.csv"], study, results),
    ]
    if results.inverse is not None:  # inverse-only tables: nothing to show without one
        out.append(_box_table(frames["box_budget.csv"], study, results))
    out.append(_summary_table(frames["section_summary.csv"], study, results))
    if results.inverse is not None:
        out.append(_transfer_table(frames["inverse_unknowns.csv"], study, results))
    if results.tracers:
        out.append(_property_table(study, results))
    return out


# --------------------------------------------------------------------------- LaTeX
def _s_format(numbers: Sequence[str]) -> str:
    """siunitx ``table-format`` reserving room for every number of a column."""
    sign = False
    integer = 1
    decimals = 0
    for v in numbers:
        if not v:
            continue
        if v.startswith("-"):
            sign = True
            v = v[1:]
        whole, _, frac = v.partition(".")
        integer = max(integer, len(whole))
        decimals = max(decimals, len(frac))
    return f"S[table-format={'-' if sign else ''}{integer}.{decimals}]"


def _latex_layout(table: PaperTable) -> tuple[list[str], list[bool]]:
    """Column specifications and, per table column, whether it is split as value ± error.

    A numeric column holding errors becomes three columns: the value
    (decimal-aligned S column), the ``±`` sign, and the error (decimal-aligned),
    so values and errors line up whatever their number of decimals.
    """
    specs: list[str] = []
    split: list[bool] = []
    for j, col in enumerate(table.columns):
        cells = [row[j] for row in table.rows]
        if not col.numeric:
            specs.append("l")
            split.append(False)
            continue
        values = [c.value for c in cells if c.numeric]
        errors = [c.error for c in cells if c.numeric and c.error is not None]
        specs.append(_s_format(values))
        if errors:
            specs.append(r"@{\,}c@{\,}")
            specs.append(_s_format(errors))
        split.append(bool(errors))
    return specs, split


def _latex_row(row: Sequence[Cell], split: Sequence[bool]) -> str:
    parts = []
    for cell, three in zip(row, split, strict=True):
        if not three:
            parts.append(cell.render(True))
        elif cell.error is None:
            parts += [cell.render(True), "", ""]
        else:
            parts += [cell.value, r"$\pm$", cell.error]
    return " & ".join(parts) + r" \\"


def _latex_table(table: PaperTable, number: int) -> str:
    specs, split = _latex_layout(table)
    ncol = len(specs)
    heads = []
    for col, three in zip(table.columns, split, strict=True):
        if three:
            heads.append(rf"\multicolumn{{3}}{{c}}{{{col.latex}}}")
        else:
            heads.append(f"{{{col.latex}}}" if col.numeric else col.latex)
    header = " & ".join(heads) + r" \\"
    body = [_latex_row(row, split) for row in table.rows]
    if not body:
        body = [rf"\multicolumn{{{ncol}}}{{l}}{{\emph{{{latex_escape(table.empty_note)}}}}} \\"]
    label = f"tab:sectionkit-{table.key.replace('_', '-')}"
    colspec = "".join(specs)
    out = [f"% Table {number}: {table.key}.csv"]
    if len(table.rows) > LONG_TABLE_ROWS:
        out += [
            r"\begingroup",
            r"\small",
            rf"\begin{{longtable}}{{{colspec}}}",
            rf"\caption{{{table.caption_latex}}}\label{{{label}}} \\",
            r"\toprule",
            header,
            r"\midrule",
            r"\endfirsthead",
            rf"\multicolumn{{{ncol}}}{{l}}{{\emph{{Table \thetable, continued}}}} \\",
            r"\toprule",
            header,
            r"\midrule",
            r"\endhead",
            r"\midrule",
            rf"\multicolumn{{{ncol}}}{{r}}{{\emph{{continued on next page}}}} \\",
            r"\endfoot",
            r"\bottomrule",
            r"\endlastfoot",
            *body,
            r"\end{longtable}",
            r"\endgroup",
        ]
    else:
        out += [
            r"\begin{table}[htbp]",
            r"\centering",
            r"\small",
            rf"\caption{{{table.caption_latex}}}",
            rf"\label{{{label}}}",
            rf"\begin{{tabular}}{{{colspec}}}",
            r"\toprule",
            header,
            r"\midrule",
            *body,
            r"\bottomrule",
            r"\end{tabular}",
            r"\end{table}",
        ]
    return "\n".join(out) + "\n"


def to_latex(tables: Sequence[PaperTable], title: str = "", note: str = "") -> str:
    """All tables as one LaTeX fragment (booktabs rules, siunitx S columns).

    Parameters
    ----------
    tables : sequence of PaperTable
        From :func:`paper_tables`.
    title : str
        Study title, written in a comment.
    note : str
        LaTeX text of the study setup, printed once under the tables.

    Returns
    -------
    str
        ``\\input``-able LaTeX; needs booktabs, siunitx and longtable.
    """
    head = [
        f"% sectionkit paper tables: {title}".rstrip(),
        r"% Preamble needs: \usepackage{booktabs} \usepackage{siunitx} \usepackage{longtable}",
        "% (long tables are longtables: run LaTeX twice so their columns settle)",
        "% Values are quoted to the first significant digit of their error "
        "(two digits when it is 1).",
        "",
    ]
    parts = ["\n".join(head)]
    for n, t in enumerate(tables, start=1):
        parts.append(_latex_table(t, n))
    if note:
        parts.append("% Study setup, common to every table above\n"
                     rf"\paragraph{{Note on the tables.}} {note}" + "\n")
    return "\n".join(parts)


# --------------------------------------------------------------------------- Markdown
def _markdown_table(table: PaperTable, number: int) -> str:
    header = "| " + " | ".join(c.markdown for c in table.columns) + " |"
    align = "| " + " | ".join("---:" if c.numeric else ":---" for c in table.columns) + " |"
    lines = [f"**Table {number}.** {table.caption_markdown}", "", header, align]
    for row in table.rows:
        lines.append("| " + " | ".join(cell.render(False) for cell in row) + " |")
    if not table.rows:
        lines += ["", f"*{table.empty_note}*"]
    return "\n".join(lines) + "\n"


def to_markdown(tables: Sequence[PaperTable], title: str = "", note: str = "") -> str:
    """All tables as Markdown pipe tables with their captions.

    The parameters are those of :func:`to_latex`; here ``title`` is the
    heading and ``note`` is Markdown. Returns the Markdown text.
    """
    parts = [f"# {markdown_escape(title) or 'sectionkit'}: tables", ""]
    for n, t in enumerate(tables, start=1):
        parts.append(_markdown_table(t, n))
    if note:
        parts.append(f"**Note on the tables.** {note}\n")
    return "\n".join(parts)


def write_paper_tables(study: Study, results: Results, folder: str | Path) -> list[Path]:
    """Write ``tables.tex`` and ``tables.md`` (DESIGN.md §7) into ``folder``.

    ``folder`` is the output folder (the report's temporary folder during a batch
    run); returns the two files written.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tables = paper_tables(study, results)
    title = " ".join(study.config.title.split())  # one line: it goes into a comment
    tex = folder / "tables.tex"
    md = folder / "tables.md"
    tex.write_text(to_latex(tables, title, study_setup(study, results, True)), encoding="utf-8",
                   newline="\n")
    md.write_text(to_markdown(tables, title, study_setup(study, results, False)),
                  encoding="utf-8", newline="\n")
    return [tex, md]


__all__ = [
    "FIXED_DECIMALS",
    "Cell",
    "Column",
    "PaperTable",
    "error_decimals",
    "format_fixed",
    "format_with_error",
    "inverse_description",
    "latex_escape",
    "markdown_escape",
    "paper_tables",
    "reference_description",
    "round_with_error",
    "to_latex",
    "to_markdown",
    "write_paper_tables",
]
