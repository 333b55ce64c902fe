"""TEOS-10 fields and the common pressure grid.

Two jobs, both on plain numpy arrays with the vertical axis last:

- conversions at the edge of gsw: kelvin to degrees Celsius, pascal to
  decibar, practical to Absolute Salinity (each station at its own position),
  in-situ or potential temperature to Conservative Temperature;
- gridding of measured profiles onto the section's common pressure grid
  0, dp, 2 dp, ... by linear interpolation in pressure, with the stated rules
  of :class:`GriddingRules` for gaps, the sea surface and the sea floor.

Thin xarray wrappers (``xr.apply_ufunc`` with ``dask="parallelized"``) let the
conversions take extra leading dimensions and dask-backed arrays unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import gsw
import numpy as np
import xarray as xr

from sectionkit.compiled import kernel
from sectionkit.eos import specific_volume
from sectionkit.errors import ComputationError, SectionDataError, check_trailing_shape

#: Offset between the kelvin and Celsius scales, K.
KELVIN_OFFSET = 273.15
#: Pascal per decibar.
PA_PER_DBAR = 1.0e4

TEMPERATURE_KINDS = ("in-situ", "potential", "conservative")
SALINITY_KINDS = ("practical", "absolute")


# ---------------------------------------------------------------------------
# Unit conversions
# ---------------------------------------------------------------------------


def kelvin_to_celsius(t: np.ndarray) -> np.ndarray:
    """Temperature in kelvin to degrees Celsius.

    Parameters
    ----------
    t : ndarray
        Temperature, K.

    Returns
    -------
    ndarray
        Temperature, degC.
    """
    return np.asarray(t, dtype=float) - KELVIN_OFFSET


def pascal_to_dbar(p: np.ndarray) -> np.ndarray:
    """Pressure in pascal to decibar.

    Parameters
    ----------
    p : ndarray
        Sea pressure, Pa.

    Returns
    -------
    ndarray
        Sea pressure, dbar.
    """
    return np.asarray(p, dtype=float) / PA_PER_DBAR


def pressure_from_depth(depth: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Sea pressure at a depth below the sea surface (gsw.p_from_z).

    Parameters
    ----------
    depth : ndarray (...)
        Depth, m, positive down.
    lat : ndarray (...)
        Latitude, degrees_north.

    Returns
    -------
    ndarray (...)
        Sea pressure, dbar.
    """
    return gsw.p_from_z(-np.asarray(depth, dtype=float), np.asarray(lat, dtype=float))


