"""Property transports of bottle tracers, through the same linear operator as salt.

A tracer of concentration ``c`` (umol/kg) is carried like salt: for pair
``j`` and class ``i``

    T_c[i] = sum_j sum_k w[j, i, k] L_j rho_jk c_jk (v_jk + response_jk (offset_j + b_j))
             + ekman_j (1 + e) share_c[j, i]

with the pair-mean in-situ density ``rho`` (gsw.rho, kg m^-3) and the
pair-mean concentration on the same class weights ``w`` (m) as every other
quantity, so it is linear in the same unknowns and its posterior error is
``sqrt(g P g^T)``. Reported in kmol s^-1 (10^9 umol s^-1).

For the inverse, a conserved tracer enters as an anomaly from its box-class
mean ``c_i``, like salt: ``T_c[i] - k c_i M[i]`` with ``M`` the class mass
transport (Sv) and ``k = rho0 10^6 / 10^9`` kmol s^-1 per (Sv umol/kg); a
diapycnal transfer carries the mean of the two classes it joins.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from sectionkit.budget import SV, LinearOutputs, UnknownLayout
from sectionkit.errors import SectionDataError
from sectionkit.geostrophy import pair_mean
from sectionkit.operator import RHO0, SectionOperator, ekman_class_share

KMOL = 1e9  # umol per kmol
UNIT = "kmol s-1"
#: kmol s^-1 carried by 1 Sv (mass transport / rho0) of water at 1 umol/kg.
KMOL_PER_SV_UMOL = RHO0 * SV / KMOL
#: Smallest concentration spread used to scale tracer-anomaly noise, umol/kg.
TRACER_NOISE_FLOOR = 0.5


@dataclass
class TracerOperator:
    """Tracer transports of one section, linear in the reference velocities.

    Attributes
    ----------
    section : str
        Section name.
    names : list of str
        Tracers, plain names.
    relative : ndarray (tracer, pair, class)
        Transport for zero reference velocity, umol s^-1.
    area : ndarray (tracer, pair, class)
        Transport per m s^-1 of reference velocity, umol s^-1 per m s^-1.
    ekman_share : ndarray (tracer, pair, class)
        Tracer carried per m^3 s^-1 of Ekman volume transport, umol m^-3.
    moments : ndarray (tracer, 2, class)
        Area integrals of c and c^2 per class, umol/kg m^2 and (umol/kg)^2 m^2.
    """

    section: str
    names: list[str]
    relative: np.ndarray
    area: np.ndarray
    ekman_share: np.ndarray
    moments: np.ndarray

    def transports(self, offset: np.ndarray, ekman: np.ndarray | float = 0.0) -> np.ndarray:
        """Class transports (tracer, class) for reference offsets, kmol s^-1.

        Parameters
        ----------
        offset : ndarray (pair,)
            Reference velocity (offset plus adjustment), m s^-1.
        ekman : ndarray (pair,) or float
            Ekman volume transport per pair, m^3 s^-1.
        """
        ek = np.broadcast_to(np.asarray(ekman, dtype=float), (self.area.shape[1],))
        t = (self.relative + self.area * np.asarray(offset)[None, :, None]
             + ek[None, :, None] * self.ekman_share)
        return t.sum(axis=1) / KMOL


def _masked(a: np.ndarray) -> np.ndarray:
    return np.where(np.isnan(a), 0.0, a)


def build_tracer_operator(
    op: SectionOperator, section: xr.Dataset, names: list[str]
) -> TracerOperator:
    """The tracer operator of a section whose SectionOperator is built.

    Parameters
    ----------
    op : SectionOperator
        Built from ``section`` (no leading dimensions).
    section : xr.Dataset
        Canonical section with the tracer variables (umol/kg).
    names : list of str
        Tracers wanted (plain names).

    Returns
    -------
    TracerOperator

    Raises
    ------
    SectionDataError
        A tracer is missing from the section, or a station has no profile of it.
    """
    water = np.isfinite(section["SA"].values)
    fields = []
    for name in names:
        if name not in section:
            raise SectionDataError(
                f"section {op.name}: no {name} profiles; give the section a bottle file with "
                f"{name} (bottle = \"...\") or drop {name} from [tracers] transport"
            )
        c = section[name].transpose("station", "pressure").values
        bad = water & ~np.isfinite(c)
        if bad.any():
            stations = [str(s) for s in section["station"].values[bad.any(axis=1)]]
            raise SectionDataError(
                f"section {op.name}, variable {name}: stations {', '.join(stations)} have no "
                f"{name} profile (no bottles, or fewer than two good ones); drop them with "
                f"the section's stations key or drop {name} from [tracers] transport"
            )
        fields.append(c)
    c_pair = np.stack([_masked(pair_mean(c)) for c in fields])  # (tracer, pair, level)
    rho = _masked(op.pair_density)
    prop = rho[None] * c_pair  # umol m^-3
    length = op.pairs["distance"].values[None, :, None]  # m
    v0 = _masked(op.v_eff)
    r0 = _masked(op.response)
    # class integrals on the operator's weights (m), times the pair width (m)
    relative = np.einsum("jik,tjk->tji", op.weights, prop * v0) * length
    area = np.einsum("jik,tjk->tji", op.weights, prop * r0) * length
    moments = np.stack([
        (np.einsum("jik,tjk->tji", op.weights, c_pair) * length).sum(axis=1),
        (np.einsum("jik,tjk->tji", op.weights, c_pair**2) * length).sum(axis=1),
    ], axis=1)
    faces = op.interfaces
    sigma_if = [op.sigma_pair[face.p_ref] for face in faces] or [op.sigma_pair[0.0]]
    values = np.array([face.sigma for face in faces]) if faces else np.array([1e9])
    props = {name: prop[t] for t, name in enumerate(names)}
    share, _ = ekman_class_share(sigma_if, values, op.pressure, op.pairs["lat"].values,
                                 op.ekman_depth, props)
    return TracerOperator(op.name, list(names), relative, area, share, moments)


def tracer_gradient(top: TracerOperator, t: int, layout: UnknownLayout,
                    ekman: np.ndarray) -> np.ndarray:
    """d(class transport of tracer ``t``)/dx, kmol s^-1 per unknown, (class, unknown)."""
    g = np.zeros((top.area.shape[2], layout.size))
    g[:, layout.pair_slices[top.section]] = top.area[t].T / KMOL
    if top.section in layout.ekman:
        g[:, layout.ekman[top.section]] = (ekman[:, None] * top.ekman_share[t]).sum(axis=0) / KMOL
    return g


TOTAL = "total"  # the class name of a tracer's sum over classes in its outputs


def output_name(tracer: str, klass: str) -> str:
    """Name of a tracer's transport in one class (or ``TOTAL``): ``"<tracer>:<class>"``."""
    return f"{tracer}:{klass}"


