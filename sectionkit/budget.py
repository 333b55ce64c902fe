"""Section budgets as linear functionals of the unknowns.

Every reported number is ``value = initial + G x``, where ``x`` stacks the
unknowns of the inverse (reference-velocity adjustments of every pair, the
diapycnal transfers, the fractional Ekman adjustments). This module builds
``initial`` and ``G`` for each section's class transports, net transport,
heat (potential enthalpy) transport, freshwater transport and overturning, so
a posterior covariance ``P`` gives every error exactly as ``G P G^T``.

Reporting units: Sv (10^6 m^3 s^-1) for volume, mass (divided by rho0) and
freshwater; PW (10^15 W) for heat; Sv g/kg for salt.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from sectionkit.errors import ConfigError
from sectionkit.labels import parse_pair_label
from sectionkit.operator import QUANTITIES, SectionOperator
from sectionkit.outputs import REGISTRY, SCALE
from sectionkit.solvers import output_std

SV = SCALE["Sv"]  # m^3 s^-1 per Sverdrup (common practice)
PW = SCALE["PW"]  # W per petawatt
#: Reporting unit of each transported quantity's class transport (the registry's).
QUANTITY_UNIT = {q: REGISTRY[f"class_{q}_transport"].display for q in QUANTITIES}
QUANTITY_SCALE = {q: SCALE[unit] for q, unit in QUANTITY_UNIT.items()}
Q = {name: n for n, name in enumerate(QUANTITIES)}


@dataclass
class UnknownLayout:
    """Where each unknown sits in the state vector ``x``.

    Attributes
    ----------
    pair_slices : dict of str -> slice
        Reference-velocity adjustments (m s^-1) of each section's pairs.
    diapycnal : dict of (str, int) -> int
        Index of the transfer across interface ``n`` of box ``name`` (Sv).
    ekman : dict of str -> int
        Index of the fractional Ekman adjustment of a section (1).
    size : int
        Length of ``x``.
    labels : list of str
        Name of every unknown.
    """

    pair_slices: dict[str, slice]
    diapycnal: dict[tuple[str, int], int]
    ekman: dict[str, int]
    size: int
    labels: list[str]

    @property
    def pairs(self) -> dict[str, int]:
        """Number of pairs of every section."""
        return {name: sl.stop - sl.start for name, sl in self.pair_slices.items()}

    def pair_index(self, label: str, where: str = "pair") -> int:
        """Position in ``x`` of the adjustment of the pair ``"<section>:<k>"``.

        Raises
        ------
        ConfigError
            No such pair (the message names the valid range).
        """
        section, k = parse_pair_label(label, self.pairs, where)
        return self.pair_slices[section].start + k

    def section_adjustment(self, name: str, x: np.ndarray) -> tuple[np.ndarray, float]:
        """One section's share of a state vector.

        Parameters
        ----------
        name : str
            Section.
        x : ndarray (unknown,)
            Unknowns.

        Returns
        -------
        adjustment : ndarray (pair,)
            Reference-velocity adjustment of every pair, m s^-1.
        ekman_factor : float
            Factor on the section's Ekman transport, ``1 + x_ekman`` (1 when
            the section has no Ekman unknown), dimensionless.
        """
        x = np.asarray(x, dtype=float)
        k = self.ekman.get(name)
        return x[self.pair_slices[name]], 1.0 + (float(x[k]) if k is not None else 0.0)


def make_layout(
    operators: dict[str, SectionOperator],
    diapycnal_boxes: list[str] | None = None,
    n_interfaces: int = 0,
    ekman_sections: list[str] | None = None,
) -> UnknownLayout:
    """Lay out the unknowns: pairs of each section, then transfers, then Ekman factors.

    Parameters
    ----------
    operators : dict of str -> SectionOperator
        Section operators in configuration order.
    diapycnal_boxes : list of str, optional
        Boxes that get one transfer unknown per interface.
    n_interfaces : int
        Number of class interfaces.
    ekman_sections : list of str, optional
        Sections that get a fractional Ekman adjustment.
    """
    slices: dict[str, slice] = {}
    labels: list[str] = []
    start = 0
    for name, op in operators.items():
        slices[name] = slice(start, start + op.n_pair)
        labels += op.pair_labels
        start += op.n_pair
    dia: dict[tuple[str, int], int] = {}
    for box in diapycnal_boxes or []:
        for n in range(n_interfaces):
            dia[(box, n)] = start
            labels.append(f"{box}:W{n}")
            start += 1
    ek: dict[str, int] = {}
    for name in ekman_sections or []:
        ek[name] = start
        labels.append(f"{name}:ekman")
        start += 1
    return UnknownLayout(slices, dia, ek, start, labels)


@lru_cache(maxsize=8)
def depth_streamfunction_names(n_level: int) -> tuple[tuple[str, ...], dict[str, int]]:
    """Output names ``psi_depth:<k>`` of ``n_level`` levels and their positions (kept)."""
    names = tuple(f"psi_depth:{k}" for k in range(n_level))
    return names, {name: k for k, name in enumerate(names)}


class DepthStreamfunctionRows:
    """Gradient rows of the depth streamfunction of one section, built on demand.

    Row ``k`` is d(psi_depth:k)/dx: the level transports summed from the
    surface through level ``k`` (Sv per unknown), less the share ``frac[k]``
    of the whole column's sum (the net removed as a uniform velocity). Only
    the pair columns and the section's Ekman column are nonzero, so a few rows
    come from prefix sums of the compact (pair, level) areas without forming
    the (level, unknown) matrix, which :meth:`all_rows` builds when every row
    is asked for (a written dataset, every output's error).

    Parameters
    ----------
    level_area : ndarray (pair, level)
        Area of each pair's cells at each level, m^2 (transport per m s^-1).
    ekman_level : ndarray (level,)
        Ekman volume transport at each level for the section's Ekman
        transport, m^3 s^-1 (the derivative by its fractional adjustment).
    frac : ndarray (level,)
        Share of the section area above each level end (dimensionless).
    columns : slice
        The section's pairs in ``x``.
    ekman_column : int or None
        Position of the section's Ekman factor in ``x``; None without one.
    size : int
        Length of ``x``.
    """

    def __init__(self, level_area: np.ndarray, ekman_level: np.ndarray, frac: np.ndarray,
                 columns: slice, ekman_column: int | None, size: int) -> None:
        self.level_area = level_area
        self.frac = frac
        self.columns = columns
        self.ekman_column = ekman_column
        self.size = size
        self.n_level = frac.size
        self._ekman_cum = np.cumsum(ekman_level) / SV  # (level,)
        self._total: np.ndarray | None = None  # column sum of every pair, Sv per m s^-1

    def rows(self, levels: np.ndarray) -> np.ndarray:
        """Gradient rows of the given levels, (len(levels), unknown), Sv per unknown."""
        levels = np.asarray(levels, dtype=int)
        if self._total is None:
            self._total = self.level_area.sum(axis=-1) / SV
        out = np.zeros((levels.size, self.size))
        for n, k in enumerate(levels):
            above = self.level_area[:, : k + 1].sum(axis=-1) / SV
            out[n, self.columns] = above - self.frac[k] * self._total
        if self.ekman_column is not None:
            out[:, self.ekman_column] = (self._ekman_cum[levels]
                                         - self.frac[levels] * self._ekman_cum[-1])
        return out

    def all_rows(self) -> np.ndarray:
        """Every row, (level, unknown), Sv per unknown."""
        glevel = np.zeros((self.n_level, self.size))
        glevel[:, self.columns] = self.level_area.T
        gpsi = np.cumsum(glevel, axis=0) / SV
        if self.ekman_column is not None:
            gpsi[:, self.ekman_column] = self._ekman_cum
        return gpsi - np.outer(self.frac, gpsi[-1])

    def apply(self, x: np.ndarray) -> np.ndarray:
        """Rows times a state vector, ``G_psi x`` (level,), Sv."""
        x = np.asarray(x, dtype=float)
        level = x[self.columns] @ self.level_area  # (level,) m^3 s^-1
        psi = np.cumsum(level) / SV
        if self.ekman_column is not None:
            psi = psi + x[self.ekman_column] * self._ekman_cum
        return psi - self.frac * psi[-1]


class LinearOutputs:
    """Named outputs ``initial + gradient @ x`` in reporting units.

    Parameters
    ----------
    names : list of str
        One per output.
    initial : ndarray (output,)
        Value for x = 0, in each output's unit (``units``: Sv, PW, Sv g/kg, dbar,
        kmol/s).
    gradient : ndarray (output, unknown)
        Derivative with respect to every unknown, output unit per unknown unit
        (per m s^-1, Sv or 1; see :class:`UnknownLayout`); without ``lazy_rows``
        all of them, with it the first ``output - lazy_rows.n_level`` rows.
    units : list of str
        Display unit of each output (CF spelling: :func:`sectionkit.outputs.udunits`).
    lazy_rows : DepthStreamfunctionRows, optional
        The last outputs' rows, formed only when asked for (:meth:`rows`
        forms just the requested ones; :attr:`gradient` all of them).

    Attributes
    ----------
    names, initial, units
        As given.
    gradient : ndarray (output, unknown)
        Derivative of every output with respect to every unknown.
    """

    def __init__(self, names: list[str], initial: np.ndarray, gradient: np.ndarray,
                 units: list[str], lazy_rows: DepthStreamfunctionRows | None = None) -> None:
        self.names = names
        self.initial = initial
        self.units = units
        self._head = gradient
        self._lazy = lazy_rows
        self._full: np.ndarray | None = gradient if lazy_rows is None else None
        n_head = len(names) if lazy_rows is None else len(names) - lazy_rows.n_level
        self._position = {name: k for k, name in enumerate(self.names[:n_head])}
        self._tail: dict[str, int] = {}
        if lazy_rows is not None:
            tail_names, self._tail = depth_streamfunction_names(lazy_rows.n_level)
            if tuple(names[n_head:]) != tail_names:
                raise ValueError("the last output names must be the depth streamfunction's")
        self._n_head = n_head

    @property
    def gradient(self) -> np.ndarray:
        """Every output's derivative, (output, unknown); formed on first use."""
        if self._full is None:
            assert self._lazy is not None
            self._full = np.vstack([self._head, self._lazy.all_rows()])
        return self._full

    def rows(self, index: np.ndarray | list[int]) -> np.ndarray:
        """Gradient rows of the outputs at positions ``index``, (len(index), unknown)."""
        idx = np.atleast_1d(np.asarray(index, dtype=int))
        if self._full is not None:
            return self._full[idx]
        assert self._lazy is not None
        n_head = self._head.shape[0]
        idx = np.where(idx < 0, idx + len(self.names), idx)
        out = np.empty((idx.size, self._head.shape[1]))
        head = idx < n_head
        out[head] = self._head[idx[head]]
        if not head.all():
            out[~head] = self._lazy.rows(idx[~head] - n_head)
        return out

    def row(self, k: int) -> np.ndarray:
        """Gradient row of the output at position ``k``, (unknown,)."""
        return self.rows([k])[0]

    def value(self, x: np.ndarray | None = None) -> np.ndarray:
        """Outputs for unknowns ``x`` (x = 0 when None)."""
        if x is None:
            return self.initial
        if self._full is not None:
            return self.initial + self._full @ x
        assert self._lazy is not None
        return self.initial + np.concatenate([self._head @ x, self._lazy.apply(x)])

    def std(self, covariance: np.ndarray | None) -> np.ndarray:
        """Standard deviation of each output, sqrt(diag(G P G^T)); NaN without P."""
        if covariance is None:
            return np.full(len(self.names), np.nan)
        return output_std(self.gradient, covariance)

    def index(self, name: str) -> int:
        """Position of a named output."""
        k = self._position.get(name)
        if k is None:
            k = self._tail.get(name)
            if k is None:
                raise KeyError(f"no output named {name!r}") from None
            k += self._n_head
        return k


