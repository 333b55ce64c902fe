"""Salt budgets in Preformed Salinity S* (default) or Absolute Salinity.

Source: IOC, SCOR and IAPSO 2010, the TEOS-10 manual, and McDougall et al. 2012
(Ocean Sci.): Absolute Salinity is not conserved, Preformed Salinity S* is
designed to be; gsw.Sstar_from_SA computes it.
"""

from __future__ import annotations

import gsw
import numpy as np
import pytest
from _synthetic import canonical_section

from sectionkit.budget import section_values
from sectionkit.config import parse_config
from sectionkit.errors import ConfigError
from sectionkit.operator import RHO0, build_operator
from sectionkit.study import Study
from sectionkit.tables import summary_table

P = np.arange(0.0, 4000.0 + 1, 20.0)
LON = np.array([150.0, 152.0, 154.0, 156.0])  # North Pacific: S* differs most from SA there
LAT = np.full(4, 30.0)


def _uniform_section():
    # uniform SA and CT: no geostrophic shear, so the velocity is the reference alone
    sa = np.full((4, P.size), 34.7)
    ct = np.full((4, P.size), 2.0)
    return canonical_section(sa, ct, P, LON, LAT, np.full(4, 4000.0), name="line")


def _expected_salt(salinity_of):
    """Sum over pairs of width x integral over depth of rho S v / rho0, v = 0.1 m/s."""
    total = 0.0
    width = gsw.distance(LON, LAT)
    for j in range(3):
        lat_mid = 0.5 * (LAT[j] + LAT[j + 1])
        z = -gsw.z_from_p(P, lat_mid)
        s = 0.5 * (salinity_of(j) + salinity_of(j + 1))
        rho = gsw.rho(34.7, 2.0, P)
        total += width[j] * np.trapezoid(rho * s * 0.1 / RHO0, z)
    return total / 1e6  # Sv g/kg


def test_salt_transport_uses_preformed_salinity_by_default():
    op = build_operator(_uniform_section(), [])
    salt = section_values(op, np.full(3, 0.1))["salt_transport"].sum()
    expected = _expected_salt(lambda k: gsw.Sstar_from_SA(34.7, P, LON[k], LAT[k]))
    assert salt == pytest.approx(expected, rel=1e-9)
    # the difference from SA matters at this precision (S* < SA in the deep Pacific)
    with_sa = _expected_salt(lambda k: np.full(P.size, 34.7))
    assert abs(with_sa - expected) > 1e-4 * abs(expected)


def test_absolute_salinity_keeps_sa_in_the_salt_transport():
    op = build_operator(_uniform_section(), [], salinity="absolute")
    salt = section_values(op, np.full(3, 0.1))["salt_transport"].sum()
    assert salt == pytest.approx(_expected_salt(lambda k: np.full(P.size, 34.7)), rel=1e-9)


def test_unknown_salinity_kind_is_refused_with_a_hint():
    with pytest.raises(ConfigError, match="salinity = 'preformd'.*did you mean 'preformed'"):
        parse_config({"sections": [{"name": "a", "file": "a.nc"}],
                      "inverse": {"salinity": "preformd"}})


def test_freshwater_names_its_reference_salinity():
    config = parse_config({"sections": [{"name": "line", "file": "a.nc"}],
                           "reference": {"pressure": 1000.0},
                           "inverse": {"salinity": "absolute", "conserve": ["mass"]}})
    study = Study.from_config(config, sections={"line": _uniform_section()})
    row = summary_table(study, study.solve()).iloc[0]
    assert row["freshwater_ref_kind"] == "Absolute Salinity SA"
    # uniform SA: the section's mean salinity is that value
    assert row["freshwater_ref_salinity"] == pytest.approx(34.7, abs=1e-9)