def split_output_name(name: str) -> tuple[str, str]:
    """Tracer and class of an output name made by :func:`output_name`."""
    tracer, _, klass = name.partition(":")
    return tracer, klass


def tracer_outputs(
    top: TracerOperator,
    class_names: list[str],
    offset: np.ndarray,
    ekman: np.ndarray,
    layout: UnknownLayout,
) -> LinearOutputs:
    """Class transports of every tracer as linear functionals of the unknowns.

    Parameters
    ----------
    top : TracerOperator
        The section's tracers.
    class_names : list of str
        Class names.
    offset, ekman, layout
        As for :func:`sectionkit.budget.section_outputs` (reference offsets in
        m s^-1, Ekman transports in m^3 s^-1, the unknowns).

    Returns
    -------
    LinearOutputs
        Names ``<tracer>:<class>`` and ``<tracer>:total`` (:func:`output_name`), kmol s^-1.
    """
    values = top.transports(offset, ekman)
    names, initial, grads = [], [], []
    for t, tracer in enumerate(top.names):
        g = tracer_gradient(top, t, layout, ekman)
        names += [output_name(tracer, c) for c in class_names] + [output_name(tracer, TOTAL)]
        initial += [values[t], [values[t].sum()]]
        grads += [g, g.sum(axis=0, keepdims=True)]
    return LinearOutputs(names, np.concatenate(initial), np.vstack(grads),
                         [UNIT] * len(names))


def box_tracer_parts(
    tracer: str,
    sections: dict[str, float],
    tracer_ops: dict[str, TracerOperator],
    area: np.ndarray,
    offsets: dict[str, np.ndarray],
    ekman: dict[str, np.ndarray],
    layout: UnknownLayout,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Net tracer inflow of one box by class, and the box-class mean concentrations.

    The inverse builds the tracer's anomaly rows from these exactly as it
    builds the salt rows (:mod:`sectionkit.inverse`).

    Parameters
    ----------
    tracer : str
        Plain name.
    sections : dict of str -> float
        The box's sections and their sign (+1 when positive transport enters).
    tracer_ops : dict of str -> TracerOperator
        Tracer operators by section.
    area : ndarray (class,)
        Total cross-section area of each class over the box's sections, m^2.
    offsets, ekman : dict of str -> ndarray (pair,)
        Reference offsets (m s^-1) and Ekman volume transports (m^3 s^-1).
    layout : UnknownLayout
        Unknown layout.

    Returns
    -------
    value : ndarray (class,)
        Net inflow before adjustment, kmol s^-1.
    gradient : ndarray (class, unknown)
        Its derivative, kmol s^-1 per unknown.
    mean, spread : ndarray (class,)
        Area-weighted mean and standard deviation of the concentration over
        the box's sections, umol/kg.
    """
    value = 0.0
    grad = 0.0
    sums = 0.0
    for name, sign in sections.items():
        top = tracer_ops.get(name)
        if top is None or tracer not in top.names:
            raise SectionDataError(
                f"section {name} has no {tracer} profiles, so {tracer} cannot be conserved in a "
                "box it bounds; give it a bottle file or drop the tracer from [inverse] conserve"
            )
        t = top.names.index(tracer)
        value = value + sign * top.transports(offsets[name], ekman[name])[t]
        grad = grad + sign * tracer_gradient(top, t, layout, ekman[name])
        sums = sums + top.moments[t]
    safe = np.where(area > 0, area, np.nan)
    mean = np.nan_to_num(sums[0] / safe, nan=float(np.nanmean(sums[0] / safe)))
    spread = np.sqrt(np.maximum(np.nan_to_num(sums[1] / safe) - mean**2, 0.0))
    return np.asarray(value), np.asarray(grad), mean, spread
