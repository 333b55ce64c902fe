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

from dataclasses import dataclass

import gsw
import numpy as np

from sectionkit.errors import ConfigError


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
    z = gsw.z_from_p(np.asarray(p, float)[None, :], np.asarray(lat, float)[:, None])
    return -np.diff(z, axis=-1)


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
    mid = 0.5 * (p[:-1] + p[1:])
    shallow = np.minimum(bottom_a, bottom_b)[:, None]
    deep = np.maximum(bottom_a, bottom_b)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(deep > shallow, (deep - mid) / (deep - shallow), 1.0)
    frac = np.where(mid <= shallow, 1.0, np.clip(frac, 0.0, 1.0))
    if track is not None:
        for j, samples in enumerate(track):
            if samples is None:
                continue
            samples = np.asarray(samples, dtype=float)
            frac[j] = (samples[None, :] > mid[:, None]).mean(axis=1)
    return frac


def class_weights(
    sigma: np.ndarray,
    interfaces: np.ndarray,
    thickness: np.ndarray,
    width: np.ndarray,
    tail: np.ndarray | None = None,
) -> np.ndarray:
    """Depth-integration weights of every class, with fractional cells.

    Parameters
    ----------
    sigma : ndarray (..., pair, interface, level)
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
        smaller than one grid step), integrated with the last level's value.

    Returns
    -------
    ndarray (..., pair, class, level)
        Weights, m: the depth integral over class ``i`` of a field ``q`` is
        ``sum_k w[..., i, k] * q[k]``.
    """
    n_if = sigma.shape[-2]
    n_class = n_if + 1
    d0 = sigma[..., :-1] - interfaces[:, None]  # (..., pair, interface, seg)
    d1 = sigma[..., 1:] - interfaces[:, None]
    valid = np.isfinite(d0).all(axis=-2) & np.isfinite(d1).all(axis=-2)  # (..., pair, seg)
    d0 = np.nan_to_num(d0)
    d1 = np.nan_to_num(d1)
    with np.errstate(invalid="ignore", divide="ignore"):
        t_cross = np.where((d0 > 0) != (d1 > 0), d0 / (d0 - d1), 0.0)
    t_cross = np.clip(t_cross, 0.0, 1.0)
    seg_shape = t_cross.shape[:-2] + t_cross.shape[-1:]
    zeros = np.zeros(seg_shape)[..., None, :]
    bp = np.sort(np.concatenate([zeros, t_cross, zeros + 1.0], axis=-2), axis=-2)
    scale = np.where(valid, thickness * width, 0.0)  # (..., pair, seg)
    n_level = sigma.shape[-1]
    alpha = np.zeros(seg_shape[:-1] + (n_class,) + seg_shape[-1:])
    beta = np.zeros_like(alpha)
    slope = d1 - d0
    for m in range(n_class):  # sub-intervals between sorted crossings
        a = bp[..., m, :]
        b = bp[..., m + 1, :]
        tm = 0.5 * (a + b)
        # class of the sub-interval: how many interfaces its mid-point is denser than
        cls = ((d0 + tm[..., None, :] * slope) > 0).sum(axis=-2)  # (..., pair, seg)
        onehot = cls[..., None, :] == np.arange(n_class)[:, None]
        alpha += np.where(onehot, (b - a)[..., None, :], 0.0)
        beta += np.where(onehot, (0.5 * (b * b - a * a))[..., None, :], 0.0)
    alpha *= scale[..., None, :]
    beta *= scale[..., None, :]
    out = np.zeros(sigma.shape[:-2] + (n_class, n_level))
    out[..., :-1] += alpha - beta
    out[..., 1:] += beta
    if tail is not None:
        last = n_level - 1 - np.argmax(np.isfinite(sigma[..., 0, ::-1]), axis=-1)  # (..., pair)
        last_cls = (
            np.take_along_axis(np.nan_to_num(sigma), last[..., None, None], axis=-1)[..., 0]
            > interfaces
        ).sum(axis=-1)
        has_data = np.isfinite(sigma[..., 0, :]).any(axis=-1)
        tail_w = np.where(has_data, np.broadcast_to(tail, last.shape), 0.0)
        onehot = last_cls[..., None] == np.arange(n_class)
        contrib = onehot * tail_w[..., None]  # (..., pair, class)
        idx = np.broadcast_to(last[..., None, None], contrib.shape + (1,))
        cur = np.take_along_axis(out, idx, axis=-1)[..., 0]
        np.put_along_axis(out, idx, (cur + contrib)[..., None], axis=-1)
    return out
