"""Bottle-tracer transports through the section operator, and exchange files end to end."""

from __future__ import annotations

import gsw
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from _synthetic import canonical_section, thermocline_section

from sectionkit.cli import main
from sectionkit.config import load_config, parse_config
from sectionkit.errors import ConfigError, SectionDataError
from sectionkit.io.exchange_write import write_bottle, write_ctd_zip
from sectionkit.study import Study

try:
    from tests._exchange import bottle_rows, casts, rounded_section
    from tests._sections import write_netcdf
except ImportError:  # tests/ itself on sys.path
    from _exchange import bottle_rows, casts, rounded_section
    from _sections import write_netcdf

FACES = [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 27.6, "p_ref": 0.0}]
# kmol s^-1 carried per (Sv of mass transport / 1025 kg m^-3) of water at 1 umol/kg:
# 1025 kg m^-3 * 1e6 m^3 s^-1 * 1 umol/kg / 1e9 umol/kmol (hand calculation)
KMOL_PER_SV_UMOL = 1025.0 * 1e6 / 1e9


def _config(inverse=None, reference=None, faces=FACES, tracers=("oxygen",), stress=None):
    data = {
        "title": "tracers",
        "sections": [{"name": "south", "file": "unused.nc", "bottle": "unused.csv"}],
        "reference": reference or {"pressure": 2000.0},
        "layers": {"interfaces": list(faces)},
        "tracers": {"transport": list(tracers)},
        "ekman": {"stress": stress or {}},
    }
    if inverse is not None:
        data["inverse"] = inverse
    return parse_config(data)


def _with_tracer(ds, name, values):
    out = ds.copy()
    out[name] = (("station", "pressure"),
                 np.where(np.isfinite(ds["SA"].values), values, np.nan),
                 {"units": "umol/kg", "role": "tracer"})
    return out


def test_uniform_tracer_transport_is_concentration_times_mass_transport():
    ds = _with_tracer(thermocline_section(n=6, dp=10.0), "oxygen", 200.0)
    cfg = _config(inverse={"conserve": ["mass"], "noise_layer": [1.0, 1.0, 1.0]},
                  stress={"south": [0.05, 0.02]})
    study = Study.from_config(cfg, sections={"south": ds})
    results = study.solve()
    out, tracer = results.outputs["south"], results.tracers["south"]
    for layer in study.operators["south"].layer_names:
        m = out.index(f"mass:{layer}")
        t = tracer.index(f"oxygen:{layer}")
        factor = 200.0 * KMOL_PER_SV_UMOL
        assert tracer.initial[t] == pytest.approx(factor * out.initial[m], rel=1e-10)
        adjusted = tracer.value(results.estimate)[t]
        assert adjusted == pytest.approx(factor * out.value(results.estimate)[m], rel=1e-10)
        # posterior error: the same linear functional scaled by the same factor
        err = tracer.std(results.covariance)[t]
        assert err == pytest.approx(factor * out.std(results.covariance)[m], rel=1e-8)
        assert err > 0


def test_tracer_linear_in_pressure_gives_its_analytic_class_transport():
    # two identical stations: no shear, so the velocity is the known reference u0 at every
    # level; the class transport is u0 L * integral of rho(p) c(p) dz over the class
    p = np.arange(0.0, 2000.0 + 5.0, 10.0)
    ct = 2.0 + 18.0 * np.exp(-p / 700.0)
    sa = np.full(p.size, 35.0)
    lat = np.array([30.0, 30.0])
    lon = np.array([-40.0, -39.5])
    ds = canonical_section(np.tile(sa, (2, 1)), np.tile(ct, (2, 1)), p, lon, lat,
                           name="south")
    c = 20.0 + 0.05 * p
    ds = _with_tracer(ds, "silicate", np.tile(c, (2, 1)))
    u0 = 0.1
    face = {"sigma": 26.0, "p_ref": 0.0}
    cfg = _config(reference={"velocity": {"velocity": u0, "pressure": 0.0}}, faces=[face],
                  tracers=["silicate"])
    tracer = Study.from_config(cfg, sections={"south": ds}).solve().tracers["south"]

    # independent: gsw and numpy on a 0.01 dbar grid, interface by root finding
    fine = np.linspace(0.0, 2000.0, 200001)
    ct_f = 2.0 + 18.0 * np.exp(-fine / 700.0)
    rho = gsw.rho(35.0, ct_f, fine)
    z = gsw.z_from_p(fine, 30.0)
    integrand = rho * (20.0 + 0.05 * fine)  # umol m^-3
    sigma = gsw.sigma0(35.0, ct_f)
    k = int(np.flatnonzero(sigma > 26.0)[0])
    length = float(gsw.distance(lon, lat)[0])

    def integral(lo, hi):
        return -np.trapezoid(integrand[lo:hi], z[lo:hi])

    upper = u0 * length * integral(0, k + 1) / 1e9
    lower = u0 * length * integral(k, fine.size) / 1e9
    # classes: the operator places the interface by linear interpolation of sigma between
    # 10 dbar levels (measured 9e-5 relative here); the total does not depend on it
    assert tracer.initial[tracer.index("silicate:class_0")] == pytest.approx(upper, rel=2e-4)
    assert tracer.initial[tracer.index("silicate:class_1")] == pytest.approx(lower, rel=2e-4)
    assert tracer.initial[tracer.index("silicate:total")] == pytest.approx(upper + lower,
                                                                          rel=1e-5)


