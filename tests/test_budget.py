"""Class operator and budgets: analytic integrals, conservation, convergence, linearity."""

from __future__ import annotations

import numpy as np
import pytest
from _synthetic import thermocline_section

from sectionkit.budget import SV, make_layout, section_outputs, section_values
from sectionkit.config import parse_config
from sectionkit.errors import ConfigError
from sectionkit.geostrophy import ReferenceChoice, resolve_references
from sectionkit.layers import Interface, check_interfaces, class_levels
from sectionkit.operator import RHO0, build_operator
from sectionkit.study import Study

FACES = [Interface(26.8, 0.0), Interface(27.6, 0.0), Interface(36.9, 2000.0)]
NAMES = ["upper", "thermocline", "intermediate", "deep"]


def _config(reference: float | str = 2000.0, overrides=None, stress=None):
    return parse_config({
        "title": "test",
        "sections": [{"name": "south", "file": "unused.nc"}],
        "reference": {"pressure": reference, "overrides": overrides or {}},
        "ekman": {"stress": stress or {}},
        "layers": {"interfaces": [{"sigma": f.sigma, "p_ref": f.p_ref} for f in FACES],
                   "names": NAMES},
    })


def test_class_integral_of_linear_fields_is_exact_with_fractional_cells():
    # analytic: sigma = s0 + g p and v = v0 + c p on a coarse grid; the interface
    # sits mid-cell at p_i = (sigma_i - s0) / g, so the upper class integral is
    # v0 p_i + c p_i^2 / 2 exactly (linear fields within every cell).
    p = np.arange(0.0, 101.0, 10.0)
    s0, g, v0, c = 25.0, 0.02, 0.1, -0.003
    sigma = (s0 + g * p)[None, None, :]
    face = 25.0 + g * 43.0  # crosses between 40 and 50
    thickness = np.full((1, p.size - 1), 10.0)  # metres per segment
    w = class_levels(sigma, np.array([face]), thickness, np.ones((1, p.size - 1))).dense()
    v = v0 + c * p
    upper = (w[0, 0] * v).sum()
    lower = (w[0, 1] * v).sum()
    p_i = 43.0
    np.testing.assert_allclose(upper, v0 * p_i + c * p_i**2 / 2, rtol=1e-12)
    np.testing.assert_allclose(upper + lower, v0 * 100 + c * 100**2 / 2, rtol=1e-12)


def test_class_transports_sum_to_total_and_areas_to_section_area():
    section = thermocline_section(n=6, dp=10.0)
    op = build_operator(section, FACES, NAMES)
    length = op.pairs["distance"].values
    # class areas add up to the section area; with a straight bottom between
    # stations each pair is a trapezoid: L (H_a + H_b) / 2 (geometry, exact)
    depth = section["bottom_depth"].values
    trapezoids = (length * 0.5 * (depth[:-1] + depth[1:])).sum()
    area = (op.weights.sum(axis=-1) * length[:, None]).sum()
    np.testing.assert_allclose(area, trapezoids, rtol=2e-3)
    _, offset = resolve_references([ReferenceChoice("pressure", 1000.0)] * op.n_pair,
                                   op.v_eff, op.pressure, op.common)
    t = op.transports(offset)[0]  # volume (pair, class)
    column = np.nansum(op.weights.sum(axis=-2) * op.absolute_velocity(offset), axis=-1) * length
    np.testing.assert_allclose(t.sum(axis=-1), column, rtol=1e-12)


def test_every_class_has_area_and_densest_class_sits_at_the_bottom():
    # fact of the trade (common practice): in a stably stratified column the
    # densest class occupies the deepest levels
    op = build_operator(thermocline_section(n=5, dp=10.0), FACES, NAMES)
    area = (op.weights.sum(axis=-1)).sum(axis=0)
    assert np.all(area > 0)
    deepest_level = op.deepest[0]
    assert np.argmax(op.weights[0, :, deepest_level]) == len(NAMES) - 1
    assert np.argmax(op.weights[0, :, 0]) == 0


def test_class_transports_converge_when_dp_is_halved():
    # grid convergence: halving dp changes class transports by < 0.5 %
    # (compare 4 and 2 dbar)
    results = []
    for dp in (4.0, 2.0):
        op = build_operator(thermocline_section(n=6, dp=dp), FACES, NAMES)
        _, offset = resolve_references([ReferenceChoice("pressure", 1500.0)] * op.n_pair,
                                       op.v_eff, op.pressure, op.common)
        results.append(op.transports(offset)[0].sum(axis=0))
    change = np.abs(results[1] - results[0]) / np.abs(results[1]).max()
    assert np.all(change < 0.005), change


