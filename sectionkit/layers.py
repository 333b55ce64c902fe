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

from collections.abc import Sequence
from dataclasses import dataclass

import gsw
import numpy as np

from sectionkit.compiled import kernel
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
        rho(SA, CT, p_ref) - 1000, kg m^-3 (TEOS-10, gsw.rho).
    """
    return gsw.rho(sa, ct, p_ref) - 1000.0


#: Upper bounds of |d rho / d SA| (kg m^-3 per g/kg) and |d rho / d CT| (kg m^-3 per degC)
#: of TEOS-10 potential density over ``DECIDING_RANGE``: the largest values there are
#: 0.83 and 0.49 (gsw.rho_alpha_beta on a dense grid, checked in the tests).
DRHO_DSA_BOUND = 1.0
DRHO_DCT_BOUND = 0.75
#: Where those bounds hold: SA (g/kg), CT (degC) and reference pressure (dbar) ranges.
DECIDING_RANGE = {"SA": (0.0, 42.0), "CT": (-2.5, 40.0), "p_ref": (0.0, 11000.0)}
#: Round-off allowance of a pair-mean density, kg m^-3.
_ROUNDING = 1e-9


def _block_reduce(blocks: np.ndarray, op: np.ufunc) -> np.ndarray:
    """``op`` (np.maximum, np.minimum, np.fmax) over the last axis, a power of two long,
    as a tree of element-wise operations (much faster than a reduction along a short axis)."""
    x = op(blocks[..., 0::2], blocks[..., 1::2])
    while x.shape[-1] > 1:
        x = op(x[..., 0::2], x[..., 1::2])
    return x[..., 0]


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
    a_sa = sa.reshape(-1, n_st, n_lev)
    a_ct = ct.reshape(-1, n_st, n_lev)
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
    # station blocks [b s, (b+1) s], both ends included
    e_sa = a_sa[..., 0 : body + 1 : stride]
    e_ct = a_ct[..., 0 : body + 1 : stride]
    blocks_sa = a_sa[..., :body].reshape(a_sa.shape[:2] + (n_blk, stride))
    blocks_ct = a_ct[..., :body].reshape(a_ct.shape[:2] + (n_blk, stride))
    # fmax skips NaN: NaN only for a block without any data (below the station's bottom);
    # minimum keeps NaN, so a block with any missing value gets no bound
    sa_max = np.fmax(_block_reduce(blocks_sa, np.fmax), e_sa[..., 1:])
    empty = np.isnan(sa_max)
    sa_min = np.minimum(_block_reduce(blocks_sa, np.minimum), e_sa[..., 1:])
    ct_max = np.maximum(_block_reduce(blocks_ct, np.maximum), e_ct[..., 1:])
    ct_min = np.minimum(_block_reduce(blocks_ct, np.minimum), e_ct[..., 1:])
    top_sa, top_ct = e_sa[..., :-1], e_ct[..., :-1]
    reach = (DRHO_DSA_BOUND * np.maximum(sa_max - top_sa, top_sa - sa_min)
             + DRHO_DCT_BOUND * np.maximum(ct_max - top_ct, top_ct - ct_min) + _ROUNDING)
    inside = ((sa_min >= DECIDING_RANGE["SA"][0]) & (sa_max <= DECIDING_RANGE["SA"][1])
              & (ct_min >= DECIDING_RANGE["CT"][0]) & (ct_max <= DECIDING_RANGE["CT"][1]))
    full = inside & np.isfinite(reach)  # data on every level of the block, bounds valid
    emp_a, emp_b = empty[:, :-1], empty[:, 1:]
    no_data = emp_a & emp_b
    for pr, values in interfaces.items():
        out = np.empty((n_lead, n_st - 1, n_lev))
        # the levels after the last whole block, exactly
        out[..., body:] = pair_mean(potential_density_anomaly(a_sa[..., body:], a_ct[..., body:],
                                                             pr))
        sig_top = potential_density_anomaly(top_sa, top_ct, pr)
        out_blocks = out[..., :body].reshape(n_lead, n_st - 1, n_blk, stride)
        out_blocks[...] = pair_mean(sig_top)[..., None]
        if not lo_p <= pr <= hi_p:
            undecided = np.ones(no_data.shape, dtype=bool)
        else:
            lo = np.where(full, sig_top - reach, np.nan)
            hi = np.where(full, sig_top + reach, np.nan)
            # pair blocks: both stations, or the one with data where the other has none
            lo_a, lo_b, hi_a, hi_b = lo[:, :-1], lo[:, 1:], hi[:, :-1], hi[:, 1:]
            pair_lo = np.where(emp_a, lo_b, np.where(emp_b, lo_a, 0.5 * (lo_a + lo_b)))
            pair_hi = np.where(emp_a, hi_b, np.where(emp_b, hi_a, 0.5 * (hi_a + hi_b)))
            with np.errstate(invalid="ignore"):
                sides = np.ones(pair_lo.shape, dtype=bool)
                for v in values:
                    sides &= (pair_lo > v) | (pair_hi <= v)
            undecided = ~(no_data | sides)
        lead, pair, blk = np.nonzero(undecided)
        if lead.size:
            # each station block once, though both its pairs may need it
            need = np.zeros(empty.shape, dtype=bool)
            need[:, :-1] |= undecided
            need[:, 1:] |= undecided
            station_sigma = np.empty(blocks_sa.shape)  # pages touched only where written
            at = np.nonzero(need)
            station_sigma[at] = potential_density_anomaly(blocks_sa[at], blocks_ct[at], pr)
            sig = np.stack([station_sigma[lead, pair, blk], station_sigma[lead, pair + 1, blk]],
                           axis=1)  # (block, 2, level in block)
            out_blocks[lead, pair, blk] = pair_mean(sig)[:, 0]
        result[pr] = out.reshape(out_shape)
    return result


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


def _trapezoid_levels(half: np.ndarray) -> np.ndarray:
    """Per level, the half-cell weights of the segments above and below it (..., level)."""
    out = np.empty(half.shape[:-1] + (half.shape[-1] + 1,))
    out[..., 0] = half[..., 0]
    out[..., -1] = half[..., -1]
    np.add(half[..., 1:], half[..., :-1], out=out[..., 1:-1])
    return out


def class_levels(
    sigma: np.ndarray | Sequence[np.ndarray],
    interfaces: np.ndarray,
    thickness: np.ndarray,
    width: np.ndarray,
    tail: np.ndarray | None = None,
) -> ClassLevels:
    """Class weights of every level, in compact form (dense weights: :meth:`ClassLevels.dense`).

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
    n_class = n_if + 1
    n_level = faces[0].shape[-1]
    cells = (faces[0].shape[-2], n_level - 1) if faces[0].ndim >= 2 else (-1,)
    check_trailing_shape("class_levels", "thickness", thickness, cells, "pair, level - 1")
    check_trailing_shape("class_levels", "width", width, cells, "pair, level - 1")
    if tail is not None:
        check_trailing_shape("class_levels", "tail", tail, cells[:1], "pair")
    finite = np.isfinite(faces[0])
    valid = finite[..., :-1] & finite[..., 1:]  # (..., pair, seg)
    level_class = np.zeros(faces[0].shape, dtype=np.int8)
    crossed = np.zeros(valid.shape, dtype=bool)
    for n in range(n_if):  # one interface at a time keeps memory at (pair, level)
        above = faces[n] > interfaces[n]
        level_class += above
        crossed |= above[..., :-1] != above[..., 1:]
    crossed &= valid
    scale = np.multiply(thickness, width)
    scale = np.where(valid, scale, 0.0)  # (..., pair, seg)
    half = 0.5 * scale
    column = _trapezoid_levels(half)
    # segments no interface crosses lie in one class: trapezoid weights
    np.copyto(half, 0.0, where=crossed)
    level_weight = _trapezoid_levels(half)
    # crossed segments (a few per pair): split at the sorted crossings and integrate
    # the linear field exactly over each sub-interval
    where_crossed = np.nonzero(crossed)
    idx: list[tuple[np.ndarray, ...]] = []
    vals: list[np.ndarray] = []
    if where_crossed[0].size:
        lead = where_crossed[:-1]
        seg = where_crossed[-1]
        c0 = np.stack([faces[n][..., :-1][where_crossed] - interfaces[n] for n in range(n_if)],
                      axis=-1)  # (n_crossed, interface)
        c1 = np.stack([faces[n][..., 1:][where_crossed] - interfaces[n] for n in range(n_if)],
                      axis=-1)
        w = scale[where_crossed]
        with np.errstate(invalid="ignore", divide="ignore"):
            t_cross = np.where((c0 > 0) != (c1 > 0), c0 / (c0 - c1), 0.0)
        n_c = c0.shape[0]
        bp = np.sort(np.concatenate([np.zeros((n_c, 1)), np.clip(t_cross, 0.0, 1.0),
                                     np.ones((n_c, 1))], axis=-1), axis=-1)
        a = bp[:, :-1]
        b = bp[:, 1:]
        tm = 0.5 * (a + b)  # (n_crossed, sub)
        cls = ((c0[:, None, :] + tm[:, :, None] * (c1 - c0)[:, None, :]) > 0).sum(axis=-1)
        alpha = np.zeros((n_c, n_class))
        beta = np.zeros((n_c, n_class))
        rows = np.broadcast_to(np.arange(n_c)[:, None], cls.shape)
        np.add.at(alpha, (rows, cls), b - a)
        np.add.at(beta, (rows, cls), 0.5 * (b * b - a * a))
        for i in range(n_class):
            klass = np.full(n_c, i)
            idx.append(lead + (klass, seg))
            vals.append((alpha[:, i] - beta[:, i]) * w)
            idx.append(lead + (klass, seg + 1))
            vals.append(beta[:, i] * w)
    if tail is not None:
        last = n_level - 1 - np.argmax(finite[..., ::-1], axis=-1)  # (..., pair)
        has_data = finite.any(axis=-1)
        tail_w = np.where(has_data, np.broadcast_to(tail, last.shape), 0.0)
        tail_w = tail_w[..., None]
        for target in (level_weight, column):
            cur = np.take_along_axis(target, last[..., None], axis=-1)
            np.put_along_axis(target, last[..., None], cur + tail_w, axis=-1)
    np.copyto(level_class, np.int8(n_class), where=~finite)
    if idx:
        split_index = tuple(np.concatenate(parts) for parts in zip(*idx, strict=True))
        split_weight = np.concatenate(vals)
    else:
        split_index = tuple(np.zeros(0, dtype=np.intp) for _ in range(finite.ndim + 1))
        split_weight = np.zeros(0)
    return ClassLevels(level_class, level_weight, split_index, split_weight, n_class, column)
