"""Direct velocity references: ADCP profiles turned into per-pair reference velocities.

For each station pair the measured (u, v) is rotated into the pair's
section-normal direction, positive to the left of increasing station
order, ``v_n = -u t_north + v t_east`` with ``t`` the unit along-line
vector, and averaged over a chosen pressure range. A profile given for the
pair is used as it is; otherwise the pair takes the mean of its two
stations' profiles (or the one that exists). The geostrophic velocity
relative to the surface averaged over the same grid levels is subtracted:
the difference is the reference velocity that makes the geostrophic range
mean equal the measured one,

    ref_j = mean_range(v_n) - mean_range(v_rel),

with error ``sqrt(error^2 + sem^2)``, ``error`` the stated instrument and
ageostrophic error and ``sem`` the standard error of the range mean.
Used either as a known reference of the pair or as the prior mean (and
standard deviation) of its adjustment in the inverse.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sectionkit.errors import Cautions
from sectionkit.io.adcp import VelocityProfile
from sectionkit.io.bottle import station_key
from sectionkit.operator import SectionOperator


def normal_velocity(
    u: np.ndarray, v: np.ndarray, along_east: np.ndarray, along_north: np.ndarray
) -> np.ndarray:
    """Velocity component normal to the line, positive to the left of its direction.

    Parameters
    ----------
    u, v : ndarray (..., sample)
        Eastward and northward velocity, m s^-1.
    along_east, along_north : ndarray (...) or float
        Unit vector along the line (station k to k + 1), dimensionless.

    Returns
    -------
    ndarray (..., sample)
        m s^-1.
    """
    te = np.asarray(along_east, dtype=float)[..., None]
    tn = np.asarray(along_north, dtype=float)[..., None]
    return -np.asarray(u) * tn + np.asarray(v) * te


def range_mean(p: np.ndarray, values: np.ndarray, p_range: tuple[float, float]
               ) -> tuple[float, float, int]:
    """Mean, its standard error and the count of samples inside a pressure range.

    Parameters
    ----------
    p : ndarray (sample,)
        dbar.
    values : ndarray (sample,)
        Any unit.
    p_range : (float, float)
        Top and bottom of the range, dbar.

    Returns
    -------
    mean, sem : float
        NaN without samples; sem is 0 with one sample.
    n : int
    """
    inside = (p >= p_range[0]) & (p <= p_range[1]) & np.isfinite(values)
    n = int(inside.sum())
    if n == 0:
        return float("nan"), float("nan"), 0
    x = values[inside]
    sem = float(np.std(x, ddof=1) / np.sqrt(n)) if n > 1 else 0.0
    return float(x.mean()), sem, n


@dataclass
class DirectReference:
    """Reference velocities of one section's pairs from direct velocity profiles.

    Attributes
    ----------
    velocity : ndarray (pair,)
        Reference velocity (offset plus adjustment) that matches the measured
        range mean, m s^-1; NaN where the pair has no profile.
    error : ndarray (pair,)
        One standard deviation, m s^-1; NaN where none.
    measured : ndarray (pair,)
        The measured section-normal range mean, m s^-1.
    pressure_range : (float, float)
        dbar.
    """

    velocity: np.ndarray
    error: np.ndarray
    measured: np.ndarray
    pressure_range: tuple[float, float]

    @property
    def pressure(self) -> float:
        """Mid-point of the averaging range, dbar (reported as the reference pressure)."""
        return 0.5 * (self.pressure_range[0] + self.pressure_range[1])


def direct_reference(
    op: SectionOperator,
    profiles: list[VelocityProfile],
    p_range: tuple[float, float],
    error: float,
    cautions: Cautions | None = None,
) -> DirectReference:
    """Per-pair reference velocities of a section from its direct velocity profiles.

    Parameters
    ----------
    op : SectionOperator
        The built section (pairs, relative velocity, response).
    profiles : list of VelocityProfile
        Station or pair profiles of this section.
    p_range : (float, float)
        Averaging range, dbar.
    error : float
        Stated error of a range-mean direct velocity, m s^-1.
    cautions : Cautions, optional
        Collects pairs left without a direct reference.

    Returns
    -------
    DirectReference
    """
    g = op.pairs
    te, tn = g["along_east"].values, g["along_north"].values
    stations = {station_key(p.key): p for p in profiles if p.kind == "station"}
    # pair profiles named for another section (one file for several lines) are not ours
    pairs = {int(p.key): p for p in profiles
             if p.kind == "pair" and p.section in (None, op.name)}
    n = op.n_pair
    measured = np.full(n, np.nan)
    sem = np.full(n, np.nan)
    levels = (op.pressure >= p_range[0]) & (op.pressure <= p_range[1])
    reached = np.where(op.response == 1.0, op.v_eff, np.nan)
    missing = []
    for j in range(n):
        if j in pairs:
            prof = pairs[j]
            measured[j], sem[j], _ = range_mean(
                prof.pressure, normal_velocity(prof.u, prof.v, te[j], tn[j]), p_range)
        else:
            found = []
            for sid in (str(g["station_a"].values[j]), str(g["station_b"].values[j])):
                prof = stations.get(station_key(sid))
                if prof is not None:
                    m, s, k = range_mean(
                        prof.pressure, normal_velocity(prof.u, prof.v, te[j], tn[j]), p_range)
                    if k:
                        found.append((m, s))
            if found:
                measured[j] = np.mean([m for m, _ in found])
                sem[j] = np.sqrt(np.sum([s**2 for _, s in found])) / len(found)
        if not np.isfinite(measured[j]) or not np.any(levels & np.isfinite(reached[j])):
            measured[j] = np.nan
            missing.append(f"{op.name}:{j}")
    with np.errstate(invalid="ignore"):
        relative = np.array([np.nanmean(reached[j][levels]) if np.any(
            levels & np.isfinite(reached[j])) else np.nan for j in range(n)])
    velocity = measured - relative
    err = np.where(np.isfinite(measured), np.sqrt(error**2 + np.nan_to_num(sem) ** 2), np.nan)
    if missing and cautions is not None:
        cautions.add(
            "no-direct-velocity",
            f"pairs {', '.join(missing)} have no direct velocity samples between "
            f"{p_range[0]:g} and {p_range[1]:g} dbar (or no geostrophic levels there); they keep "
            "the configured reference and prior",
        )
    return DirectReference(velocity, err, measured, (float(p_range[0]), float(p_range[1])))