def test_reference_change_as_linear_update_equals_full_recompute():
    section = thermocline_section(n=6, dp=10.0)
    study = Study.from_config(_config(2000.0), sections={"south": section})
    first = study.solve()
    study.config = _config(1000.0, overrides={"south:2": "bottom"})
    updated = study.solve()  # operators kept: only offsets change
    fresh = Study.from_config(_config(1000.0, overrides={"south:2": "bottom"}),
                              sections={"south": section}).solve()
    a = updated.outputs["south"].value()
    b = fresh.outputs["south"].value()
    np.testing.assert_allclose(a, b, rtol=1e-10, atol=1e-10)
    assert not np.allclose(first.outputs["south"].value(), a)


def test_uniform_stress_gives_ekman_transport_tau_over_rho_f():
    # analytic (Ekman 1905, common practice): |U_E| = tau / (rho f) per metre of line
    section = thermocline_section(n=6, dp=10.0, lat0=25.0)
    op = build_operator(section, FACES, NAMES)
    tau = 0.08
    ek = op.ekman_volume(tau, 0.0)  # eastward stress across an eastward line: southward
    f = op.pairs["f"].values
    expected = -tau * op.pairs["distance"].values / (RHO0 * f)
    np.testing.assert_allclose(ek, expected, rtol=1e-12)
    assert np.all(ek < 0)
    # it lands in the class of the top Ekman depth (the lightest, here)
    t = op.transports(np.zeros(op.n_pair), 0.0, ek)[0] - op.transports(np.zeros(op.n_pair))[0]
    np.testing.assert_allclose(t.sum(), ek.sum(), rtol=1e-10)
    np.testing.assert_allclose(t[:, 0].sum(), ek.sum(), rtol=1e-10)


def test_freshwater_and_heat_are_linear_functionals_of_the_adjustment():
    section = thermocline_section(n=5, dp=10.0)
    op = build_operator(section, FACES, NAMES)
    layout = make_layout({op.name: op})
    offset = np.zeros(op.n_pair)
    out = section_outputs(op, offset, np.zeros(op.n_pair), layout)
    rng = np.random.default_rng(3)
    b = rng.normal(0, 0.01, op.n_pair)
    direct = op.transports(offset, b)
    via_gradient = out.value(b)
    np.testing.assert_allclose(via_gradient[out.index("net")], direct[0].sum() / SV, rtol=1e-10)
    np.testing.assert_allclose(via_gradient[out.index("heat")], direct[3].sum() / 1e15,
                               rtol=1e-10)


def test_interfaces_not_increasing_in_density_are_refused():
    with pytest.raises(ConfigError, match="increase in density"):
        check_interfaces([Interface(27.0, 0.0), Interface(26.5, 0.0)], None)


def test_unknown_configuration_key_names_the_closest_valid_one():
    with pytest.raises(ConfigError, match="did you mean 'pressure'"):
        parse_config({"sections": [{"name": "a", "file": "x.nc"}],
                      "reference": {"presure": 1000.0}})


def test_in_memory_section_near_the_equator_is_refused_with_the_file_rule():
    # DESIGN.md §4: geostrophy is refused within 2 degrees of the equator unless
    # allow_equator is set; sections handed over in memory meet the same rule as files
    from sectionkit.errors import EquatorError

    section = thermocline_section(n=5, dp=10.0, lat0=1.0)
    with pytest.raises(EquatorError, match=r"south:0 \(stations 1-2.*allow_equator = true"):
        Study.from_config(_config(), sections={"south": section})
    config = _config()
    config.allow_equator = True
    study = Study.from_config(config, sections={"south": section})
    assert study.load_cautions.of_kind("equator")