def test_tracer_missing_at_a_station_is_an_error_naming_it():
    ds = thermocline_section(n=4, dp=10.0)
    values = np.full(ds["SA"].shape, 150.0)
    values[2] = np.nan
    ds = _with_tracer(ds, "oxygen", values)
    with pytest.raises(SectionDataError, match="stations 3 have no oxygen"):
        Study.from_config(_config(), sections={"south": ds})


def test_conserved_uniform_tracer_has_an_empty_anomaly_row():
    # anomaly form (like salt): a tracer equal everywhere carries no anomaly
    ds = _with_tracer(thermocline_section(n=6, dp=10.0), "silicate", 40.0)
    cfg = _config(inverse={"conserve": ["mass", "silicate"], "noise_layer": [1.0, 1.0, 1.0]},
                  tracers=["silicate"])
    study = Study.from_config(cfg, sections={"south": ds})
    system = study.solve().inverse.system
    rows = [i for i, r in enumerate(system.rows) if r[1].startswith("silicate:")]
    mass = [i for i, r in enumerate(system.rows) if r[1].startswith("mass:class_")]
    assert len(rows) == 3 and system.units[rows[0]] == "kmol s-1"
    scale = 40.0 * KMOL_PER_SV_UMOL * np.abs(system.matrix[mass]).max()
    assert np.abs(system.matrix[rows]).max() < 1e-9 * scale
    assert np.abs(system.initial[rows]).max() < 1e-9 * 40.0 * np.abs(system.initial[mass]).max()


def test_tracer_linear_in_salinity_has_the_salt_anomaly_row_scaled():
    # c = a + b SA: the tracer anomaly inflow T_c - k c_i M_i equals k b times the salt
    # anomaly inflow S - SA_i M_i (linearity, hand algebra), transfers included
    ds = thermocline_section(n=6, dp=10.0)
    a, b = 10.0, 3.0
    ds = _with_tracer(ds, "silicate", a + b * ds["SA"].values)
    cfg = _config(inverse={"conserve": ["mass", "salt", "silicate"], "salinity": "absolute",
                           "noise_layer": [1.0, 1.0, 1.0]}, tracers=["silicate"])
    system = Study.from_config(cfg, sections={"south": ds}).solve().inverse.system
    salt = [i for i, r in enumerate(system.rows) if r[1].startswith("salt:")]
    tracer = [i for i, r in enumerate(system.rows) if r[1].startswith("silicate:")]
    k = KMOL_PER_SV_UMOL
    np.testing.assert_allclose(system.matrix[tracer], k * b * system.matrix[salt],
                               rtol=1e-9, atol=1e-9 * np.abs(system.matrix[tracer]).max())
    np.testing.assert_allclose(system.initial[tracer], k * b * system.initial[salt],
                               rtol=1e-9, atol=1e-9 * np.abs(system.initial[tracer]).max())


def _write_cruise(tmp_path, sec):
    cs = casts(sec)
    c = cs[1]
    t = c["temperature"].copy()
    t[120] += 5.0  # a spike, flagged bad
    flags = np.full(t.size, 2)
    flags[120] = 4
    c.update(temperature=t, flags={"CTDTMP": flags})
    write_ctd_zip(tmp_path / "cruise_ct1.zip", cs)
    rows = bottle_rows(sec)
    n = len(rows["STNNBR"])
    bflags = {"OXYGEN": [2] * n, "SILCAT": [2] * n}
    rows["OXYGEN"][1], bflags["OXYGEN"][1] = 900.0, 4  # a bad bottle
    write_bottle(tmp_path / "cruise_hy1.csv", rows, flags=bflags)


