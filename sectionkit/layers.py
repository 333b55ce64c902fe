"""Density classes and the per-pair class operator.

A density class is bounded by interfaces, each a potential density anomaly
with its own reference pressure (light to dense). A point belongs to class
``i`` when it is denser than exactly ``i`` interfaces, each compared at its
own reference pressure, using the pair-mean density.

Between two grid levels every field is taken as linear in pressure, so an
interface crosses a cell at a fractional position and the integral of any
linear field over the part of the cell in one class is exact. The result is
a set of weights ``w[..., pair, class, level]`` (metres) such that, for any
field ``q`` on the grid, ``sum_k w[i, k] q[k]`` is the depth integral of ``q``
over class ``i``, including the narrowing width of the bottom triangle.
Class weights summed over classes give the full-column weights, so class
transports add up to the total by construction.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import gsw
import numpy as np

from sectionkit.compiled import kernel
from sectionkit.eos import density_anomaly
from sectionkit.errors import ConfigError, check_trailing_shape
from sectionkit.geostrophy import pair_mean
from sectionkit.labels import split_constraint_label


@dataclass(frozen=True)
class Interface:
    """A class boundary.

    Parameters
    ----------
    sigma : float
        Potential density anomaly, kg m^-3 (density minus 1000).
    p_ref : float
        Reference pressure of that potential density, dbar.
    """

    sigma: float
    p_ref: float = 0.0

    def label(self) -> str:
        """Conventional label, e.g. ``sigma_2 = 36.95``."""
        return f"sigma_{self.p_ref / 1000:g} = {self.sigma:g}"

    def display(self, tex: bool = False) -> str:
        """The label figures, tables and the workbench print, e.g. ``σ₂ 36.98``."""
        return sigma_label(self.sigma, self.p_ref, tex=tex)


_SUBSCRIPT_DIGITS = str.maketrans("0123456789", "₀₁₂₃₄₅₆₇₈₉")


def sigma_symbol(p_ref: float, tex: bool = False) -> str:
    """The potential-density symbol of a reference pressure: σ₀, σ₂, σ₁.₅.

    Parameters
    ----------
    p_ref : float
        Potential-density reference pressure ("σ reference pressure"), dbar.
    tex : bool
        LaTeX (``$\\sigma_{2}$``) instead of Unicode.

    Returns
    -------
    str
        Subscript in thousands of dbar; a reference that is not a whole
        thousand is written out (``σ(1500 dbar)``) in Unicode text.
    """
    sub = f"{float(p_ref) / 1000.0:.10g}"
    if tex:
        return rf"$\sigma_{{{sub}}}$"
    if sub.isdigit():
        return "σ" + sub.translate(_SUBSCRIPT_DIGITS)
    return f"σ({float(p_ref):.10g} dbar)"


def sigma_label(sigma: float, p_ref: float, tex: bool = False) -> str:
    """One label for a potential-density surface, the same in every figure and table.

    Parameters
    ----------
    sigma : float
        Potential density anomaly, kg m^-3.
    p_ref : float
        Its reference pressure, dbar.
    tex : bool
        LaTeX instead of Unicode.

    Returns
    -------
    str
        E.g. ``σ₁ 32.15`` or ``σ₂ 36.98``.
    """
    return f"{sigma_symbol(p_ref, tex)} {float(sigma):.10g}"


def class_display_name(name: str) -> str:
    """A class name as printed in figures and tables: underscores become spaces."""
    return str(name).replace("_", " ")


def constraint_display_name(constraint: str) -> str:
    """A constraint row as printed: ``mass:deep_water`` -> ``mass, deep water``."""
    kind, what = split_constraint_label(constraint)
    return f"{kind}, {class_display_name(what)}" if what else kind


def check_interfaces(interfaces: list[Interface], names: list[str] | None) -> list[str]:
    """Validate interfaces and return the class names.

    Parameters
    ----------
    interfaces : list of Interface
        Light to dense.
    names : list of str, optional
        One name per class (``len(interfaces) + 1``).

    Returns
    -------
    list of str
        Class names (generated as ``class_0`` ... when not given).
    """
    for n, face in enumerate(interfaces):
        if not np.isfinite(face.sigma) or not 0.0 <= face.sigma < 100.0:
            raise ConfigError(
                f"[layers] interface {n}: sigma = {face.sigma!r} is not a potential density "
                "anomaly in kg m^-3 (expected e.g. 26.8)"
            )
        if not np.isfinite(face.p_ref) or face.p_ref < 0.0:
            raise ConfigError(f"[layers] interface {n}: p_ref = {face.p_ref!r} must be >= 0 dbar")
    for n in range(1, len(interfaces)):
        for m in range(n):
            a, b = interfaces[m], interfaces[n]
            if a.p_ref == b.p_ref and not b.sigma > a.sigma:
                raise ConfigError(
                    f"[layers] interfaces must increase in density from light to dense: "
                    f"interface {n} ({b.label()}) is not denser than interface {m} ({a.label()})"
                )
    n_class = len(interfaces) + 1
    if names is None:
        return [f"class_{i}" for i in range(n_class)]
    if len(names) != n_class:
        raise ConfigError(
            f"[layers] names has {len(names)} entries but {len(interfaces)} interfaces make "
            f"{n_class} classes; give one name per class"
        )
    if len(set(names)) != len(names):
        raise ConfigError(f"[layers] names must be distinct; got {names}")
    return list(names)


def potential_density_anomaly(sa: np.ndarray, ct: np.ndarray, p_ref: float) -> np.ndarray:
    """Potential density anomaly referenced to ``p_ref``.

    Parameters
    ----------
    sa : ndarray
        Absolute Salinity, g/kg.
    ct : ndarray
        Conservative Temperature, degC.
    p_ref : float
        Reference pressure, dbar.

    Returns
    -------
    ndarray
        rho(SA, CT, p_ref) - 1000, kg m^-3: gsw.rho's reciprocal of the TEOS-10
        75-term specific volume at p_ref, evaluated by the compiled kernel of
        :func:`sectionkit.eos.density_anomaly` (equal to gsw.rho - 1000 bit for
        bit on the machines checked).
    """
    return density_anomaly(sa, ct, p_ref, 1000.0)


#: Upper bounds of |d rho / d SA| (kg m^-3 per g/kg) and |d rho / d CT| (kg m^-3 per degC)
#: of TEOS-10 potential density over ``DECIDING_RANGE``: the largest values there are
#: 0.83 and 0.49 (gsw.rho_alpha_beta on a dense grid, checked in the tests).
DRHO_DSA_BOUND = 1.0
DRHO_DCT_BOUND = 0.75
#: Where those bounds hold: SA (g/kg), CT (degC) and reference pressure (dbar) ranges.
DECIDING_RANGE = {"SA": (0.0, 42.0), "CT": (-2.5, 40.0), "p_ref": (0.0, 11000.0)}
#: Round-off allowance of a pair-mean density, kg m^-3.
_ROUNDING = 1e-9


def deciding_densities(
    sa: np.ndarray,
    ct: np.ndarray,
    interfaces: dict[float, Sequence[float]],
    stride: int = 16,
) -> dict[float, np.ndarray]:
    """Pair-mean potential density wherever it can decide a class, for class weights.

    Potential density is evaluated exactly at every ``stride``-th level. Within
    a block of levels between two such levels, it cannot move further from
    its value at the top of the block than ``DRHO_DSA_BOUND`` times the largest
    change of SA plus ``DRHO_DCT_BOUND`` times the largest change of CT in the
    block. Where that range holds no interface value, every level of the
    block lies on the same side of every interface, and the block gets the
    (exact) pair-mean value of its top level; everywhere else (a possible
    crossing, the sea floor, water outside ``DECIDING_RANGE``) the density
    is evaluated exactly. :func:`class_levels` of the result is therefore
    identical to that of the full evaluation (``pair_mean`` of
    :func:`potential_density_anomaly`), at a fraction of its cost; the values
    themselves are exact only where they can decide a class.

    The bookkeeping (block bounds, decisions, gathering the blocks to
    evaluate, pair means) runs as compiled kernels
    (the kernels below it); the densities themselves are TEOS-10's
    (:func:`potential_density_anomaly`).

    Parameters
    ----------
    sa, ct : ndarray (..., station, level)
        Absolute Salinity (g/kg) and Conservative Temperature (degC) on the
        grid; NaN below each station's bottom.
    interfaces : dict of float -> sequence of float
        Interface values (kg m^-3) by their reference pressure (dbar).
    stride : int
        Levels per block, a power of two.

    Returns
    -------
    dict of float -> ndarray (..., pair, level)
        Pair-mean potential density anomaly by reference pressure, kg m^-3:
        exact where a class can change, a value of the same classes elsewhere.
    """
    sa = np.asarray(sa, dtype=float)
    ct = np.asarray(ct, dtype=float)
    shape = sa.shape
    check_trailing_shape("deciding_densities", "ct", ct, shape, "station, level (as sa)")
    n_st, n_lev = shape[-2], shape[-1]
    a_sa = np.ascontiguousarray(sa.reshape(-1, n_st, n_lev))
    a_ct = np.ascontiguousarray(ct.reshape(-1, n_st, n_lev))
    n_lead = a_sa.shape[0]
    out_shape = shape[:-2] + (n_st - 1, n_lev)
    n_blk = (n_lev - 1) // stride if stride > 1 and stride & (stride - 1) == 0 else 0
    lo_p, hi_p = DECIDING_RANGE["p_ref"]
    result = {}
    if n_blk < 2 or n_st < 2:
        for pr in interfaces:
            sig = potential_density_anomaly(a_sa, a_ct, pr)
            result[pr] = pair_mean(sig).reshape(out_shape)
        return result
    body = n_blk * stride
    # block b spans levels b s to (b + 1) s, both included: a block with any missing value
    # gets no bound (not "full"), a block without any SA is "empty" (below the bottom)
    reach, full, empty, top_sa, top_ct = (x.reshape(n_lead, n_st, n_blk) for x in _block_bounds(
        a_sa.reshape(-1, n_lev), a_ct.reshape(-1, n_lev), stride, n_blk,
        *DECIDING_RANGE["SA"], *DECIDING_RANGE["CT"], DRHO_DSA_BOUND, DRHO_DCT_BOUND,
        _ROUNDING))
    for pr, values in interfaces.items():
        out = np.empty((n_lead, n_st - 1, n_lev))
        # the levels after the last whole block, exactly
        out[..., body:] = pair_mean(potential_density_anomaly(a_sa[..., body:], a_ct[..., body:],
                                                             pr))
        sig_top = potential_density_anomaly(top_sa, top_ct, pr)
        # pair blocks whose bounded range (the pair mean of the two stations' ranges, or
        # that of the one with data) holds no interface value take the pair mean of the top
        undecided, need = _decide_blocks(sig_top, reach, full, empty,
                                         np.asarray(values, dtype=float),
                                         lo_p <= pr <= hi_p, stride, out)
        if undecided.any():
            # each station block once, though both its pairs may need it
            slot, block_sa, block_ct = _gather_blocks(a_sa, a_ct, need, stride)
            _scatter_blocks(potential_density_anomaly(block_sa, block_ct, pr), slot,
                            undecided, stride, out)
        result[pr] = out.reshape(out_shape)
    return result


@kernel
def _block_bounds(sa, ct, stride, n_blk, sa_lo, sa_hi, ct_lo, ct_hi, dsa, dct, rounding):
    """How far potential density can move from its value at the top of each block.

    Parameters
    ----------
    sa, ct : ndarray (row, level)
        Absolute Salinity (g/kg) and Conservative Temperature (degC) of each
        station; NaN below its bottom.
    stride : int
        Levels per block; block ``b`` spans levels ``b stride`` to
        ``(b + 1) stride``, both included.
    n_blk : int
        Number of blocks, ``n_blk stride < level``.
    sa_lo, sa_hi, ct_lo, ct_hi : float
        Range of SA (g/kg) and CT (degC) where the derivative bounds hold.
    dsa, dct : float
        Bounds of |d rho / d SA| (kg m^-3 per g/kg) and |d rho / d CT| (kg m^-3 per degC).
    rounding : float
        Round-off allowance, kg m^-3.

    Returns
    -------
    reach : ndarray (row, block)
        ``dsa max|SA - SA_top| + dct max|CT - CT_top| + rounding``, kg m^-3,
        where ``full``; NaN elsewhere.
    full : ndarray (row, block) of bool
        Data on every level of the block, all of it inside the range.
    empty : ndarray (row, block) of bool
        No SA on any level of the block (below the station's bottom).
    top_sa, top_ct : ndarray (row, block)
        SA (g/kg) and CT (degC) at the top level of each block (contiguous: the density kernel
        evaluates them faster than a strided view).
    """
    n_row = sa.shape[0]
    reach = np.empty((n_row, n_blk))
    tops_sa = np.empty((n_row, n_blk))
    tops_ct = np.empty((n_row, n_blk))
    full = np.zeros((n_row, n_blk), dtype=np.bool_)
    empty = np.zeros((n_row, n_blk), dtype=np.bool_)
    for r in range(n_row):
        for b in range(n_blk):
            k0 = b * stride
            top_sa = sa[r, k0]
            top_ct = ct[r, k0]
            tops_sa[r, b] = top_sa
            tops_ct[r, b] = top_ct
            sa_min = np.inf
            sa_max = -np.inf
            ct_min = np.inf
            ct_max = -np.inf
            gap = False  # a missing SA or CT somewhere in the block
            data = False  # SA somewhere in the block
            for k in range(k0, k0 + stride + 1):
                s = sa[r, k]
                c = ct[r, k]
                if math.isnan(s):
                    gap = True
                else:
                    data = True
                    sa_min = min(sa_min, s)
                    sa_max = max(sa_max, s)
                if math.isnan(c):
                    gap = True
                else:
                    ct_min = min(ct_min, c)
                    ct_max = max(ct_max, c)
            empty[r, b] = not data
            reach[r, b] = np.nan
            if gap or not (sa_min >= sa_lo and sa_max <= sa_hi and ct_min >= ct_lo
                           and ct_max <= ct_hi):
                continue
            value = (dsa * max(sa_max - top_sa, top_sa - sa_min)
                     + dct * max(ct_max - top_ct, top_ct - ct_min) + rounding)
            if math.isfinite(value):
                reach[r, b] = value
                full[r, b] = True
    return reach, full, empty, tops_sa, tops_ct


@kernel
def _pair_value(a, b):
    """Pair mean of two station values; the one with data where the other has none."""
    if math.isnan(b):
        return a
    if math.isnan(a):
        return b
    return (a + b) * 0.5


@kernel
def _decide_blocks(sig_top, reach, full, empty, values, bounded, stride, out):
    """Pair blocks that every interface leaves on one side, filled with their top's pair mean.

    Parameters
    ----------
    sig_top : ndarray (lead, station, block)
        Potential density anomaly at the top level of each block, kg m^-3.
    reach, full, empty : ndarray (lead, station, block)
        From :func:`_block_bounds`.
    values : ndarray (interface,)
        Interface values at this reference pressure, kg m^-3.
    bounded : bool
        The reference pressure lies where the derivative bounds hold; if not,
        every block is undecided.
    stride : int
        Levels per block.
    out : ndarray (lead, pair, level)
        Receives, on every level of each decided pair block, the pair mean of
        the top values (written in place).

    Returns
    -------
    undecided : ndarray (lead, pair, block) of bool
        Pair blocks whose density must be evaluated on every level.
    need : ndarray (lead, station, block) of bool
        Station blocks those pair blocks use.
    """
    n_lead, n_st, n_blk = sig_top.shape
    undecided = np.zeros((n_lead, n_st - 1, n_blk), dtype=np.bool_)
    need = np.zeros((n_lead, n_st, n_blk), dtype=np.bool_)
    for m in range(n_lead):
        for j in range(n_st - 1):
            for b in range(n_blk):
                emp_a = empty[m, j, b]
                emp_b = empty[m, j + 1, b]
                exact = True
                if bounded:
                    lo_a = sig_top[m, j, b] - reach[m, j, b] if full[m, j, b] else np.nan
                    hi_a = sig_top[m, j, b] + reach[m, j, b] if full[m, j, b] else np.nan
                    lo_b = sig_top[m, j + 1, b] - reach[m, j + 1, b] if full[m, j + 1, b] \
                        else np.nan
                    hi_b = sig_top[m, j + 1, b] + reach[m, j + 1, b] if full[m, j + 1, b] \
                        else np.nan
                    if emp_a:
                        lo, hi = lo_b, hi_b
                    elif emp_b:
                        lo, hi = lo_a, hi_a
                    else:
                        lo, hi = 0.5 * (lo_a + lo_b), 0.5 * (hi_a + hi_b)
                    sides = True
                    for v in values:
                        sides = sides and (lo > v or hi <= v)
                    exact = not (sides or (emp_a and emp_b))
                if exact:
                    undecided[m, j, b] = True
                    need[m, j, b] = True
                    need[m, j + 1, b] = True
                else:
                    value = _pair_value(sig_top[m, j, b], sig_top[m, j + 1, b])
                    for k in range(b * stride, (b + 1) * stride):
                        out[m, j, k] = value
    return undecided, need


@kernel
def _gather_blocks(sa, ct, need, stride):
    """SA and CT of the station blocks in ``need``, one row each.

    Parameters
    ----------
    sa, ct : ndarray (lead, station, level)
        g/kg and degC.
    need : ndarray (lead, station, block) of bool
        Station blocks to gather.
    stride : int
        Levels per block.

    Returns
    -------
    slot : ndarray (lead, station, block) of int
        Row of each gathered block (-1 where not gathered).
    block_sa, block_ct : ndarray (gathered, stride)
        Their SA (g/kg) and CT (degC).
    """
    n_lead, n_st, n_blk = need.shape
    slot = np.full((n_lead, n_st, n_blk), -1, dtype=np.int64)
    n = 0
    for m in range(n_lead):
        for s in range(n_st):
            for b in range(n_blk):
                if need[m, s, b]:
                    slot[m, s, b] = n
                    n += 1
    block_sa = np.empty((n, stride))
    block_ct = np.empty((n, stride))
    for m in range(n_lead):
        for s in range(n_st):
            for b in range(n_blk):
                i = slot[m, s, b]
                if i >= 0:
                    for k in range(stride):
                        block_sa[i, k] = sa[m, s, b * stride + k]
                        block_ct[i, k] = ct[m, s, b * stride + k]
    return slot, block_sa, block_ct


@kernel
def _scatter_blocks(block_sigma, slot, undecided, stride, out):
    """Pair means of the exact station-block densities into the undecided pair blocks.

    Parameters
    ----------
    block_sigma : ndarray (gathered, stride)
        Potential density anomaly of the gathered station blocks, kg m^-3.
    slot : ndarray (lead, station, block) of int
        From :func:`_gather_blocks`.
    undecided : ndarray (lead, pair, block) of bool
        From :func:`_decide_blocks`.
    stride : int
        Levels per block.
    out : ndarray (lead, pair, level)
        Written in place on the levels of the undecided pair blocks, kg m^-3.
    """
    n_lead, n_pair, n_blk = undecided.shape
    for m in range(n_lead):
        for j in range(n_pair):
            for b in range(n_blk):
                if undecided[m, j, b]:
                    ia = slot[m, j, b]
                    ib = slot[m, j + 1, b]
                    for k in range(stride):
                        out[m, j, b * stride + k] = _pair_value(block_sigma[ia, k],
                                                                block_sigma[ib, k])


#: TEOS-10 gravity gradient parameter of gsw.z_from_p, m^-1 (GSW's gamma; checked in the tests).
_GAMMA = 2.26e-7


def cell_thickness(p: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Thickness of each grid segment in metres.

    Parameters
    ----------
    p : ndarray (level,)
        Pressure grid, dbar.
    lat : ndarray (pair,)
        Latitude, degrees_north.

    Returns
    -------
    ndarray (pair, level - 1)
        Height between levels k and k + 1, m (gsw.z_from_p).
    """
    p = np.asarray(p, float)
    lat = np.asarray(lat, float)
    # gsw.z_from_p as its C code forms it, z = -2 c / (b + sqrt(b^2 - 4 a c)), with c the
    # enthalpy of the standard ocean at p and a, b gravity terms of latitude: one row of
    # each, then element-wise arithmetic only (TEOS-10; equal to gsw.z_from_p to round-off)
    sin2 = np.sin(np.deg2rad(lat)) ** 2
    b = 9.780327 * (1.0 + (5.2792e-3 + (2.32e-5 * sin2)) * sin2)
    a = -0.5 * _GAMMA * b
    c = np.ascontiguousarray(gsw.enthalpy_SSO_0(p), dtype=float)
    out = np.empty(lat.shape + (max(p.size - 1, 0),))
    _cell_thickness_kernel(np.ascontiguousarray(4.0 * a).reshape(-1),
                           np.ascontiguousarray(b).reshape(-1), c,
                           out.reshape(-1, out.shape[-1]))
    return out


@kernel
def _cell_thickness_kernel(four_a, b, c, out):
    """z_k - z_{k+1} per row, z = -2 c / (b + sqrt(b^2 - 4 a c)) (gsw.z_from_p's form)."""
    n_row, n_seg = out.shape
    for r in range(n_row):
        bb = b[r] * b[r]
        z_prev = (-2.0 * c[0]) / (np.sqrt(bb - four_a[r] * c[0]) + b[r])
        for k in range(n_seg):
            z = (-2.0 * c[k + 1]) / (np.sqrt(bb - four_a[r] * c[k + 1]) + b[r])
            out[r, k] = -(z - z_prev)
            z_prev = z


def bottom_width_fraction(
    p: np.ndarray, bottom_a: np.ndarray, bottom_b: np.ndarray, track: list | None = None
) -> np.ndarray:
    """Fraction of the pair's width that is water at each segment mid-pressure.

    Parameters
    ----------
    p : ndarray (level,)
        Pressure grid, dbar.
    bottom_a, bottom_b : ndarray (pair,)
        Sea-floor pressure at the two stations, dbar.
    track : list of ndarray or None, optional
        Per pair, sea-floor pressures (dbar) sampled evenly along the pair
        from station a to station b (a bathymetry track); ``None`` entries or
        no list mean a straight bottom between the two stations.

    Returns
    -------
    ndarray (pair, level - 1)
        Width fraction in [0, 1], dimensionless.
    """
    p = np.asarray(p, dtype=float)
    check_trailing_shape("bottom_width_fraction", "bottom_b", np.asarray(bottom_b),
                         np.shape(bottom_a), "pair (as bottom_a)")
    mid = 0.5 * (p[:-1] + p[1:])
    shallow = np.minimum(bottom_a, bottom_b).astype(float)
    deep = np.maximum(bottom_a, bottom_b).astype(float)
    frac = np.empty(shallow.shape + mid.shape)
    _width_kernel(mid, shallow.reshape(-1), deep.reshape(-1), frac.reshape(-1, mid.size))
    if track is not None:
        for j, samples in enumerate(track):
            if samples is None:
                continue
            samples = np.asarray(samples, dtype=float)
            frac[j] = (samples[None, :] > mid[:, None]).mean(axis=1)
    return frac


@kernel
def _width_kernel(mid, shallow, deep, frac):
    """Straight-bottom width fraction: 1 above the shallower bottom, (deep - p) / (deep -
    shallow) clipped to [0, 1] between the two, 1 for a flat bottom or an unknown one."""
    n_row, n_seg = frac.shape
    for r in range(n_row):
        lo = shallow[r]
        hi = deep[r]
        for k in range(n_seg):
            m = mid[k]
            if m <= lo:
                frac[r, k] = 1.0
            elif hi > lo:
                frac[r, k] = min(max((hi - m) / (hi - lo), 0.0), 1.0)
            else:  # a flat bottom (or none known)
                frac[r, k] = 1.0


@dataclass
class ClassLevels:
    """Class weights in compact form: a class per level plus the split cells.

    The dense weights (:meth:`dense`) are ``w[..., i, k] = level_weight[k]``
    where ``level_class[k] == i``, plus ``split_weight`` at the few
    ``(split_index)`` positions of cells an interface crosses.

    Attributes
    ----------
    level_class : ndarray (..., pair, level) of int8
        Class of each level (how many interfaces it is denser than);
        ``n_class`` (no class) where the level has no data.
    level_weight : ndarray (..., pair, level)
        Depth-integration weight of each level from the cells no interface
        crosses, and the tail below the last level, m.
    split_index : tuple of ndarray
        Leading indices, pair, class and level of each split-cell weight.
    split_weight : ndarray (split,)
        Weights of the split cells, m.
    n_class : int
        Number of classes.
    column : ndarray (..., pair, level)
        Full-column weight of each level (all classes), m.
    """

    level_class: np.ndarray
    level_weight: np.ndarray
    split_index: tuple[np.ndarray, ...]
    split_weight: np.ndarray
    n_class: int
    column: np.ndarray

    def dense(self) -> np.ndarray:
        """Depth-integration weights of every class, with fractional cells.

        Returns
        -------
        ndarray (..., pair, class, level)
            Weights, m: the depth integral over class ``i`` of a field ``q``
            is ``sum_k w[..., i, k] * q[k]``.
        """
        lc = self.level_class
        out = np.empty(lc.shape[:-1] + (self.n_class, lc.shape[-1]))
        for i in range(self.n_class):
            np.multiply(lc == i, self.level_weight, out=out[..., i, :])
        np.add.at(out, self.split_index, self.split_weight)
        return out


#: Most interfaces :func:`_class_level_pass` takes (one bit of an int64 each).
MAX_INTERFACES = 62


def _rows(a: np.ndarray, lead: tuple[int, ...], n: int) -> np.ndarray:
    """A (..., pair, n) table as (row, n) rows for the kernels: a (pair, n) table stays one
    table of pairs (shared by every leading index), other leading shapes are broadcast."""
    a = np.asarray(a, dtype=float)
    if a.ndim > 2:
        a = np.broadcast_to(a, lead + (n,))
    return np.ascontiguousarray(a.reshape(-1, n))


def class_levels(
    sigma: np.ndarray | Sequence[np.ndarray],
    interfaces: np.ndarray,
    thickness: np.ndarray,
    width: np.ndarray,
    tail: np.ndarray | None = None,
) -> ClassLevels:
    """Class weights of every level, in compact form (dense weights: :meth:`ClassLevels.dense`).

    One compiled pass per row (:func:`_class_level_pass`):
    a level's class is the number of interfaces it is denser than; a segment
    with data at both ends gives each of its levels half its thickness times
    width (trapezoid rule) in the column, and in the class when no interface
    crosses it. A crossed segment is cut at the crossings (densities linear
    in pressure) and the linear field integrated exactly over each part
    (:func:`_split_cells`): its weights are the split
    cells. The tail is added to the last level with data.

    Parameters
    ----------
    sigma : ndarray (..., pair, interface, level), or a sequence of (..., pair, level)
        Pair-mean potential density anomaly at each interface's own reference
        pressure, kg m^-3; NaN below the deeper station's bottom.
    interfaces : ndarray (interface,)
        Interface values, kg m^-3.
    thickness : ndarray (pair, level - 1)
        Segment thickness, m.
    width : ndarray (pair, level - 1)
        Fraction of the pair's width that is water in each segment.
    tail : ndarray (pair,), optional
        Thickness below the last level down to the bottom, m (a sliver
        smaller than one grid step, integrated with the last level's value).

    Returns
    -------
    ClassLevels
    """
    faces = [sigma[..., n, :] for n in range(sigma.shape[-2])] if isinstance(
        sigma, np.ndarray) else list(sigma)
    n_if = len(faces)
    if not 1 <= n_if <= MAX_INTERFACES:
        raise ConfigError(f"[layers] {n_if} interfaces: class weights take 1 to "
                          f"{MAX_INTERFACES}; merge or drop interfaces")
    n_class = n_if + 1
    n_level = faces[0].shape[-1]
    cells = (faces[0].shape[-2], n_level - 1) if faces[0].ndim >= 2 else (-1,)
    check_trailing_shape("class_levels", "thickness", thickness, cells, "pair, level - 1")
    check_trailing_shape("class_levels", "width", width, cells, "pair, level - 1")
    if tail is not None:
        check_trailing_shape("class_levels", "tail", tail, cells[:1], "pair")
    lead = faces[0].shape[:-1]  # (..., pair)
    rows = tuple(np.ascontiguousarray(np.broadcast_to(np.asarray(face, dtype=float),
                                                      faces[0].shape).reshape(-1, n_level))
                 for face in faces)
    tail_rows = (np.zeros(1) if tail is None
                 else np.ascontiguousarray(np.broadcast_to(np.asarray(tail, dtype=float),
                                                           lead).reshape(-1)))
    th = _rows(thickness, lead, n_level - 1)
    wd = _rows(width, lead, n_level - 1)
    values = np.asarray(interfaces, dtype=float)
    n_row = rows[0].shape[0]
    level_class = np.empty((n_row, n_level), dtype=np.int8)
    level_weight = np.empty((n_row, n_level))
    column = np.empty((n_row, n_level))
    crossed = np.empty((n_row, n_level - 1), dtype=bool)
    _class_level_pass(rows, values, th, wd, tail_rows, tail is not None, n_class, level_class,
                      level_weight, column, crossed)
    c_row, c_seg = np.divmod(np.flatnonzero(crossed), n_level - 1)  # row-major, as np.nonzero
    upper, lower = _split_cells(rows, values, th, wd, c_row, c_seg, n_class)
    # split cells by class, each class's upper levels then its lower levels
    at = np.unravel_index(c_row, lead) if lead else ()
    idx: list[tuple[np.ndarray, ...]] = []
    vals: list[np.ndarray] = []
    for i in range(n_class):
        klass = np.full(c_row.size, i)
        idx.append(at + (klass, c_seg))
        vals.append(upper[:, i])
        idx.append(at + (klass, c_seg + 1))
        vals.append(lower[:, i])
    if c_row.size:
        split_index = tuple(np.concatenate(parts) for parts in zip(*idx, strict=True))
        split_weight = np.concatenate(vals)
    else:
        split_index = tuple(np.zeros(0, dtype=np.intp) for _ in range(len(lead) + 2))
        split_weight = np.zeros(0)
    shape = lead + (n_level,)
    return ClassLevels(level_class.reshape(shape), level_weight.reshape(shape), split_index,
                       split_weight, n_class, column.reshape(shape))


@kernel
def _class_level_pass(faces, values, thickness, width, tail, use_tail, n_class, level_class,
                      level_weight, column, crossed):
    """Class, depth weight and full-column weight of every level, and the crossed cells.

    Parameters
    ----------
    faces : tuple of ndarray (row, level)
        Pair-mean potential density anomaly at each interface's reference
        pressure, kg m^-3; NaN (in the first) where a level has no data.
        At most ``MAX_INTERFACES``.
    values : ndarray (interface,)
        Interface values, kg m^-3.
    thickness, width : ndarray (trow, level - 1)
        Segment thickness (m) and width fraction (1); row ``r`` uses row
        ``r % trow`` (a table of pairs shared by the leading indices).
    tail : ndarray (row,)
        Thickness below the last level with data, m.
    use_tail : bool
        Add ``tail`` to that level.
    n_class : int
        Number of classes, ``interface + 1``.
    level_class : ndarray (row, level) of int8
        Receives the number of interfaces each level is denser than;
        ``n_class`` where it has no data.
    level_weight : ndarray (row, level)
        Receives the half-cell weights (m) of the segments no interface
        crosses, and the tail.
    column : ndarray (row, level)
        Receives the half-cell weights (m) of every segment, and the tail.
    crossed : ndarray (row, level - 1) of bool
        Receives: the segment has data at both ends and an interface crosses it.

    The outputs are the caller's (numpy's allocator backs large arrays with
    huge pages where the system allows: far fewer page faults than fresh
    pages allocated in the kernel).
    """
    n_if = len(faces)
    n_row, n_lev = faces[0].shape
    t_rows = thickness.shape[0]
    w_rows = width.shape[0]
    masks = np.empty(n_lev, dtype=np.int64)  # bit n: denser than interface n
    counts = np.empty(n_lev, dtype=np.int8)  # interfaces denser than
    for r in range(n_row):
        tr = r % t_rows
        wr = r % w_rows
        masks[:] = 0
        counts[:] = 0
        for n in range(n_if):  # one interface at a time: a plain loop over the row
            face = faces[n][r]
            value = values[n]
            for k in range(n_lev):
                above = face[k] > value
                masks[k] |= np.int64(above) << n
                counts[k] += np.int8(above)
        first = faces[0][r]
        last = -1
        prev_finite = False
        for k in range(n_lev):
            finite = math.isfinite(first[k])
            mask = masks[k]
            level_class[r, k] = counts[k] if finite else n_class
            level_weight[r, k] = 0.0
            column[r, k] = 0.0
            if k > 0:
                crossed[r, k - 1] = False
            if k > 0 and finite and prev_finite:  # segment k - 1 has data at both ends
                half = 0.5 * (thickness[tr, k - 1] * width[wr, k - 1])
                column[r, k - 1] += half
                column[r, k] = half
                if mask == masks[k - 1]:
                    level_weight[r, k - 1] += half
                    level_weight[r, k] = half
                else:
                    crossed[r, k - 1] = True
            if finite:
                last = k
            prev_finite = finite
        if use_tail and last >= 0:
            level_weight[r, last] += tail[r]
            column[r, last] += tail[r]


@kernel
def _split_cells(faces, values, thickness, width, crossed_row, crossed_seg, n_class):
    """Weights of each class at both ends of each crossed cell (exact for linear fields).

    Within a cell the densities are linear in the fraction ``t`` of the cell;
    the cell is cut at every interface crossing, and the sub-interval
    ``[a, b]`` of class ``i`` gives the cell's two levels the weights
    ``(b - a) - (b^2 - a^2) / 2`` and ``(b^2 - a^2) / 2`` times the cell's
    thickness times width.

    Parameters
    ----------
    faces, values, thickness, width, n_class
        As for :func:`_class_level_pass`.
    crossed_row, crossed_seg : ndarray (crossed,) of int
        The crossed cells, from :func:`_class_level_pass`.

    Returns
    -------
    upper, lower : ndarray (crossed, class)
        Weight of each class at the cell's upper (``seg``) and lower
        (``seg + 1``) level, m.
    """
    n_if = len(faces)
    n_c = crossed_row.size
    t_rows = thickness.shape[0]
    w_rows = width.shape[0]
    upper = np.empty((n_c, n_class))
    lower = np.empty((n_c, n_class))
    c0 = np.empty(n_if)
    c1 = np.empty(n_if)
    bp = np.empty(n_if + 2)
    alpha = np.empty(n_class)
    beta = np.empty(n_class)
    for i in range(n_c):
        r = crossed_row[i]
        k = crossed_seg[i]
        w = thickness[r % t_rows, k] * width[r % w_rows, k]
        bp[0] = 0.0
        for n in range(n_if):
            c0[n] = faces[n][r, k] - values[n]
            c1[n] = faces[n][r, k + 1] - values[n]
            t = c0[n] / (c0[n] - c1[n]) if (c0[n] > 0) != (c1[n] > 0) else 0.0
            if t < 0.0:  # clipped to [0, 1]; NaN stays NaN (sorted last, as numpy does)
                t = 0.0
            elif t > 1.0:
                t = 1.0
            bp[n + 1] = t
        bp[n_if + 1] = 1.0
        for n in range(1, n_if + 2):  # insertion sort, NaN last
            x = bp[n]
            m = n - 1
            while m >= 0 and (bp[m] > x or (math.isnan(bp[m]) and not math.isnan(x))):
                bp[m + 1] = bp[m]
                m -= 1
            bp[m + 1] = x
        alpha[:] = 0.0
        beta[:] = 0.0
        for s in range(n_if + 1):
            a = bp[s]
            b = bp[s + 1]
            tm = 0.5 * (a + b)
            cls = 0
            for n in range(n_if):
                if c0[n] + tm * (c1[n] - c0[n]) > 0:
                    cls += 1
            alpha[cls] += b - a
            beta[cls] += 0.5 * (b * b - a * a)
        for c in range(n_class):
            upper[i, c] = (alpha[c] - beta[c]) * w
            lower[i, c] = beta[c] * w
    return upper, lower