def class_transport_gradient(
    op: SectionOperator, quantity: str, layout: UnknownLayout, ekman: np.ndarray
) -> np.ndarray:
    """d(class transport)/dx of one quantity, in reporting units per unknown.

    Parameters
    ----------
    op : SectionOperator
        The section.
    quantity : str
        One of ``QUANTITIES``.
    layout : UnknownLayout
        Unknown layout.
    ekman : ndarray (pair,)
        Ekman volume transport of each pair, m^3 s^-1.

    Returns
    -------
    ndarray (class, unknown)
    """
    q = Q[quantity]
    scale = QUANTITY_SCALE[quantity]
    g = np.zeros((len(op.layer_names), layout.size))
    g[:, layout.pair_slices[op.name]] = op.area[q].T / scale
    if op.name in layout.ekman:
        g[:, layout.ekman[op.name]] = (ekman[:, None] * op.ekman_share[q]).sum(axis=0) / scale
    return g


def _check_pairs(op: SectionOperator, what: str, value: np.ndarray | float) -> None:
    """Refuse a per-pair argument whose last axis is not the section's pairs, naming both shapes."""
    shape = np.shape(value)
    if shape and shape[-1] != op.n_pair:
        raise ConfigError(f"{what} has shape {shape}, but section {op.name!r} has {op.n_pair} "
                          f"pairs: give a number or an array of shape (..., {op.n_pair}) with "
                          "the pairs last")


