"""Dynamic height, relative geostrophic velocity, bottom triangles, references.

The chain is computed once per section: TEOS-10 dynamic height anomaly per
station (gsw), velocity between neighbouring stations relative to the sea
surface, and the profile extended into the bottom triangle below each pair's
deepest common level. Any reference choice then only sets one constant per
pair: the offset ``c = u_ref - v_rel(p_ref)`` added wherever the reference
velocity reaches (``response = 1``). Nothing here is recomputed when a
reference changes.

All kernels take the vertical axis last and broadcast leading dimensions.
"""

from __future__ import annotations

from dataclasses import dataclass

import gsw
import numpy as np

from sectionkit.compiled import kernel
from sectionkit.errors import Cautions, ComputationError, check_trailing_shape
from sectionkit.thermo import station_profiles

TRIANGLE_RULES = ("constant", "zero", "shear")
SHEAR_FIT_SPAN = 100.0  # dbar above the deepest common level used to fit the extrapolated shear


def dynamic_height(
    sa: np.ndarray, ct: np.ndarray, p: np.ndarray, max_dp: float = 1.0
) -> np.ndarray:
    """TEOS-10 dynamic height anomaly relative to the sea surface.

    Parameters
    ----------
    sa, ct : ndarray (..., station, level)
        Absolute Salinity (g/kg) and Conservative Temperature (degC) of each
        station, NaN below its bottom.
    p : ndarray (level,)
        Sea pressure, dbar, increasing.
    max_dp : float
        Finest spacing gsw integrates on (it interpolates when the grid is
        coarser), dbar.

    Returns
    -------
    ndarray (..., station, level)
        Dynamic height anomaly Psi (gsw.geo_strf_dyn_height, p_ref = 0),
        m^2 s^-2; NaN below the bottom.
    """
    sa, ct, p = station_profiles("dynamic_height", sa, ct, p)
    shape = sa.shape
    psi = gsw.geo_strf_dyn_height(
        sa.reshape(-1, shape[-1]), ct.reshape(-1, shape[-1]), p,
        p_ref=0.0, axis=1, max_dp=max_dp,
    )
    return np.asarray(psi, dtype=float).reshape(shape)