def depth_from_pressure(p: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Depth below the sea surface of a sea pressure (gsw.z_from_p).

    Parameters
    ----------
    p : ndarray (...)
        Sea pressure, dbar.
    lat : ndarray (...)
        Latitude, degrees_north.

    Returns
    -------
    ndarray (...)
        Depth, m, positive down.
    """
    return -gsw.z_from_p(np.asarray(p, dtype=float), np.asarray(lat, dtype=float))


# ---------------------------------------------------------------------------
# TEOS-10 conversions (kernels)
# ---------------------------------------------------------------------------


def absolute_salinity(
    SP: np.ndarray, p: np.ndarray, lon: np.ndarray, lat: np.ndarray
) -> np.ndarray:
    """Absolute Salinity from Practical Salinity at each station's own position.

    Parameters
    ----------
    SP : ndarray (..., station, level)
        Practical Salinity, PSS-78 (unitless).
    p : ndarray (..., station, level)
        Sea pressure, dbar.
    lon : ndarray (..., station)
        Station longitude, degrees_east.
    lat : ndarray (..., station)
        Station latitude, degrees_north.

    Returns
    -------
    ndarray (..., station, level)
        Absolute Salinity, g/kg (gsw.SA_from_SP: the salinity anomaly ratio
        depends on position and pressure).
    """
    lon = np.asarray(lon, dtype=float)[..., None]
    lat = np.asarray(lat, dtype=float)[..., None]
    return gsw.SA_from_SP(SP, p, lon, lat)


#: Pressures, dbar, at which the TEOS-10 Absolute Salinity Anomaly Ratio atlas has its
#: levels, as gsw.SAAR interpolates it. Found empirically (gsw 3.6.23): the second
#: differences of gsw.SAAR along pressure at 1 dbar steps, 0 to 9000 dbar, at 4000
#: random positions, are non-zero (beyond 1e-9 of the profile's SAAR) only at these
#: pressures; a linear interpolation between gsw.SAAR at them reproduces gsw.SAAR at
#: 0.1 dbar steps from 0 to 7000 dbar at 3000 random positions bit for bit. Below the
#: deepest atlas level of a position's surrounding cells gsw holds SAAR constant (the
#: values at the deeper knots are then equal), and below the last knot everywhere.
#: tests/test_preformed_salinity.py checks the whole claim against gsw.Sstar_from_SA.
SAAR_ATLAS_PRESSURES = np.array([
    0.0, 10.0, 20.0, 30.0, 40.0, 50.0, 76.0, 101.0, 126.0, 151.0, 176.0, 202.0, 252.0,
    303.0, 353.0, 404.0, 505.0, 606.0, 707.0, 808.0, 909.0, 1010.0, 1111.0, 1213.0, 1314.0,
    1416.0, 1517.0, 1771.0, 2025.0, 2279.0, 2534.0, 2789.0, 3045.0, 3300.0, 3556.0, 3812.0,
    4069.0, 4325.0, 4583.0, 4840.0, 5098.0, 5355.0, 5614.0, 5872.0, 6131.0,
])
#: TEOS-10 r_1 of Preformed Salinity, S* = SA (1 - r_1 SAAR) / (1 + SAAR)
#: (McDougall et al. 2012, Ocean Science 8, 1123-1134; gsw.Sstar_from_SA).
SSTAR_R1 = 0.35


@kernel
def _sstar_ratio_kernel(knot_saar: np.ndarray, rows: np.ndarray, k: np.ndarray,
                        t: np.ndarray, out: np.ndarray) -> None:
    """S*/SA at every level of the stations ``rows`` from their SAAR at the atlas pressures.

    SAAR between knots ``k`` and ``k + 1`` is ``a + t (b - a)``, gsw's own
    interpolation formula in pressure, then S*/SA is gsw's
    ``(1 - r_1 SAAR) / (1 + SAAR)``: the same operations in the same order.
    """
    for i in range(rows.size):
        s = rows[i]
        for j in range(k.size):
            a = knot_saar[i, k[j]]
            saar = a + t[j] * (knot_saar[i, k[j] + 1] - a)
            out[s, j] = (1.0 - SSTAR_R1 * saar) / (1.0 + saar)


def preformed_salinity_ratio(p: np.ndarray, lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Preformed over Absolute Salinity, S*/SA, at each station position and pressure.

    gsw.Sstar_from_SA is linear in SA with a ratio that depends on position
    and pressure only, through SAAR from the TEOS-10 atlas; at a fixed
    position SAAR is linear in pressure between the atlas levels
    (:data:`SAAR_ATLAS_PRESSURES`) and constant below the deepest one. So
    gsw.SAAR is evaluated at those levels only (tens per station instead of
    one per grid level) and interpolated as gsw does; the result equals
    gsw.Sstar_from_SA(1, p, lon, lat) to round-off (bit for bit on the
    machines it was checked on).

    Where that cannot be guaranteed, gsw.Sstar_from_SA itself evaluates
    every level: a pressure grid that is not finite and non-negative,
    positions outside gsw's documented range (longitude -360 to 360,
    latitude -86 to 90 degrees, where the atlas is defined) and positions whose
    atlas SAAR is missing at some level. A position that is not finite
    (NaN or infinite) gives NaN without calling gsw.

    Parameters
    ----------
    p : ndarray (level,)
        Sea pressure, dbar.
    lon : ndarray (..., station)
        Station longitude, degrees_east.
    lat : ndarray (..., station)
        Station latitude, degrees_north.

    Returns
    -------
    ndarray (..., station, level)
        S*/SA (unitless); NaN where gsw has no SAAR (outside the atlas).
    """
    p = np.asarray(p, dtype=float)
    if p.ndim != 1:
        raise ComputationError(f"preformed_salinity_ratio: p must be one profile of pressures "
                               f"(level,), got shape {p.shape}")
    lon, lat = np.broadcast_arrays(np.asarray(lon, dtype=float), np.asarray(lat, dtype=float))
    shape = lon.shape
    lon, lat = lon.ravel(), lat.ravel()
    out = np.empty((lon.size, p.size))
    finite = np.isfinite(lon) & np.isfinite(lat)
    out[~finite] = np.nan
    if p.size == 0:
        return out.reshape(*shape, p.size)
    knots = SAAR_ATLAS_PRESSURES
    fast = finite & (np.abs(lon) <= 360.0) & (lat >= -86.0) & (lat <= 90.0)
    if not (np.all(np.isfinite(p)) and np.min(p) >= 0.0):
        fast[:] = False
    if np.any(fast):
        # gsw's interval and fraction of each level (the same for every position)
        pc = np.minimum(p, knots[-1])
        k = np.clip(np.searchsorted(knots, pc, side="right") - 1, 0, knots.size - 2)
        t = (pc - knots[k]) / (knots[k + 1] - knots[k])
        used = knots[: int(k.max()) + 2]
        rows = np.flatnonzero(fast)
        knot_saar = gsw.SAAR(used[None, :], lon[rows, None], lat[rows, None])
        whole = np.all(np.isfinite(knot_saar), axis=-1)  # SAAR missing at a level: gsw
        _sstar_ratio_kernel(np.ascontiguousarray(knot_saar[whole]), rows[whole], k, t, out)
        fast[rows[~whole]] = False
    slow = finite & ~fast
    if np.any(slow):
        out[slow] = gsw.Sstar_from_SA(1.0, p, lon[slow, None], lat[slow, None])
    return out.reshape(*shape, p.size)


def conservative_temperature(
    temperature: np.ndarray, SA: np.ndarray, p: np.ndarray, kind: str
) -> np.ndarray:
    """Conservative Temperature from in-situ, potential or Conservative Temperature.

    Parameters
    ----------
    temperature : ndarray (...)
        Temperature of the given kind, degC (ITS-90; potential temperature
        referenced to 0 dbar).
    SA : ndarray (...)
        Absolute Salinity, g/kg.
    p : ndarray (...)
        Sea pressure, dbar (used for in-situ temperature only).
    kind : {"in-situ", "potential", "conservative"}
        What ``temperature`` is.

    Returns
    -------
    ndarray (...)
        Conservative Temperature, degC.
    """
    if kind == "in-situ":
        return gsw.CT_from_t(SA, temperature, p)
    if kind == "potential":
        return gsw.CT_from_pt(SA, temperature)
    if kind == "conservative":
        return np.array(temperature, dtype=float)
    raise SectionDataError(
        f"temperature kind {kind!r} is not known; use one of {', '.join(TEMPERATURE_KINDS)}"
    )


def absolute_salinity_da(
    SP: xr.DataArray, lon: xr.DataArray, lat: xr.DataArray, pressure_dim: str = "pressure"
) -> xr.DataArray:
    """Absolute Salinity of a DataArray (thin wrapper of :func:`absolute_salinity`).

    Parameters
    ----------
    SP : DataArray (..., station, pressure)
        Practical Salinity, PSS-78, with a ``pressure`` coordinate in dbar.
    lon, lat : DataArray (..., station)
        Station position, degrees_east and degrees_north.
    pressure_dim : str
        Name of the vertical dimension (its coordinate is pressure, dbar).

    Returns
    -------
    DataArray (..., station, pressure)
        Absolute Salinity, g/kg; dask-backed input stays lazy.
    """
    p = SP[pressure_dim]
    result = xr.apply_ufunc(
        lambda sp, pp, lo, la: gsw.SA_from_SP(sp, pp, lo, la),
        SP,
        p,
        lon,
        lat,
        dask="parallelized",
        output_dtypes=[float],
    )
    return result.assign_attrs(units="g/kg", long_name="Absolute Salinity")


def conservative_temperature_da(
    temperature: xr.DataArray, SA: xr.DataArray, kind: str, pressure_dim: str = "pressure"
) -> xr.DataArray:
    """Conservative Temperature of a DataArray (wrapper of :func:`conservative_temperature`).

    Parameters
    ----------
    temperature : DataArray (..., pressure)
        Temperature of the given kind, degC, with a pressure coordinate in dbar.
    SA : DataArray (..., pressure)
        Absolute Salinity, g/kg.
    kind : {"in-situ", "potential", "conservative"}
        What ``temperature`` is.
    pressure_dim : str
        Name of the vertical dimension (its coordinate is pressure, dbar).

    Returns
    -------
    DataArray (..., pressure)
        Conservative Temperature, degC; dask-backed input stays lazy.
    """
    result = xr.apply_ufunc(
        lambda t, sa, pp: conservative_temperature(t, sa, pp, kind),
        temperature,
        SA,
        temperature[pressure_dim],
        dask="parallelized",
        output_dtypes=[float],
    )
    return result.assign_attrs(units="degC", long_name="Conservative Temperature")


# ---------------------------------------------------------------------------
# One pass of the equation of state: specific volume, density, dynamic height
# ---------------------------------------------------------------------------

#: Pascal per decibar, as gsw's dynamic height integrates (db2pa).
_DB2PA = 1.0e4
#: Largest number of interpolated points handled in one block (bounds memory).
_BLOCK_POINTS = 2_000_000


@dataclass
class SpecificVolumePass:
    """The equation of state evaluated once on a gridded section.

    Attributes
    ----------
    specific_volume : ndarray (..., station, level)
        Specific volume, m^3 kg^-1 (TEOS-10 75-term polynomial, as gsw.specvol:
        :func:`sectionkit.eos.specific_volume`); NaN below the bottom.
    standard : ndarray (level,)
        Specific volume of the standard ocean (SSO, 0 degC) at each level,
        m^3 kg^-1 (gsw.specvol_SSO_0).
    dynamic_height : ndarray (..., station, level)
        Dynamic height anomaly relative to the sea surface, m^2 s^-2, as
        gsw.geo_strf_dyn_height (p_ref = 0) computes it; NaN below the bottom.
    """

    specific_volume: np.ndarray
    standard: np.ndarray
    dynamic_height: np.ndarray

    @property
    def anomaly(self) -> np.ndarray:
        """Specific volume anomaly relative to the standard ocean, m^3 kg^-1.

        ``specific_volume - standard``: gsw.specvol_anom_standard is this
        difference (equal bit for bit in gsw 3.6); a new array at each call.
        """
        return self.specific_volume - self.standard

    def in_situ_density(self, out: np.ndarray | None = None) -> np.ndarray:
        """In-situ density as the reciprocal of the specific volume, kg m^-3.

        Parameters
        ----------
        out : ndarray (..., station, level), optional
            Buffer to write into (``specific_volume`` itself when it is no
            longer needed).

        Returns
        -------
        ndarray (..., station, level)
            1 / specific_volume, kg m^-3 (gsw.rho is this reciprocal).
        """
        return np.reciprocal(self.specific_volume, out=out)


def _uniform_refinement(p: np.ndarray, max_dp: float) -> int | None:
    """Points per grid step gsw's dynamic height integrates on, when the fast path applies.

    The fast path needs a grid 0, dp, 2 dp, ... with dp an integer multiple
    of ``max_dp``; otherwise None.
    """
    if p.ndim != 1 or p.size < 2 or p[0] != 0.0 or not max_dp > 0:
        return None
    step = np.diff(p)
    dp = float(step[0])
    if dp <= 0 or np.any(np.abs(step - dp) > 1e-9 * dp):
        return None
    if dp <= max_dp:
        return 1
    n = int(round(dp / max_dp))
    if abs(n * max_dp - dp) > 1e-9 * dp:
        return None
    return n


def valid_from_surface(sa: np.ndarray, ct: np.ndarray | None = None
                       ) -> tuple[np.ndarray, bool]:
    """Valid levels of each profile from the surface down, and whether that is all its data.

    Parameters
    ----------
    sa : ndarray (profile, level)
        Absolute Salinity, g/kg (or any profile variable, any unit); NaN below the bottom.
    ct : ndarray (profile, level), optional
        Conservative Temperature, degC; a level is valid where both are. Without
        it, ``sa`` alone.

    Returns
    -------
    count : ndarray (profile,) of int
        Number of valid levels above each profile's first invalid one.
    whole : bool
        True when no profile has a valid level below its first invalid one
        (NaN only below the bottom).
    """
    sa = np.ascontiguousarray(sa, dtype=float)
    ct = sa if ct is None else np.ascontiguousarray(ct, dtype=float)
    count = np.empty(sa.shape[0], dtype=np.int64)
    return count, bool(_valid_from_surface(sa, ct, count))


@kernel
def _valid_from_surface(sa: np.ndarray, ct: np.ndarray, count: np.ndarray) -> bool:
    """Number of valid levels above each profile's first NaN (into ``count``), and whether
    every profile is NaN throughout below it (no interior gap)."""
    n_lev = sa.shape[1]
    whole = True
    for i in range(sa.shape[0]):
        c = 0
        while c < n_lev and not np.isnan(sa[i, c] + ct[i, c]):
            c += 1
        count[i] = c
        for k in range(c + 1, n_lev):
            if not np.isnan(sa[i, k] + ct[i, k]):
                whole = False
                break
    return whole


@kernel
def _integrate_on_grid(v: np.ndarray, standard: np.ndarray, count: np.ndarray,
                       dp: np.ndarray, scale: float, psi: np.ndarray) -> None:
    """Dynamic height by the trapezoid rule on the grid itself, one pass per profile.

    The anomaly ``v - standard`` of each level is formed as it is needed; each
    step is ``(b[k] + b[k-1]) * scale`` when ``scale`` is finite (``-dp/2
    db2pa`` with dp/2 a power of two: exactly gsw's ``0.5 (b + b) dp db2pa``
    rounded once), otherwise gsw's product term by term; the sum runs from the
    surface; NaN from the first level below the bottom and for profiles of
    fewer than two levels.
    """
    n_lev = v.shape[1]
    exact = np.isfinite(scale)
    for i in range(v.shape[0]):
        c = count[i]
        if c < 2:
            psi[i, :] = np.nan
            continue
        psi[i, 0] = 0.0
        b0 = v[i, 0] - standard[0]
        for k in range(1, c):
            b1 = v[i, k] - standard[k]
            if exact:
                step = (b1 + b0) * scale
            else:
                step = -((((b1 + b0) * 0.5) * dp[k - 1]) * _DB2PA)
            psi[i, k] = psi[i, k - 1] + step
            b0 = b1
        for k in range(c, n_lev):
            psi[i, k] = np.nan


@kernel
def _sign(x: float) -> float:
    """numpy's sign of a number that is not NaN."""
    return 1.0 if x > 0.0 else (-1.0 if x < 0.0 else 0.0)


@kernel
def _pchip_edge(d0: float, d1: float) -> float:
    """End-point derivative (times the grid step) of the shape-preserving cubic on an even
    grid, from the first two level differences (the scipy/gsw edge rule)."""
    d = 0.5 * (3.0 * d0 - d1)
    if _sign(d) != _sign(d0):
        return 0.0
    if _sign(d0) != _sign(d1) and abs(d) > 3.0 * abs(d0):
        return 3.0 * d0
    return d


@kernel
def _pchip_slopes(y: np.ndarray, c: int, d: np.ndarray) -> None:
    """Derivatives times the grid step of the shape-preserving cubic through ``y[:c]``.

    gsw's pchip: at interior points the harmonic mean of the neighbouring
    slopes, zero at an extremum or next to a flat step; the edge rule at both
    ends; a straight line through two points.
    """
    if c == 2:
        d[0] = y[1] - y[0]
        d[1] = d[0]
        return
    for k in range(1, c - 1):
        dm = y[k] - y[k - 1]
        dp = y[k + 1] - y[k]
        prod = dm * dp
        d[k] = 0.0 if prod <= 0.0 else (prod * 2.0) / (dm + dp)
    d[0] = _pchip_edge(y[1] - y[0], y[2] - y[1])
    d[c - 1] = _pchip_edge(y[c - 1] - y[c - 2], y[c - 2] - y[c - 3])


@kernel
def _hermite_points(y: np.ndarray, d: np.ndarray, c: int, basis: np.ndarray,
                    out: np.ndarray) -> None:
    """One profile's values at the points between its valid levels ``y[:c]`` (slopes ``d``
    times the step) into ``out`` (level - 1, point); NaN below the bottom."""
    n_in = out.shape[1]
    for k in range(out.shape[0]):
        if k >= c - 1:
            for j in range(n_in):
                out[k, j] = np.nan
            continue
        y0, y1, d0, d1 = y[k], y[k + 1], d[k], d[k + 1]
        if n_in == 1 and basis.shape[2] == 0:  # the mid-point in closed form
            out[k, 0] = (y0 + y1) * 0.5 + (d0 - d1) * 0.125
            continue
        for j in range(n_in):
            value = y0 * basis[0, k, j]
            value += d0 * basis[1, k, j]
            value += y1 * basis[2, k, j]
            value += d1 * basis[3, k, j]
            out[k, j] = value


@kernel
def _pchip_points(sa: np.ndarray, ct: np.ndarray, count: np.ndarray, basis: np.ndarray,
                  sa_out: np.ndarray, ct_out: np.ndarray) -> None:
    """SA and CT at the points between the grid levels, from the shape-preserving cubic of
    each profile's valid levels, one pass per profile.

    ``basis`` (4, level - 1, point) holds the cubic Hermite basis at each
    point's fraction t of its step, as gsw evaluates it; an empty basis
    (4, level - 1, 0) asks for the one mid-point of each step in closed form,
    (y0 + y1) / 2 + (d0 - d1) / 8. Points below the bottom are NaN.
    """
    d = np.empty(sa.shape[1])
    for i in range(sa.shape[0]):
        c = count[i]
        if c >= 2:
            _pchip_slopes(sa[i], c, d)
        _hermite_points(sa[i], d, c, basis, sa_out[i])
        if c >= 2:
            _pchip_slopes(ct[i], c, d)
        _hermite_points(ct[i], d, c, basis, ct_out[i])


@kernel
def _integrate_refined(v: np.ndarray, standard: np.ndarray, v_in: np.ndarray,
                       standard_in: np.ndarray, count: np.ndarray, weight: np.ndarray,
                       psi: np.ndarray) -> None:
    """Dynamic height by the trapezoid rule on the grid refined by the points in between.

    ``v_in`` (profile, level - 1, point) is the specific volume at the points
    between levels k and k + 1, ``weight`` (level - 1, point + 1) gsw's
    ``0.5 dp db2pa`` of each sub-interval; each step sums its sub-intervals
    from the top (as the whole-array passes did), the steps are summed from the
    surface; NaN as in :func:`_integrate_on_grid`.
    """
    n_lev = v.shape[1]
    n_in = v_in.shape[2]
    for i in range(v.shape[0]):
        c = count[i]
        if c < 2:
            psi[i, :] = np.nan
            continue
        psi[i, 0] = 0.0
        previous = v[i, 0] - standard[0]
        for k in range(c - 1):
            step = 0.0
            for j in range(n_in):
                current = v_in[i, k, j] - standard_in[k, j]
                step += (current + previous) * weight[k, j]
                previous = current
            current = v[i, k + 1] - standard[k + 1]
            step += (current + previous) * weight[k, n_in]
            previous = current
            psi[i, k + 1] = psi[i, k] + (-step)
        for k in range(c, n_lev):
            psi[i, k] = np.nan


def _refined_points(p: np.ndarray, n: int, max_dp: float
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Where gsw integrates between the levels of a uniform grid, and with what weights.

    Returns
    -------
    p_in : ndarray (level - 1, n - 1)
        Pressures p[0] + max_dp (k n + j), j = 1 .. n - 1, dbar.
    basis : ndarray (4, level - 1, n - 1)
        Cubic Hermite basis at each point's fraction t of its step (gsw's formula);
        empty (4, level - 1, 0) when n is 2 (the mid-point in closed form).
    weight : ndarray (level - 1, n)
        0.5 dp db2pa of each sub-interval, from the top of the step down.
    """
    h = float(p[1] - p[0])
    k = np.arange(p.size - 1)[:, None]
    p_in = p[0] + max_dp * (k * n + np.arange(1, n)[None, :])
    t = (p_in - p[:-1, None]) / h
    tt = t * t
    ttt = tt * t
    basis = np.stack([2 * ttt - 3 * tt + 1, ttt - 2 * tt + t, -2 * ttt + 3 * tt, ttt - tt])
    if n == 2:
        basis = basis[..., :0]
    edges = np.concatenate([p[:-1, None], p_in, p[1:, None]], axis=1)
    weight = 0.5 * (edges[:, 1:] - edges[:, :-1]) * _DB2PA
    return p_in, basis, weight


def station_profiles(
    kernel: str, sa: np.ndarray, ct: np.ndarray, p: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """SA and CT profiles and their pressure grid as float arrays, their shapes checked.

    Parameters
    ----------
    kernel : str
        Name of the calling kernel, for the message.
    sa, ct : array_like (..., station, level)
        Absolute Salinity (g/kg) and Conservative Temperature (degC), the same shape.
    p : array_like (level,)
        Sea pressure, dbar.

    Returns
    -------
    sa, ct, p : ndarray
        The inputs as float arrays.

    Raises
    ------
    ComputationError
        When ``ct`` differs in shape from ``sa`` or ``p`` from its last axis.
    """
    sa = np.asarray(sa, dtype=float)
    ct = np.asarray(ct, dtype=float)
    p = np.asarray(p, dtype=float)
    check_trailing_shape(kernel, "ct", ct, sa.shape, "station, level (as sa)")
    check_trailing_shape(kernel, "p", p, sa.shape[-1:], "level (as sa)")
    return sa, ct, p


def specific_volume_pass(
    sa: np.ndarray, ct: np.ndarray, p: np.ndarray, max_dp: float = 1.0
) -> SpecificVolumePass:
    """Specific volume, and dynamic height integrated from its anomaly, in one pass.

    The specific volume of every grid point is evaluated once (the TEOS-10
    75-term polynomial of gsw.specvol as a compiled kernel,
    :func:`sectionkit.eos.specific_volume`, equal to gsw.specvol bit for bit
    on the machines checked); its anomaly relative to the standard ocean,
    gsw.specvol_anom_standard, is the difference from gsw.specvol_SSO_0 of
    the level; dynamic height is the pressure integral of the anomaly from
    the sea surface, exactly as gsw.geo_strf_dyn_height does it (the
    trapezoid rule on the grid when the grid step is at most ``max_dp``;
    otherwise on a finer grid of step ``max_dp`` with SA and CT interpolated
    by the shape-preserving cubic), compiled kernels making one pass per
    profile; in-situ density follows as the reciprocal of the specific
    volume. Profiles must be valid from the surface down (NaN only below the
    bottom) on a uniform grid starting at 0 dbar with a step that is a
    multiple of ``max_dp``; other input is
    passed to gsw.geo_strf_dyn_height unchanged (two evaluations).

    Parameters
    ----------
    sa : ndarray (..., station, level)
        Absolute Salinity, g/kg; NaN below the bottom.
    ct : ndarray (..., station, level)
        Conservative Temperature, degC; NaN below the bottom.
    p : ndarray (level,)
        Sea pressure, dbar, increasing.
    max_dp : float
        Largest pressure step of the integration, dbar (gsw's ``max_dp``).

    Returns
    -------
    SpecificVolumePass
    """
    sa, ct, p = station_profiles("specific_volume_pass", sa, ct, p)
    shape = sa.shape
    n_lev = shape[-1]
    sa2 = sa.reshape(-1, n_lev)
    ct2 = ct.reshape(-1, n_lev)
    standard = gsw.specvol_SSO_0(p)
    v = specific_volume(sa2, ct2, p)
    count = np.empty(sa2.shape[0], dtype=np.int64)
    # the fast path needs each profile valid from the surface down without gaps
    whole = _valid_from_surface(sa2, ct2, count) if n_lev else False
    n = _uniform_refinement(p, max_dp)
    if n is None or not whole:
        psi = gsw.geo_strf_dyn_height(sa2, ct2, p, p_ref=0.0, axis=1, max_dp=max_dp)
        return SpecificVolumePass(v.reshape(shape), standard, np.asarray(psi, float).reshape(shape))
    psi = np.empty(sa2.shape)
    if n == 1:
        dp = np.diff(p)
        half_dp = 0.5 * float(dp[0])
        exact = np.all(dp == dp[0]) and half_dp == 2.0 ** np.round(np.log2(half_dp))
        _integrate_on_grid(v, standard, count, dp, -half_dp * _DB2PA if exact else np.nan, psi)
    else:
        # gsw inserts p[0] + max_dp * i between the grid levels and interpolates SA and CT
        # there with the shape-preserving cubic of each profile's valid levels
        p_in, basis, weight = _refined_points(p, n, max_dp)
        standard_in = gsw.specvol_SSO_0(p_in)
        per_block = max(1, _BLOCK_POINTS // p_in.size)
        for start in range(0, sa2.shape[0], per_block):
            rows = slice(start, start + per_block)
            sa_in = np.empty((sa2[rows].shape[0], *p_in.shape))
            ct_in = np.empty(sa_in.shape)
            _pchip_points(sa2[rows], ct2[rows], count[rows], basis, sa_in, ct_in)
            v_in = specific_volume(sa_in, ct_in, p_in)
            del sa_in, ct_in
            _integrate_refined(v[rows], standard, v_in, standard_in, count[rows], weight,
                               psi[rows])
    return SpecificVolumePass(v.reshape(shape), standard, psi.reshape(shape))


# ---------------------------------------------------------------------------
# Density inversions
# ---------------------------------------------------------------------------


def density_jumps(SA: np.ndarray, CT: np.ndarray, p: np.ndarray, lag: int) -> np.ndarray:
    """Density excess of the upper over the lower of two levels ``lag`` apart.

    Both parcels are compared at their mid pressure (locally referenced
    potential density), so the result is free of the compressibility
    effect that makes sigma0 decrease downward in stable deep water; near the
    surface it equals the sigma0 difference.

    Parameters
    ----------
    SA : ndarray (..., level)
        Absolute Salinity, g/kg.
    CT : ndarray (..., level)
        Conservative Temperature, degC.
    p : ndarray (level,)
        Pressure of the levels, dbar, increasing.
    lag : int
        Number of levels between the compared parcels, >= 1.

    Returns
    -------
    ndarray (..., level - lag)
        rho(upper) - rho(lower) at the mid pressure, kg m^-3; positive means
        an inversion (denser water above lighter water), NaN where either
        level is missing.
    """
    p = np.asarray(p, dtype=float)
    check_trailing_shape("density_jumps", "CT", CT, np.shape(SA), "level (as SA)")
    check_trailing_shape("density_jumps", "p", p, np.shape(SA)[-1:], "level (as SA)")
    p_mid = 0.5 * (p[:-lag] + p[lag:])
    upper = gsw.rho(SA[..., :-lag], CT[..., :-lag], p_mid)
    lower = gsw.rho(SA[..., lag:], CT[..., lag:], p_mid)
    return upper - lower


@dataclass(frozen=True)
class Inversion:
    """A run of levels where denser water lies above lighter water."""

    station_index: int
    p_top: float  # dbar
    p_bottom: float  # dbar
    excess: float  # kg m^-3, largest density excess of upper over lower parcel


def find_inversions(
    SA: np.ndarray,
    CT: np.ndarray,
    p: np.ndarray,
    *,
    span: float = 20.0,
    threshold: float = 0.02,
) -> list[Inversion]:
    """Density inversions beyond instrument noise on gridded profiles.

    Parameters
    ----------
    SA : ndarray (station, level)
        Absolute Salinity on the grid, g/kg.
    CT : ndarray (station, level)
        Conservative Temperature on the grid, degC.
    p : ndarray (level,)
        Grid pressure, dbar, evenly spaced.
    span : float
        Vertical distance between compared parcels, dbar.
    threshold : float
        Density excess counted as an inversion, kg m^-3.

    Returns
    -------
    list of Inversion
        One entry per contiguous run of flagged levels per station.
    """
    p = np.asarray(p, dtype=float)
    if p.size < 2:
        return []
    dp = p[1] - p[0]
    lag = max(1, int(round(span / dp)))
    if p.size <= lag:
        lag = p.size - 1
    with np.errstate(invalid="ignore"):
        jump = density_jumps(np.atleast_2d(SA), np.atleast_2d(CT), p, lag)
        flagged = np.nan_to_num(jump, nan=0.0) > threshold
    found = []
    for i, row in enumerate(flagged):
        idx = np.flatnonzero(row)
        if idx.size == 0:
            continue
        breaks = np.flatnonzero(np.diff(idx) > 1)
        starts = np.concatenate(([idx[0]], idx[breaks + 1]))
        ends = np.concatenate((idx[breaks], [idx[-1]]))
        for a, b in zip(starts, ends, strict=True):
            found.append(
                Inversion(i, float(p[a]), float(p[b + lag]), float(np.max(jump[i, a : b + 1])))
            )
    return found


# ---------------------------------------------------------------------------
# Gridding
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class GriddingRules:
    """The stated rules for putting profiles on the common pressure grid.

    Parameters
    ----------
    dp : float
        Grid step, dbar; the grid is 0, dp, 2 dp, ...
    max_interior_gap : float
        Largest pressure gap between neighbouring samples that is
        interpolated linearly, dbar; a larger gap is an error.
    max_surface_gap : float
        Deepest shallowest-sample pressure that is filled up to 0 dbar with
        the shallowest sample's values, dbar; deeper is an error.
    bottom_tolerance : float
        How far the stated bottom may lie above the deepest sample before it
        is an error, m (within it, the deepest sample is taken as the bottom).
    note_gap : float
        Surface fills and interior gaps larger than this are reported as
        cautions, dbar (all are stated in the ``gridding`` attribute).
    """

    dp: float = 2.0
    max_interior_gap: float = 50.0
    max_surface_gap: float = 30.0
    bottom_tolerance: float = 10.0
    note_gap: float = 10.0

    def __post_init__(self) -> None:
        for name in ("dp", "max_interior_gap", "max_surface_gap", "bottom_tolerance", "note_gap"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value >= 0):
                raise SectionDataError(
                    f"gridding rule {name} = {value!r} must be a finite number >= 0"
                )
        if self.dp <= 0:
            raise SectionDataError(f"grid step dp = {self.dp!r} dbar must be positive, e.g. 2.0")

    def describe(self) -> str:
        """The rules as one paragraph of text."""
        return (
            f"Profiles are interpolated linearly in pressure onto 0, {self.dp:g}, "
            f"{2 * self.dp:g}, ... dbar (dp = {self.dp:g} dbar), each from its samples where "
            f"pressure, salinity and temperature are all finite. Interior gaps up to "
            f"{self.max_interior_gap:g} dbar are interpolated; larger gaps are refused. "
            f"A shallowest sample no deeper than {self.max_surface_gap:g} dbar is extended "
            f"unchanged up to 0 dbar; deeper is refused. The deepest sample is extended "
            f"unchanged down to the station's bottom pressure (from the bottom depth with "
            f"gsw.p_from_z at the station latitude, or the deepest sample when no bottom depth "
            f"is given); a bottom more than {self.bottom_tolerance:g} m above the deepest sample "
            f"is refused, and one less than that above it is moved down to the deepest sample. "
            f"Values below each station's last level floor(bottom_pressure/dp)*dp are NaN."
        )


def pressure_grid(p_max: float, dp: float) -> np.ndarray:
    """The common grid 0, dp, 2 dp, ... up to the last multiple of dp not below ``p_max``'s floor.

    Parameters
    ----------
    p_max : float
        Deepest pressure to cover, dbar.
    dp : float
        Grid step, dbar.

    Returns
    -------
    ndarray (level,)
        Grid pressure, dbar: k * dp for k = 0 .. floor(p_max / dp).
    """
    return np.arange(last_level(p_max, dp) + 1) * float(dp)


def last_level(p: float | np.ndarray, dp: float) -> int | np.ndarray:
    """Index of the deepest grid level at or above pressure ``p`` (a station's floor).

    Parameters
    ----------
    p : float or ndarray (...)
        Pressure, dbar, >= 0 (e.g. each station's sea-floor pressure).
    dp : float
        Grid step, dbar.

    Returns
    -------
    int or ndarray of int (...)
        floor(p / dp), tolerant of round-off (p = 3 * 0.1 counts as 3 steps);
        an int for a scalar ``p``.
    """
    k = np.maximum(0, np.floor(np.asarray(p, dtype=float) / dp + 1e-9)).astype(int)
    return int(k) if k.ndim == 0 else k


@dataclass
class ProfileGrid:
    """One profile on the grid, and what was done to get it there."""

    values: np.ndarray  # (variable, level) on the grid, NaN below the last level
    last_level: int  # index of the deepest finite level
    surface_fill: float  # dbar filled above the shallowest sample (0 if none)
    largest_gap: float  # dbar, largest interior gap interpolated
    gap_top: float  # dbar, upper end of that gap
    bottom_extension: float  # dbar between the deepest sample and the bottom pressure


def grid_profile(
    p: np.ndarray,
    values: np.ndarray,
    bottom_pressure: float,
    n_levels: int,
    rules: GriddingRules,
    label: str = "profile",
) -> ProfileGrid:
    """Interpolate one measured profile onto the common pressure grid.

    Parameters
    ----------
    p : ndarray (sample,)
        Sample pressure, dbar, finite and strictly increasing.
    values : ndarray (variable, sample)
        Properties at the samples (any units), finite.
    bottom_pressure : float
        Sea-floor pressure of the station, dbar, not above the deepest sample.
    n_levels : int
        Number of levels of the section grid (0, dp, ... (n_levels-1) dp).
    rules : GriddingRules
        Grid step and the limits on gaps.
    label : str
        Where the profile comes from, for error messages
        (e.g. ``"station 7 (file north.nc)"``).

    Returns
    -------
    ProfileGrid
        The gridded values (variable, level) and the rules that were applied.

    Raises
    ------
    SectionDataError
        No samples, pressure not increasing, an interior gap wider than
        ``rules.max_interior_gap`` or a shallowest sample deeper than
        ``rules.max_surface_gap``.
    """
    p = np.asarray(p, dtype=float)
    values = np.atleast_2d(np.asarray(values, dtype=float))
    dp = rules.dp
    if p.size == 0:
        raise SectionDataError(
            f"{label}: no sample has pressure, salinity and temperature all present; "
            "drop the station or supply its data"
        )
    steps = np.diff(p)
    if np.any(steps <= 0):
        k = int(np.flatnonzero(steps <= 0)[0])
        raise SectionDataError(
            f"{label}: pressure does not increase from {p[k]:g} to {p[k + 1]:g} dbar at sample "
            f"{k + 1}; profiles must increase downward — sort or drop the bad scans"
        )
    if p[0] > rules.max_surface_gap:
        raise SectionDataError(
            f"{label}: the shallowest sample is at {p[0]:g} dbar, deeper than the "
            f"{rules.max_surface_gap:g} dbar that sectionkit fills with the shallowest values; "
            "supply near-surface data or drop the station"
        )
    largest_gap, gap_top = 0.0, float(p[0])
    if steps.size:
        k = int(np.argmax(steps))
        largest_gap, gap_top = float(steps[k]), float(p[k])
        if largest_gap > rules.max_interior_gap:
            raise SectionDataError(
                f"{label}: samples are missing between {p[k]:g} and {p[k + 1]:g} dbar, a gap of "
                f"{largest_gap:g} dbar, wider than the {rules.max_interior_gap:g} dbar that "
                "sectionkit interpolates; fill the gap from another source or drop the station"
            )
    bottom = max(float(bottom_pressure), float(p[-1]))
    last = min(last_level(bottom, dp), n_levels - 1)
    grid = np.arange(n_levels) * dp
    out = np.full((values.shape[0], n_levels), np.nan)
    for v in range(values.shape[0]):
        # np.interp holds the end values beyond the samples: that is the
        # surface fill above p[0] and the bottom extension below p[-1].
        out[v, : last + 1] = np.interp(grid[: last + 1], p, values[v])
    return ProfileGrid(
        values=out,
        last_level=last,
        surface_fill=max(0.0, float(p[0])),
        largest_gap=largest_gap,
        gap_top=gap_top,
        bottom_extension=max(0.0, bottom - float(p[-1])),
    )


@dataclass
class SectionGrid:
    """Gridded section: properties on the common grid and a log of the rules applied."""

    pressure: np.ndarray  # (level,) dbar
    values: np.ndarray  # (variable, station, level)
    profiles: list[ProfileGrid] = field(default_factory=list)

    def log(self, labels: list[str], rules: GriddingRules) -> list[str]:
        """Sentences stating where each rule was applied.

        Parameters
        ----------
        labels : list of str
            Station names, in station order.
        rules : GriddingRules
            The rules used.

        Returns
        -------
        list of str
            One sentence per rule that was applied somewhere.
        """
        surface = [
            f"{lab} (from {g.surface_fill:g} dbar)"
            for lab, g in zip(labels, self.profiles, strict=True)
            if g.surface_fill > 0
        ]
        gaps = [
            f"{lab} ({g.largest_gap:g} dbar below {g.gap_top:g} dbar)"
            for lab, g in zip(labels, self.profiles, strict=True)
            if g.largest_gap > rules.note_gap
        ]
        bottom = [
            f"{lab} (+{g.bottom_extension:.1f} dbar)"
            for lab, g in zip(labels, self.profiles, strict=True)
            if g.bottom_extension > 0
        ]
        lines = []
        if surface:
            lines.append(
                "Surface filled with the shallowest sample at stations " + ", ".join(surface) + "."
            )
        if gaps:
            lines.append(
                f"Interior gaps wider than {rules.note_gap:g} dbar interpolated at stations "
                + ", ".join(gaps)
                + "."
            )
        if bottom:
            lines.append(
                "Deepest sample extended to the bottom at stations " + ", ".join(bottom) + "."
            )
        return lines


def grid_section(
    p: list[np.ndarray],
    values: list[np.ndarray],
    bottom_pressure: np.ndarray,
    rules: GriddingRules,
    labels: list[str] | None = None,
) -> SectionGrid:
    """Put every station's profile on one grid from 0 dbar to the deepest bottom.

    Parameters
    ----------
    p : list of ndarray (sample,)
        Sample pressure of each station, dbar, finite and increasing.
    values : list of ndarray (variable, sample)
        Properties of each station at its samples, finite.
    bottom_pressure : ndarray (station,)
        Sea-floor pressure of each station, dbar.
    rules : GriddingRules
        Grid step and gap limits.
    labels : list of str, optional
        Station descriptions for error messages.

    Returns
    -------
    SectionGrid
        ``values`` is (variable, station, level) on ``pressure`` =
        0, dp, ... floor(max(bottom_pressure) / dp) * dp.
    """
    bottom_pressure = np.asarray(bottom_pressure, dtype=float)
    if labels is None:
        labels = [f"station {i + 1}" for i in range(len(p))]
    deepest = max(
        max(float(bp_i), float(pi[-1]) if pi.size else 0.0)
        for pi, bp_i in zip(p, bottom_pressure, strict=True)
    )
    grid = pressure_grid(deepest, rules.dp)
    profiles = [
        grid_profile(pi, vi, bp_i, grid.size, rules, label)
        for pi, vi, bp_i, label in zip(p, values, bottom_pressure, labels, strict=True)
    ]
    stacked = np.stack([g.values for g in profiles], axis=1)
    return SectionGrid(pressure=grid, values=stacked, profiles=profiles)