def _signed_extremum(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Value of largest magnitude along the last axis (sign kept) and its index."""
    k = np.argmax(np.abs(values), axis=-1)
    return np.take_along_axis(values, k[..., None], axis=-1)[..., 0], k


def level_end_pressure(pressure: np.ndarray) -> np.ndarray:
    """Pressure where the depth streamfunction accumulated through each level ends, dbar.

    A level's integration weight covers half the segment above it and half
    the segment below (trapezoid), so the sum from the surface through level
    k ends half-way to level k + 1; the last level's ends at the grid's end.

    Parameters
    ----------
    pressure : ndarray (level,)
        Grid, dbar.

    Returns
    -------
    ndarray (level,)
        dbar.
    """
    p = np.asarray(pressure, dtype=float)
    return np.append(0.5 * (p[:-1] + p[1:]), p[-1])


def overturning_fractions(op: SectionOperator) -> tuple[np.ndarray, np.ndarray]:
    """Share of the section's area above each level end and lighter than each interface.

    The overturning removes the section's net transport as a uniform velocity
    over the whole section area (bottom triangles included); these fractions
    say how much of that net each streamfunction value holds.

    Returns
    -------
    depth : ndarray (..., level)
        Area from the surface through each level over the total, dimensionless.
    density : ndarray (..., interface)
        Area of the classes lighter than each interface over the total.
    """
    level = op.level_section_area
    klass = op.class_area
    with np.errstate(invalid="ignore", divide="ignore"):
        depth = np.cumsum(level, axis=-1) / level.sum(axis=-1)[..., None]
        density = np.cumsum(klass, axis=-1)[..., :-1] / klass.sum(axis=-1)[..., None]
    return np.nan_to_num(depth), np.nan_to_num(density)


def section_values(
    op: SectionOperator,
    offset: np.ndarray,
    adjustment: np.ndarray | float = 0.0,
    ekman: np.ndarray | float = 0.0,
    reference_salinity: float | None = None,
) -> dict[str, np.ndarray]:
    """Every reported number of a section for one reference state (the definitions).

    :func:`section_outputs` takes its initial values from here and adds their
    derivatives; :mod:`sectionkit.xr` calls this directly, since every
    argument may carry leading dimensions (time, member).

    Parameters
    ----------
    op : SectionOperator
        Built operator; its arrays may have leading dimensions.
    offset : ndarray (..., pair)
        Reference offset from the reference choice, m s^-1.
    adjustment : ndarray (..., pair) or float
        Reference-velocity adjustment (the inverse's estimate), m s^-1.
    ekman : ndarray (..., pair) or float
        Ekman volume transport per pair (already multiplied by any Ekman
        adjustment factor), m^3 s^-1.
    reference_salinity : float, optional
        Salinity the freshwater transport is relative to, g/kg; the section's
        area-mean budget salinity (S* or SA, see build_operator) when None.

    Returns
    -------
    dict of str -> ndarray
        ``volume_transport``, ``mass_transport`` (Sv), ``salt_transport``
        (Sv g/kg), ``heat_transport`` (PW), each (..., class);
        ``pair_volume_transport`` (..., pair, class) Sv; ``net``, ``net_mass``,
        ``freshwater`` (Sv) and ``heat`` (PW); ``psi_depth`` (..., level) and
        ``psi_density`` (..., interface) Sv, accumulated from the surface
        (down to :func:`level_end_pressure`) and from the lightest class, both
        after removing the section's net transport as a uniform velocity over
        the section's area; ``overturning`` (their depth-space extreme, Sv),
        ``overturning_pressure`` (dbar, where that integral ends) and
        ``overturning_density`` (Sv).
    """
    for what, value in (("offset", offset), ("adjustment", adjustment), ("ekman", ekman)):
        _check_pairs(op, what, value)
    ek = np.asarray(ekman, dtype=float)
    if ek.ndim == 0:
        ek = np.full(op.n_pair, float(ek))
    ref = np.asarray(offset, dtype=float) + np.asarray(adjustment, dtype=float)
    t = op.transports(offset, adjustment, ek)  # (..., quantity, pair, class)
    cls = t.sum(axis=-2)
    volume = cls[..., Q["volume"], :] / SV
    mass = cls[..., Q["mass"], :] / SV
    salt = cls[..., Q["salt"], :] / SV
    heat = cls[..., Q["heat"], :] / PW
    s_ref = op.mean_salinity if reference_salinity is None else reference_salinity
    out: dict[str, np.ndarray] = {
        "volume_transport": volume,
        "mass_transport": mass,
        "salt_transport": salt,
        "heat_transport": heat,
        "pair_volume_transport": t[..., Q["volume"], :, :] / SV,
        "net": volume.sum(axis=-1),
        "net_mass": mass.sum(axis=-1),
        "heat": heat.sum(axis=-1),
        "freshwater": mass.sum(axis=-1) - salt.sum(axis=-1) / s_ref,
    }
    level = (
        op.level_relative
        + np.einsum("...jk,...j->...k", op.level_area, ref)
        + np.einsum("...j,...jk->...k", ek, op.level_ekman)
    )
    frac_z, frac_rho = overturning_fractions(op)
    psi_z = np.cumsum(level, axis=-1) / SV
    psi_z = psi_z - psi_z[..., -1:] * frac_z  # net removed as a uniform velocity
    out["psi_depth"] = psi_z
    out["overturning"], kz = _signed_extremum(psi_z)
    out["overturning_pressure"] = level_end_pressure(op.pressure)[kz]
    psi_rho = np.cumsum(volume, axis=-1)[..., :-1] - volume.sum(axis=-1)[..., None] * frac_rho
    out["psi_density"] = psi_rho
    if psi_rho.shape[-1]:
        out["overturning_density"] = _signed_extremum(psi_rho)[0]
    else:
        out["overturning_density"] = np.full(volume.shape[:-1], np.nan)
    return out


def section_outputs(
    op: SectionOperator,
    offset: np.ndarray,
    ekman: np.ndarray,
    layout: UnknownLayout,
    reference_salinity: float | None = None,
    x_for_maximum: np.ndarray | None = None,
) -> LinearOutputs:
    """Every reported number of one section as a linear functional of ``x``.

    Parameters
    ----------
    op : SectionOperator
        The section (no leading dimensions).
    offset : ndarray (pair,)
        Reference offsets of the chosen references, m s^-1.
    ekman : ndarray (pair,)
        Ekman volume transport per pair, m^3 s^-1.
    layout : UnknownLayout
        Unknown layout.
    reference_salinity : float, optional
        Salinity the freshwater transport is relative to, g/kg; the
        section's area-mean budget salinity (S* or SA) when None.
    x_for_maximum : ndarray (unknown,), optional
        State at which the overturning maxima are located (the adjusted
        state); the initial state when None.

    Returns
    -------
    LinearOutputs
        Names ``volume:<class>``, ``mass:<class>``, ``salt:<class>``,
        ``heat:<class>``, ``net``, ``net_mass``, ``heat``, ``freshwater``,
        ``overturning`` (depth space), ``overturning_density``, and
        ``psi_depth:<k>`` / ``psi_density:<n>`` streamfunction values.
    """
    values = section_values(op, offset, 0.0, ekman, reference_salinity)
    names: list[str] = []
    initial: list[np.ndarray] = []
    grads: list[np.ndarray] = []
    units: list[str] = []
    per_q: dict[str, np.ndarray] = {}
    for quantity in QUANTITIES:
        value = values[f"{quantity}_transport"]
        grad = per_q[quantity] = class_transport_gradient(op, quantity, layout, ekman)
        unit = QUANTITY_UNIT[quantity]
        for i, layer in enumerate(op.layer_names):
            names.append(f"{quantity}:{layer}")
            initial.append(value[i : i + 1])
            grads.append(grad[i : i + 1])
            units.append(unit)

    def add(name: str, value: np.ndarray, grad: np.ndarray, unit: str) -> None:
        names.append(name)
        initial.append(np.atleast_1d(value))
        grads.append(np.atleast_2d(grad))
        units.append(unit)

    # the derivatives of section_values' definitions
    add("net", values["net"], per_q["volume"].sum(axis=0), "Sv")
    add("net_mass", values["net_mass"], per_q["mass"].sum(axis=0), "Sv")
    add("heat", values["heat"], per_q["heat"].sum(axis=0), "PW")
    s_ref = float(op.mean_salinity) if reference_salinity is None else reference_salinity
    add("freshwater", values["freshwater"],
        per_q["mass"].sum(axis=0) - per_q["salt"].sum(axis=0) / s_ref, "Sv")

    # both streamfunctions with the net transport removed as a uniform velocity
    frac_z, frac_rho = overturning_fractions(op)
    # overturning in density classes: cumulative from the light side at each interface
    psi_rho = values["psi_density"]
    gvol = per_q["volume"]
    gpsi_rho = np.cumsum(gvol, axis=0)[:-1] - np.outer(frac_rho, gvol.sum(axis=0))
    # overturning in depth: cumulative transport from the surface down; the
    # rows of every level are formed only when asked for
    depth_rows = DepthStreamfunctionRows(
        op.level_area, ekman @ op.level_ekman, frac_z, layout.pair_slices[op.name],
        layout.ekman.get(op.name), layout.size)
    psi_z = values["psi_depth"]
    if x_for_maximum is None:
        kz = int(np.argmax(np.abs(psi_z)))
    else:
        kz = int(np.argmax(np.abs(psi_z + depth_rows.apply(x_for_maximum))))
    x_at = np.zeros(layout.size) if x_for_maximum is None else x_for_maximum
    add("overturning", psi_z[kz], depth_rows.rows([kz])[0], "Sv")
    if psi_rho.size:
        kr = int(np.argmax(np.abs(psi_rho + gpsi_rho @ x_at)))
        add("overturning_density", psi_rho[kr], gpsi_rho[kr], "Sv")
    else:
        add("overturning_density", np.nan, np.zeros(layout.size), "Sv")
    names += [f"psi_density:{n}" for n in range(psi_rho.size)]
    initial.append(psi_rho)
    grads.append(gpsi_rho.reshape(psi_rho.size, layout.size))
    units += ["Sv"] * psi_rho.size
    names += depth_streamfunction_names(op.pressure.size)[0]
    initial.append(psi_z)
    units += ["Sv"] * psi_z.size
    return LinearOutputs(names, np.concatenate(initial), np.vstack(grads), units,
                         depth_rows)