def relative_velocity(psi: np.ndarray, distance: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Geostrophic velocity between neighbouring stations, relative to the surface.

    Parameters
    ----------
    psi : ndarray (..., station, level)
        Dynamic height anomaly, m^2 s^-2.
    distance : ndarray (..., pair)
        Great-circle distance between neighbours, m.
    f : ndarray (..., pair)
        Coriolis parameter at the pair mid-point, s^-1.

    Returns
    -------
    ndarray (..., pair, level)
        Velocity relative to the surface, m s^-1, positive to the left of
        increasing station order; NaN below the deepest common level.
    """
    psi = np.asarray(psi, dtype=float)
    scale = np.asarray(distance) * np.asarray(f)
    check_trailing_shape("relative_velocity", "distance * f", scale,
                         (psi.shape[-2] - 1,) if psi.ndim >= 2 else (-1,), "pair")
    shape = np.broadcast_shapes(psi.shape[:-2] + (psi.shape[-2] - 1, psi.shape[-1]),
                                scale.shape + psi.shape[-1:])
    psi = np.ascontiguousarray(np.broadcast_to(psi, shape[:-2] + psi.shape[-2:]))
    scale = np.ascontiguousarray(np.broadcast_to(scale, shape[:-1]), dtype=float)
    v = np.empty(shape)
    _pair_velocity(psi.reshape((-1,) + psi.shape[-2:]), scale.reshape(-1, shape[-2]),
                   v.reshape((-1,) + shape[-2:]))
    return v


@kernel
def _pair_velocity(psi, scale, v):
    """(psi[j + 1] - psi[j]) / scale[j] for every pair j and level."""
    n_row, n_pair, n_lev = v.shape
    for r in range(n_row):
        for j in range(n_pair):
            s = scale[r, j]
            for k in range(n_lev):
                v[r, j, k] = (psi[r, j + 1, k] - psi[r, j, k]) / s


def last_valid_level(values: np.ndarray, other: np.ndarray | None = None) -> np.ndarray:
    """Index of the deepest finite value of each profile.

    Parameters
    ----------
    values : ndarray (..., level)
        Profiles, any unit; NaN below the bottom.
    other : ndarray (..., level), optional
        A second variable of the same profiles (e.g. CT beside SA): then the
        deepest level where both are finite.

    Returns
    -------
    ndarray (...,) of int
        Index of the last finite level, -1 for an all-NaN profile.
    """
    values = np.ascontiguousarray(values, dtype=float)
    other = values if other is None else np.ascontiguousarray(other, dtype=float)
    check_trailing_shape("last_valid_level", "other", other, values.shape[-1:], "level")
    other = np.ascontiguousarray(np.broadcast_to(other, values.shape))
    last = np.empty(values.shape[:-1], dtype=np.intp)
    _last_finite(values.reshape(-1, values.shape[-1]), other.reshape(-1, values.shape[-1]),
                 last.reshape(-1))
    return last


@kernel
def _last_finite(values, other, last):
    """Index of the last level where both rows are finite (searched from the end), -1 if none."""
    n_row, n_lev = values.shape
    for r in range(n_row):
        k = n_lev - 1
        while k >= 0 and not (np.isfinite(values[r, k]) and np.isfinite(other[r, k])):
            k -= 1
        last[r] = k


def pair_level_limits(station_last: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Deepest common and deepest single-station level of each pair.

    Parameters
    ----------
    station_last : ndarray (..., station) of int
        Index of each station's last valid level.

    Returns
    -------
    common : ndarray (..., pair) of int
        Index of the deepest level both stations reach.
    deepest : ndarray (..., pair) of int
        Index of the deepest level either station reaches.
    """
    a = station_last[..., :-1]
    b = station_last[..., 1:]
    return np.minimum(a, b), np.maximum(a, b)


def extend_into_bottom_triangle(
    v_rel: np.ndarray,
    p: np.ndarray,
    common: np.ndarray,
    deepest: np.ndarray,
    rule: str = "constant",
) -> tuple[np.ndarray, np.ndarray]:
    """Velocity below each pair's deepest common level, and where a reference reaches.

    Parameters
    ----------
    v_rel : ndarray (..., pair, level)
        Velocity relative to the surface, m s^-1; NaN below the deepest
        common level.
    p : ndarray (level,)
        Pressure grid, dbar.
    common : ndarray (..., pair) of int
        Index of the deepest common level.
    deepest : ndarray (..., pair) of int
        Index of the deepest level either station reaches.
    rule : {"constant", "zero", "shear"}
        ``constant``: the velocity at the deepest common level continues
        down (common practice). ``zero``: no flow in the triangle, whatever
        the reference. ``shear``: the shear of the deepest
        ``SHEAR_FIT_SPAN`` dbar above the deepest common level continues
        (least-squares slope).

    Returns
    -------
    v_eff : ndarray (..., pair, level)
        Velocity relative to the surface down to the deeper station's bottom,
        m s^-1 (NaN below it).
    response : ndarray (..., pair, level)
        1 where an added reference velocity reaches, 0 where it does not
        (the triangle under the ``zero`` rule), NaN below the bottom.
    """
    if rule not in TRIANGLE_RULES:
        raise ComputationError(
            f"bottom_triangle = {rule!r} is not known; use one of {', '.join(TRIANGLE_RULES)}"
        )
    p = np.asarray(p, dtype=float)
    check_trailing_shape("extend_into_bottom_triangle", "p", p, v_rel.shape[-1:], "level")
    check_trailing_shape("extend_into_bottom_triangle", "common", common, v_rel.shape[-2:-1],
                         "pair")
    shape = v_rel.shape
    common = np.broadcast_to(common, shape[:-1])
    deepest = np.broadcast_to(deepest, shape[:-1])
    safe_common = np.clip(common, 0, None)[..., None]
    slope = np.zeros(shape[:-1])
    if rule == "shear":  # least-squares shear over the deepest SHEAR_FIT_SPAN dbar per pair
        p_common = p[safe_common]
        window = (np.arange(p.size) <= common[..., None]) & (p >= p_common - SHEAR_FIT_SPAN)
        pw = np.where(window, p, np.nan)
        vw = np.where(window, v_rel, np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            pm = np.nanmean(pw, axis=-1, keepdims=True)
            vm = np.nanmean(vw, axis=-1, keepdims=True)
            fit = np.nansum((pw - pm) * (vw - vm), axis=-1) / np.nansum((pw - pm) ** 2, axis=-1)
        slope = np.where(np.isfinite(fit), fit, 0.0)
    n_lev = shape[-1]
    v_eff = np.empty(shape)
    response = np.empty(shape)
    _triangle_kernel(np.ascontiguousarray(v_rel, dtype=float).reshape(-1, n_lev), p,
                     np.ascontiguousarray(common, dtype=np.int64).reshape(-1),
                     np.ascontiguousarray(deepest, dtype=np.int64).reshape(-1),
                     slope.reshape(-1), rule == "zero",
                     v_eff.reshape(-1, n_lev), response.reshape(-1, n_lev))
    return v_eff, response


@kernel
def _triangle_kernel(v_rel, p, common, deepest, slope, zero, v_eff, response):
    """Rows of ``extend_into_bottom_triangle``: the profile down to the deepest common
    level, the fill below it (the value there plus ``slope`` times the pressure below it, or
    zero), NaN below the deepest level; response 1 where a reference reaches."""
    n_row, n_lev = v_rel.shape
    reach = 0.0 if zero else 1.0
    for r in range(n_row):
        kc = common[r]
        kd = deepest[r]
        kc_safe = max(kc, 0)
        v_c = v_rel[r, kc_safe]
        p_c = p[kc_safe]
        s = slope[r]
        for k in range(n_lev):
            if k <= kc:
                v_eff[r, k] = v_rel[r, k]
                response[r, k] = 1.0
            elif k <= kd:
                v_eff[r, k] = 0.0 if zero else v_c + s * (p[k] - p_c)
                response[r, k] = reach
            else:
                v_eff[r, k] = np.nan
                response[r, k] = np.nan


def pair_mean(station_values: np.ndarray) -> np.ndarray:
    """Average of neighbouring stations; the deeper one alone where only it has data.

    Parameters
    ----------
    station_values : ndarray (..., station, level)
        Any property, any unit; NaN below the bottom.

    Returns
    -------
    ndarray (..., pair, level)
        Pair-mean property, same unit.
    """
    values = np.ascontiguousarray(station_values, dtype=float)
    shape = values.shape
    mean = np.empty(shape[:-2] + (shape[-2] - 1, shape[-1]))
    _pair_mean_kernel(values.reshape((-1,) + shape[-2:]), mean.reshape((-1,) + mean.shape[-2:]))
    return mean


@kernel
def _pair_mean_kernel(values, mean):
    """(a + b) / 2 of neighbouring stations; a or b alone where the other is NaN."""
    n_row, n_st, n_lev = values.shape
    for r in range(n_row):
        for j in range(n_st - 1):
            for k in range(n_lev):
                a = values[r, j, k]
                b = values[r, j + 1, k]
                if np.isnan(b):
                    mean[r, j, k] = a  # the deeper station alone (NaN where both are)
                elif np.isnan(a):
                    mean[r, j, k] = b
                else:
                    mean[r, j, k] = (a + b) * 0.5


def value_at_pressure(profile: np.ndarray, p: np.ndarray, p_at: np.ndarray) -> np.ndarray:
    """Linear interpolation of each profile at its own pressure.

    Parameters
    ----------
    profile : ndarray (..., pair, level)
        Values on the grid, any unit.
    p : ndarray (level,)
        Pressure grid, dbar.
    p_at : ndarray (..., pair)
        Pressure to interpolate at, dbar, within the grid.

    Returns
    -------
    ndarray (..., pair)
        Interpolated values, same unit.
    """
    p = np.ascontiguousarray(p, dtype=float)
    profile = np.asarray(profile, dtype=float)
    check_trailing_shape("value_at_pressure", "p", p, profile.shape[-1:], "level")
    shape = np.broadcast_shapes(profile.shape[:-1], np.shape(p_at))
    profile = np.ascontiguousarray(np.broadcast_to(profile, shape + profile.shape[-1:]))
    p_at = np.ascontiguousarray(np.broadcast_to(np.asarray(p_at, dtype=float), shape))
    out = np.empty(shape)
    _value_at_pressure(profile.reshape(-1, p.size), p, p_at.reshape(-1), out.reshape(-1))
    return out


@kernel
def _value_at_pressure(profile, p, p_at, out):
    """Each row linearly interpolated at its own pressure (the end segments hold their
    end values beyond the grid; the value at a grid level exactly that level's)."""
    n = p.size
    for r in range(profile.shape[0]):
        if np.isnan(p_at[r]):
            out[r] = np.nan
            continue
        hi = min(max(np.searchsorted(p, p_at[r], side="right"), 1), n - 1)
        lo = hi - 1
        w = min(max((p_at[r] - p[lo]) / (p[hi] - p[lo]), 0.0), 1.0)
        v_lo = profile[r, lo]
        out[r] = v_lo if w == 0.0 else v_lo + w * (profile[r, hi] - v_lo)


def isopycnal_pressure(
    sigma: np.ndarray, p: np.ndarray, common: np.ndarray, value: float
) -> tuple[np.ndarray, np.ndarray]:
    """Pressure of an isopycnal in each pair-mean profile.

    Parameters
    ----------
    sigma : ndarray (..., pair, level)
        Pair-mean potential density anomaly at the isopycnal's reference
        pressure, kg m^-3.
    p : ndarray (level,)
        Pressure grid, dbar.
    common : ndarray (..., pair) of int
        Index of the deepest common level.
    value : float
        Potential density anomaly of the isopycnal, kg m^-3.

    Returns
    -------
    p_iso : ndarray (..., pair)
        Pressure of the first crossing from the surface down, dbar; the
        deepest common level where the pair does not reach the isopycnal,
        0 where the whole column is denser.
    status : ndarray (..., pair) of int
        0 found, 1 not reached (fell back to the deepest common level),
        2 outcropped (the surface is already denser; 0 dbar used).
    """
    p = np.asarray(p, dtype=float)
    check_trailing_shape("isopycnal_pressure", "p", p, np.shape(sigma)[-1:], "level")
    check_trailing_shape("isopycnal_pressure", "common", common, np.shape(sigma)[-2:-1], "pair")
    k = np.arange(p.size)
    usable = k <= common[..., None]
    denser = np.where(usable, sigma >= value, False)
    any_denser = denser.any(axis=-1)
    first = np.argmax(denser, axis=-1)
    prev = np.clip(first - 1, 0, None)
    s_hi = np.take_along_axis(sigma, first[..., None], axis=-1)[..., 0]
    s_lo = np.take_along_axis(sigma, prev[..., None], axis=-1)[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(first > 0, (value - s_lo) / (s_hi - s_lo), 0.0)
    frac = np.clip(np.nan_to_num(frac), 0.0, 1.0)
    p_found = p[prev] + frac * (p[first] - p[prev])
    p_common = p[np.clip(common, 0, None)]
    outcrop = any_denser & (first == 0)
    p_iso = np.where(any_denser, np.where(outcrop, 0.0, p_found), p_common)
    status = np.where(any_denser, np.where(outcrop, 2, 0), 1)
    return p_iso, status


@dataclass(frozen=True)
class ReferenceChoice:
    """How one pair's reference velocity is set.

    Parameters
    ----------
    kind : {"pressure", "bottom", "isopycnal", "velocity"}
        Level of no motion at a pressure, at the deepest common level, on an
        isopycnal, or a known velocity at a pressure (direct measurement).
    pressure : float, optional
        Reference pressure for ``pressure`` and ``velocity`` kinds, dbar.
    sigma : float, optional
        Isopycnal potential density anomaly, kg m^-3.
    sigma_p_ref : float
        Reference pressure of that potential density, dbar.
    velocity : float
        Known velocity at ``pressure`` (``velocity`` kind), m s^-1, positive
        to the left of increasing station order.
    velocity_error : float
        One standard deviation of the known velocity, m s^-1.
    """

    kind: str = "pressure"
    pressure: float | None = None
    sigma: float | None = None
    sigma_p_ref: float = 0.0
    velocity: float = 0.0
    velocity_error: float = 0.0

    def describe(self) -> str:
        """A short phrase for captions and tables."""
        if self.kind == "pressure":
            return f"level of no motion at {self.pressure:g} dbar"
        if self.kind == "bottom":
            return "level of no motion at the deepest common level"
        if self.kind == "isopycnal":
            return f"level of no motion on sigma_{self.sigma_p_ref / 1000:g} = {self.sigma:g}"
        return (
            f"known velocity {self.velocity:g} ± {self.velocity_error:g} m/s "
            f"at {self.pressure:g} dbar"
        )


def _check_measured_depth(
    pressure: float, p_common: np.ndarray, p_deepest: np.ndarray | None, rule: str,
    labels: list[str],
) -> None:
    """Refuse a known velocity the section cannot hold at the depth it was measured."""
    lead = tuple(range(p_common.ndim - 1))
    below = np.any(pressure > p_common, axis=lead)
    for j in np.flatnonzero(below):
        pc = float(np.min(p_common[..., j]))
        if p_deepest is None or rule != "constant":
            why = ("the bottom triangle's velocity is not the measured one under "
                   f"bottom_triangle = {rule!r}" if p_deepest is not None
                   else "the pair's bottom triangle is not known here")
            raise ComputationError(
                f"pair {labels[j]}: the known velocity at {pressure:g} dbar lies below the "
                f"pair's deepest common level ({pc:g} dbar) and {why}; use "
                "bottom_triangle = \"constant\", or give the velocity at or above "
                f"{pc:g} dbar"
            )
        pd = float(np.min(p_deepest[..., j]))
        if pressure > pd:
            raise ComputationError(
                f"pair {labels[j]}: the known velocity at {pressure:g} dbar lies below both "
                f"stations (the deeper one reaches {pd:g} dbar, the deepest common level is "
                f"{pc:g} dbar); give the pressure where it was measured in the water column"
            )


def resolve_references(
    choices: list[ReferenceChoice],
    v_eff: np.ndarray,
    p: np.ndarray,
    common: np.ndarray,
    sigma_at: dict[float, np.ndarray] | None = None,
    cautions: Cautions | None = None,
    pair_labels: list[str] | None = None,
    *,
    deepest: np.ndarray | None = None,
    bottom_triangle: str = "constant",
) -> tuple[np.ndarray, np.ndarray]:
    """Reference pressure and velocity offset of every pair.

    Parameters
    ----------
    choices : list of ReferenceChoice, one per pair
        The reference of each pair.
    v_eff : ndarray (..., pair, level)
        Velocity relative to the surface, m s^-1.
    p : ndarray (level,)
        Pressure grid, dbar.
    common : ndarray (..., pair) of int
        Index of each pair's deepest common level.
    sigma_at : dict of float -> ndarray (..., pair, level), optional
        Pair-mean potential density anomaly (kg m^-3) keyed by its reference
        pressure (dbar); needed for isopycnal references.
    cautions : Cautions, optional
        Collects fall-backs (reference deeper than the pair, isopycnal not
        reached).
    pair_labels : list of str, optional
        Names of the pairs for messages, e.g. ``"south:14"``.
    deepest : ndarray (..., pair) of int, optional
        Index of the deepest level either station reaches; without it a
        known velocity below the deepest common level is refused.
    bottom_triangle : {"constant", "zero", "shear"}
        Velocity rule of the bottom triangles. A known velocity measured
        below the deepest common level holds there under ``constant`` (the
        triangle's velocity is the one the measurement fixes); under ``zero``
        and ``shear`` the triangle's velocity is not the one measured, so
        such a reference is refused.

    Returns
    -------
    p_used : ndarray (..., pair)
        The pressure actually used, dbar.
    offset : ndarray (..., pair)
        Velocity to add to ``v_eff`` where the reference reaches,
        ``u_ref - v_eff(p_used)``, m s^-1.
    """
    p = np.asarray(p, dtype=float)
    n_pair = v_eff.shape[-2]
    if len(choices) != n_pair:
        raise ComputationError(f"{len(choices)} reference choices for {n_pair} pairs")
    labels = pair_labels or [str(j) for j in range(n_pair)]
    p_common = p[np.clip(common, 0, None)]
    p_used = np.array(p_common, dtype=float, copy=True)
    u_ref = np.zeros_like(p_used)
    too_deep: list[int] = []  # pairs whose reference pressure lies below them
    # pairs sharing a choice are resolved together: grouped by object first (most pairs
    # share the one global choice), then equal choices merged (hashing one per object)
    by_object: dict[int, tuple[ReferenceChoice, list[int]]] = {}
    for j, choice in enumerate(choices):
        entry = by_object.get(id(choice))
        if entry is None:
            entry = by_object[id(choice)] = (choice, [])
        entry[1].append(j)
    groups: dict[ReferenceChoice, list[int]] = {}
    for choice, members in by_object.values():
        groups.setdefault(choice, []).extend(members)
    for choice, members in groups.items():
        idx = np.asarray(sorted(members))
        pc = p_common[..., idx]
        if choice.kind == "bottom":
            pj = pc
        elif choice.kind == "pressure":
            if choice.pressure is None:
                raise ComputationError(
                    f"pair {labels[idx[0]]}: a {choice.kind} reference needs a pressure"
                )
            # a level of no motion below the pair falls back to its deepest common level
            pj = np.minimum(choice.pressure, pc)
            if cautions is not None:
                short = np.any(choice.pressure > pc, axis=tuple(range(pc.ndim - 1)))
                too_deep.extend(int(j) for j in idx[short])
        elif choice.kind == "velocity":
            if choice.pressure is None:
                raise ComputationError(
                    f"pair {labels[idx[0]]}: a {choice.kind} reference needs a pressure"
                )
            pd = None if deepest is None else p[np.clip(deepest[..., idx], 0, None)]
            _check_measured_depth(choice.pressure, pc, pd, bottom_triangle,
                                  [labels[j] for j in idx])
            pj = np.broadcast_to(np.float64(choice.pressure), pc.shape)  # stays at its depth
            u_ref[..., idx] = choice.velocity
        elif choice.kind == "isopycnal":
            if sigma_at is None or choice.sigma_p_ref not in sigma_at:
                raise ComputationError(
                    f"pair {labels[idx[0]]}: no potential density referenced to "
                    f"{choice.sigma_p_ref:g} dbar was prepared for the isopycnal reference"
                )
            pj, status = isopycnal_pressure(
                sigma_at[choice.sigma_p_ref][..., idx, :], p, common[..., idx], choice.sigma
            )
            lead = tuple(range(status.ndim - 1))
            for code, kind, text in (
                (1, "isopycnal-not-reached", "lies below the deepest common level of pair(s) {}; "
                 "the deepest common level is used"),
                (2, "isopycnal-outcrops", "outcrops at pair(s) {} (the surface is denser); the "
                 "sea surface is used as the reference"),
            ):
                hit = idx[np.any(status == code, axis=lead)]
                if cautions is not None and hit.size:
                    cautions.add(kind, f"the isopycnal {choice.sigma:g} (p_ref "
                                 f"{choice.sigma_p_ref:g} dbar) " + text.format(
                                     ", ".join(labels[j] for j in hit)))
        else:
            raise ComputationError(
                f"pair {labels[idx[0]]}: unknown reference kind {choice.kind!r}"
            )
        p_used[..., idx] = pj
    if cautions is not None and too_deep:
        listed = ", ".join(f"{labels[j]} ({float(np.min(p_common[..., j])):g})"
                           for j in sorted(too_deep))
        cautions.add(
            "reference-below-pair",
            f"{len(too_deep)} pair(s) do not reach their reference pressure; their deepest "
            f"common level is used instead: {listed} (dbar)",
        )
    v_at_ref = value_at_pressure(v_eff, p, p_used)
    return p_used, u_ref - v_at_ref
