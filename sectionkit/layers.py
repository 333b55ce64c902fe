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
    kind, _, what = str(constraint).partition(":")
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
    sigma: np.ndarray | Sequence[np.ndarray],
    interfaces: np.ndarray,
    thickness: np.ndarray,
    width: np.ndarray,
    tail: np.ndarray | None = None,
) -> np.ndarray:
    """Depth-integration weights of every class, with fractional cells.

    Parameters
    ----------
    sigma : ndarray (..., pair, interface, level), or a sequence of (..., pair, level)
        Pair-mean potential density anomaly at each interface's own reference
        pressure, kg m^-3; NaN below the deeper station's bottom. A sequence
        (one array per interface) avoids stacking large arrays.
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
    faces = [sigma[..., n, :] for n in range(sigma.shape[-2])] if isinstance(
        sigma, np.ndarray) else list(sigma)
    n_if = len(faces)
    n_class = n_if + 1
    n_level = faces[0].shape[-1]
    valid = np.isfinite(faces[0][..., :-1]) & np.isfinite(faces[0][..., 1:])  # (..., pair, seg)
    start_class = np.zeros(valid.shape, dtype=np.int16)
    crossed = np.zeros(valid.shape, dtype=bool)
    for n in range(n_if):  # one interface at a time keeps memory at (pair, seg)
        above0 = faces[n][..., :-1] > interfaces[n]
        start_class += above0
        crossed |= above0 != (faces[n][..., 1:] > interfaces[n])
    crossed &= valid
    scale = np.where(valid, thickness * width, 0.0)  # (..., pair, seg)
    out = np.zeros(valid.shape[:-1] + (n_class, n_level))
    # segments no interface crosses lie in one class: trapezoid weights
    half = np.where(crossed, 0.0, 0.5 * scale)
    for i in range(n_class):
        part = np.where(start_class == i, half, 0.0)
        out[..., i, :-1] += part
        out[..., i, 1:] += part
    # crossed segments (a few per pair): split at the sorted crossings and integrate
    # the linear field exactly over each sub-interval
    where_crossed = np.nonzero(crossed)
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
            out[lead + (klass, seg)] += (alpha[:, i] - beta[:, i]) * w
            out[lead + (klass, seg + 1)] += beta[:, i] * w
    if tail is not None:
        finite = np.isfinite(faces[0])
        last = n_level - 1 - np.argmax(finite[..., ::-1], axis=-1)  # (..., pair)
        last_sigma = np.stack(
            [np.take_along_axis(f, last[..., None], axis=-1)[..., 0] for f in faces], axis=-1
        )
        last_cls = (np.nan_to_num(last_sigma) > interfaces).sum(axis=-1)
        has_data = finite.any(axis=-1)
        tail_w = np.where(has_data, np.broadcast_to(tail, last.shape), 0.0)
        onehot = last_cls[..., None] == np.arange(n_class)
        contrib = onehot * tail_w[..., None]  # (..., pair, class)
        idx = np.broadcast_to(last[..., None, None], contrib.shape + (1,))
        cur = np.take_along_axis(out, idx, axis=-1)[..., 0]
        np.put_along_axis(out, idx, (cur + contrib)[..., None], axis=-1)
    return out