def _toml(tmp_path, file, extra=""):
    path = tmp_path / f"{file}.toml"
    path.write_text(f"""title = "invented cruise"
[grid]
dp = 2.0
[[sections]]
name = "line"
file = "{file}"
{extra}
[reference]
pressure = 800.0
[layers]
interfaces = [ {{ sigma = 26.0, p_ref = 0.0 }}, {{ sigma = 27.0, p_ref = 0.0 }} ]
""")
    return path


def test_exchange_files_and_cf_netcdf_of_one_section_give_identical_transports(tmp_path):
    sec = rounded_section()
    write_ctd_zip(tmp_path / "cruise.zip", casts(sec))
    write_netcdf(tmp_path / "line.nc", {**sec, "station": [str(s) for s in sec["station"]]})
    a = Study.from_config(load_config(_toml(tmp_path, "cruise.zip"))).solve()
    b = Study.from_config(load_config(_toml(tmp_path, "line.nc"))).solve()
    np.testing.assert_allclose(a.outputs["line"].initial, b.outputs["line"].initial,
                               rtol=1e-9, atol=1e-12)


def test_budget_from_a_zip_and_a_bottle_file_reports_tracer_transports_with_errors(tmp_path):
    sec = rounded_section()
    _write_cruise(tmp_path, sec)
    cfg = _toml(tmp_path, "cruise_ct1.zip", 'bottle = "cruise_hy1.csv"\nstations = [1, 2, 3, 4, 5]')
    cfg.write_text(cfg.read_text() + """
[tracers]
transport = ["OXYGEN", "silicate"]
[inverse]
conserve = ["mass"]
prior_velocity = 0.01
noise_total = 0.1
noise_layer = [0.1, 0.1, 0.1]
[[inverse.section_net]]
section = "line"
transport = 0.0
noise = 0.05
""")
    assert main(["budget", str(cfg), "--out", str(tmp_path / "out"), "--no-figures",
                 "--quiet"]) == 0
    props = pd.read_csv(tmp_path / "out" / "property_transports.csv")
    assert list(props.columns) == ["section", "class", "property", "unit", "initial",
                                   "adjusted", "adjusted_err"]
    assert {"heat", "salt", "oxygen", "silicate"} <= set(props["property"])
    tracer_rows = props[props["property"].isin(["oxygen", "silicate"])]
    assert (tracer_rows["unit"] == "kmol s-1").all()
    assert (tracer_rows["adjusted_err"] > 0).all()
    assert "Tracer transports by density class" in (tmp_path / "out" / "tables.md").read_text()
    with xr.open_dataset(tmp_path / "out" / "results.nc") as nc:
        got = nc["class_tracer_transport_adjusted"].sel(section="line", tracer="oxygen").values
        assert nc["class_tracer_transport_adjusted"].attrs["units"] == "kmol s-1"
    csv = tracer_rows[tracer_rows["property"] == "oxygen"]["adjusted"].to_numpy()
    np.testing.assert_allclose(got, csv, rtol=1e-6)
    provenance = (tmp_path / "out" / "provenance.json").read_text()
    assert "cruise_hy1.csv" in provenance and "flagged 4 (bad) were dropped" in provenance
    # a rerun from the provenance reproduces the property transports byte for byte
    assert main(["budget", str(tmp_path / "out" / "provenance.json"), "--out",
                 str(tmp_path / "again"), "--no-figures", "--quiet"]) == 0
    assert ((tmp_path / "again" / "property_transports.csv").read_bytes()
            == (tmp_path / "out" / "property_transports.csv").read_bytes())


@pytest.mark.parametrize(
    "change, words",
    [
        ({"tracers": {"transport": ["argon"]}}, "tracer 'argon' is not known"),
        ({"sections": [{"name": "south", "file": "x.nc"}]}, "no [[sections]] has a bottle"),
        ({"inverse": {"conserve": ["mass", "nitrate"]}},
         "tracer 'nitrate' must also be listed in [tracers] transport"),
        ({"inverse": {"noise_tracer": {"oxygen": [1.0]}}}, "give one noise per class"),
    ],
)
def test_tracer_configuration_mistakes_are_named(change, words):
    data = {
        "sections": [{"name": "south", "file": "x.nc", "bottle": "b.csv"}],
        "classes": {"interfaces": list(FACES)},
        "tracers": {"transport": ["oxygen"]},
    }
    data.update(change)
    with pytest.raises(ConfigError) as info:
        parse_config(data)
    assert words in str(info.value)