def test_uniform_flow_gives_closed_form_heat_freshwater_and_overturning():
    # analytic: uniform SA, CT (no shear) moving at a uniform reference velocity b
    # over a flat bottom. Heat = c_p0 CT b L \int rho dz with c_p0 = 3991.86795711963
    # J kg-1 K-1 (TEOS-10 manual, IOC, SCOR and IAPSO 2010; the value of DESIGN.md §4)
    # and rho from gsw.rho; the depth streamfunction grows as b L z; freshwater
    # relative to the water's own salinity is zero.
    import gsw
    from _synthetic import canonical_section

    p = np.arange(0.0, 1001.0, 10.0)
    n, sa0, ct0, b = 4, 35.0, 10.0, 0.05
    section = canonical_section(np.full((n, p.size), sa0), np.full((n, p.size), ct0), p,
                                np.linspace(-30.0, -29.0, n), np.full(n, 30.0),
                                np.full(n, 1000.0))
    # freshwater relative to the water's own SA needs salt budgets in SA
    op = build_operator(section, [], salinity="absolute")
    offset = np.zeros(op.n_pair)
    values = section_values(op, offset, b)
    length = op.pairs["distance"].values.sum()
    fine = np.linspace(0.0, 1000.0, 20001)
    depth = -gsw.z_from_p(fine, 30.0)
    column_mass = np.trapezoid(gsw.rho(sa0, ct0, fine), depth)  # kg m^-2
    heat = 3991.86795711963 * ct0 * b * length * column_mass / 1e15
    np.testing.assert_allclose(values["heat"], heat, rtol=1e-6)
    np.testing.assert_allclose(values["net"], b * length * depth[-1] / 1e6, rtol=1e-6)
    # a uniform flow is all net transport: removed as a uniform velocity, nothing overturns
    np.testing.assert_allclose(values["psi_depth"], 0.0, atol=1e-9 * abs(values["net"]))
    assert abs(values["overturning"]) < 1e-9 * abs(values["net"])
    assert abs(section_values(op, offset, b, reference_salinity=sa0)["freshwater"]) < 1e-12
    np.testing.assert_allclose(
        section_values(op, offset, b, reference_salinity=34.0)["freshwater"],
        values["net_mass"] * (1 - sa0 / 34.0), rtol=1e-10)


def test_changing_classes_rebuilds_without_new_dynamic_height(monkeypatch):
    # DESIGN.md §2: only the class operator depends on the interfaces; the
    # rebuilt study equals a fresh one built from scratch with the new classes
    import dataclasses

    import sectionkit.operator as operator_module

    section = thermocline_section(n=6, dp=10.0)
    study = Study.from_config(_config(1500.0), sections={"south": section})
    faces = [Interface(26.5, 0.0), Interface(36.8, 2000.0)]
    study.config = dataclasses.replace(study.config, interfaces=faces,
                                       layer_names=["light", "middle", "dense"])

    def refuse(*args, **kwargs):
        raise AssertionError("dynamic height recomputed")

    monkeypatch.setattr(operator_module, "specific_volume_pass", refuse)
    study.rebuild_operators()
    monkeypatch.undo()
    fresh = Study.from_config(study.config, sections={"south": section})
    np.testing.assert_allclose(study.solve().outputs["south"].value(),
                               fresh.solve().outputs["south"].value(), rtol=1e-12, atol=1e-12)
    # new data are never taken for the old: a replaced section gets its own dynamic height
    study.sections["south"] = thermocline_section(n=6, dp=10.0, tilt=100.0)
    monkeypatch.setattr(operator_module, "specific_volume_pass", refuse)
    with pytest.raises(AssertionError, match="dynamic height recomputed"):
        study.rebuild_operators()


def test_depth_streamfunction_rows_equal_the_response_of_its_definition():
    # psi_depth is linear in the adjustments and in the Ekman factor: each
    # gradient column must equal section_values' response to a unit change of
    # that unknown (numpy differences of the definition, not the row code);
    # rows formed one at a time, all at once, and G x must agree with it
    section = thermocline_section(n=6, dp=10.0)
    op = build_operator(section, FACES, NAMES)
    layout = make_layout({op.name: op}, ekman_sections=[op.name])
    rng = np.random.default_rng(5)
    offset = rng.normal(0, 0.02, op.n_pair)
    ekman = rng.normal(0, 1e5, op.n_pair)  # m^3 s^-1 per pair
    out = section_outputs(op, offset, ekman, layout)
    base = section_values(op, offset, 0.0, ekman)["psi_depth"]
    expected = np.empty((op.pressure.size, layout.size))
    for j in range(op.n_pair):
        unit = np.zeros(op.n_pair)
        unit[j] = 1.0  # m s^-1
        expected[:, j] = section_values(op, offset, unit, ekman)["psi_depth"] - base
    expected[:, -1] = section_values(op, offset, 0.0, 2.0 * ekman)["psi_depth"] - base
    first = out.index("psi_depth:0")
    levels = np.array([0, 7, op.pressure.size // 2, op.pressure.size - 1])
    scale = np.abs(expected).max()
    np.testing.assert_allclose(out.rows(first + levels), expected[levels], rtol=0,
                               atol=1e-12 * scale)
    np.testing.assert_allclose(out.gradient[first:], expected, rtol=0, atol=1e-12 * scale)
    x = rng.normal(0, 0.01, layout.size)
    np.testing.assert_allclose(out.value(x)[first:], base + expected @ x, rtol=0,
                               atol=1e-12 * np.abs(base + expected @ x).max())
    # the overturning row is the row of its level
    kz = int(np.argmax(np.abs(base)))
    np.testing.assert_allclose(out.row(out.index("overturning")), expected[kz], rtol=0,
                               atol=1e-12 * scale)
