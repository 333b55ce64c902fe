"""Overturning streamfunctions of a two-layer flow, with and without a net transport.

Analytic source (common practice for the overturning of a section): a layer of
thickness D moving at u1 over a layer at rest in water of depth H carries the net
u1 W D; removing it as a uniform velocity over the section, the streamfunction
peaks at the layer interface with u1 W D (H - D) / H, the same in depth and in
density classes. With a compensating lower layer (no net) it peaks at u1 W D.
Depths from gsw.z_from_p, widths from gsw.distance.
"""

from __future__ import annotations

import gsw
import numpy as np
import pytest
from _synthetic import canonical_section, thermocline_section

from sectionkit.budget import level_end_pressure, section_values
from sectionkit.config import parse_config
from sectionkit.layers import Interface
from sectionkit.operator import build_operator
from sectionkit.study import Study

DP = 10.0
P = np.arange(0.0, 3000.0 + DP / 2, DP)
LAT = 30.0
LON = np.linspace(-30.0, -28.0, 5)
P_TOP = 1000.0  # last level of the upper layer; the lower layer starts at 1010 dbar
U1 = 0.02  # m/s


def _two_layer(u2: float):
    """Operator of a two-layer section (warm light over cold dense) with velocity u1 / u2."""
    upper = P <= P_TOP
    ct = np.where(upper, 15.0, 3.0)[None, :].repeat(LON.size, axis=0)
    sa = np.full_like(ct, 35.0)
    section = canonical_section(sa, ct, P, LON, np.full(LON.size, LAT),
                                np.full(LON.size, P[-1]), name="line")
    sigma_mid = 0.5 * (gsw.sigma0(35.0, 15.0) + gsw.sigma0(35.0, 3.0))
    v = np.where(upper, U1, u2)[None, :].repeat(LON.size - 1, axis=0)
    op = build_operator(section, [Interface(float(sigma_mid), 0.0)], ["light", "dense"],
                        relative_velocity_of_pairs=v)
    return op, section_values(op, np.zeros(op.n_pair))


def _geometry():
    width = gsw.distance(LON, np.full(LON.size, LAT)).sum()  # m
    z = -gsw.z_from_p(P, LAT)
    k = int(np.flatnonzero(P == P_TOP)[0])
    # the linear interpolant of the two-layer velocity changes layer half-way between
    # 1000 and 1010 dbar: the upper layer's transport is u1 W D with D at mid-segment
    depth_d = 0.5 * (z[k] + z[k + 1])
    return width, depth_d, z[-1]


def test_without_net_the_depth_overturning_is_the_upper_layer_transport_at_its_base():
    width, d, h = _geometry()
    u2 = -U1 * d / (h - d)  # the lower layer returns the upper layer's transport
    op, out = _two_layer(u2)
    assert abs(out["net"]) < 1e-9
    assert out["overturning"] == pytest.approx(U1 * width * d / 1e6, rel=1e-9)
    # reported where its integral ends, half-way between 1000 and 1010 dbar
    assert out["overturning_pressure"] == pytest.approx(P_TOP + DP / 2)


def test_depth_streamfunction_is_reported_where_its_integral_ends():
    # in the upper layer psi(z) = u1 W z exactly: each value belongs to the pressure where
    # its integral ends, not to the grid level (half a cell too shallow)
    width, d, h = _geometry()
    op, out = _two_layer(-U1 * d / (h - d))
    ends = level_end_pressure(op.pressure)
    upper = op.pressure < P_TOP
    expected = U1 * width * -gsw.z_from_p(ends[upper], LAT) / 1e6
    # to 1 mm of depth (z(p) is not quite linear over a cell); the old half-cell offset
    # is 5 m
    np.testing.assert_allclose(out["psi_depth"][upper], expected, rtol=0,
                               atol=U1 * width * 1e-3 / 1e6)


def test_net_transport_is_removed_as_a_uniform_velocity_before_the_maximum():
    width, d, h = _geometry()
    op, out = _two_layer(0.0)  # lower layer at rest: the net is the upper layer's transport
    assert out["net"] == pytest.approx(U1 * width * d / 1e6, rel=1e-9)
    expected = U1 * width * d * (h - d) / h / 1e6
    assert out["overturning"] == pytest.approx(expected, rel=1e-6)
    # the streamfunction closes at the bottom
    assert abs(out["psi_depth"][-1]) < 1e-9


def test_density_overturning_shares_the_depth_convention():
    # the same two layers as density classes: the same overturning, up to the split of the
    # one grid segment where velocity and density change (u1 W dz / 8 of transport)
    width, d, h = _geometry()
    dz = -np.diff(gsw.z_from_p(np.array([P_TOP, P_TOP + DP]), LAT))[0]
    for u2 in (0.0, -U1 * d / (h - d)):
        op, out = _two_layer(u2)
        net = out["net"]
        expected = (U1 * width * d - net * 1e6 * d / h) / 1e6
        assert out["overturning_density"] == pytest.approx(expected,
                                                           abs=U1 * width * dz / 4 / 1e6)
        assert out["overturning_density"] == pytest.approx(out["overturning"],
                                                           abs=U1 * width * dz / 4 / 1e6)


def test_a_net_larger_than_its_error_raises_a_caution():
    config = parse_config({"sections": [{"name": "south", "file": "s.nc"}],
                           "reference": {"pressure": 2000.0}})
    study = Study.from_config(config, sections={"south": thermocline_section(n=5, dp=20.0)})
    results = study.solve()
    assert abs(results.value("south", "net")) > 0.1
    (caution,) = results.cautions.of_kind("overturning-net")
    assert "uniform velocity" in str(caution) and "south" in str(caution)
