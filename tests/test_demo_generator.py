"""The demo's invented ocean: deterministic files, sound physics, a truth that closes.

Most checks use the small scenario (10 stations per line on a 10 dbar grid);
the physical-shape checks use the bundled size, built once per session.
"""

from __future__ import annotations

import csv
import hashlib
import zipfile
from pathlib import Path

import gsw
import netCDF4
import numpy as np
import pytest
import tomllib

from sectionkit import demo
from sectionkit.errors import ComputationError
from sectionkit.geostrophy import ReferenceChoice, resolve_references
from sectionkit.layers import Interface
from sectionkit.operator import RHO0, build_operator

SV = 1.0e6  # m^3 s^-1 (common practice)
REPO = Path(__file__).resolve().parents[1]
BUNDLED = REPO / "demo_sections"


@pytest.fixture(scope="module")
def small_files(tmp_path_factory) -> dict[str, Path]:
    return demo.write_demo(tmp_path_factory.mktemp("demo_small"), small=True)


@pytest.fixture(scope="module")
def small_truth() -> demo.DemoTruth:
    return demo.demo_truth(small=True)


@pytest.fixture(scope="module")
def full_truth() -> demo.DemoTruth:
    return demo.demo_truth()


def _digest(paths: dict[str, Path]) -> dict[str, str]:
    return {key: hashlib.sha256(path.read_bytes()).hexdigest() for key, path in paths.items()}


def _pair_distance_km(op) -> np.ndarray:
    d = op.pairs["distance"].values / 1e3
    return np.cumsum(d) - 0.5 * d


# --------------------------------------------------------------------------- determinism


def test_two_generations_write_byte_identical_files(small_files, tmp_path):
    again = demo.write_demo(tmp_path / "again", small=True)
    assert set(again) == set(small_files)
    assert _digest(again) == _digest(small_files)


def test_generate_section_returns_the_same_values_every_call():
    a = demo.generate_section("north", small=True)
    b = demo.generate_section("north", small=True)
    np.testing.assert_array_equal(a["SA"].values, b["SA"].values)
    np.testing.assert_array_equal(a["CT"].values, b["CT"].values)


#: Relative tolerance, against the largest magnitude of a column or variable, for numbers
#: that pass through BLAS/LAPACK (the truth's conditioning solves a linear system): other
#: CPUs' kernels differ by ~1e-7 of a column's scale (6e-8 m/s measured on b_true);
#: any change of physics moves them by far more.
BLAS_RTOL = 1e-5


def _assert_csv_close(bundled: Path, fresh: Path) -> None:
    with bundled.open(newline="") as fa, fresh.open(newline="") as fb:
        a, b = list(csv.reader(fa)), list(csv.reader(fb))
    assert a[0] == b[0], f"{bundled.name}: header differs"
    assert len(a) == len(b), f"{bundled.name}: {len(a)} rows, a fresh generation has {len(b)}"
    assert [len(r) for r in a] == [len(r) for r in b], f"{bundled.name}: row lengths differ"
    width = max(len(r) for r in a)  # exchange files: header lines are shorter than data rows
    for col in range(width):
        name = a[0][col] if col < len(a[0]) else f"#{col}"
        cells_a = [row[col] for row in a[1:] if len(row) > col]
        cells_b = [row[col] for row in b[1:] if len(row) > col]
        va, vb = _numbers(cells_a), _numbers(cells_b)
        text = np.isnan(va) & np.array([c != "" for c in cells_a])
        assert [c for c, t in zip(cells_a, text, strict=True) if t] == [
            c for c, t in zip(cells_b, text, strict=True) if t], f"{bundled.name}: column {name}"
        scale = np.nanmax(np.abs(va)) if np.any(np.isfinite(va)) else 0.0
        # a printed number may also flip by one unit in its last place
        last_place = max((10.0 ** -len(c.partition(".")[2]) for c in cells_a if "." in c),
                         default=0.0)
        np.testing.assert_allclose(vb, va, rtol=0,
                                   atol=max(BLAS_RTOL * scale, last_place) * (1 + 1e-9) + 1e-12,
                                   err_msg=f"{bundled.name}: column {name}")


def _numbers(cells: list[str]) -> np.ndarray:
    """Each cell as a number; NaN for an empty or text cell (compared exactly instead)."""
    out = []
    for c in cells:
        try:
            out.append(float(c))
        except ValueError:
            out.append(np.nan)
    return np.array(out)


def _assert_netcdf_close(bundled: Path, fresh: Path) -> None:
    with netCDF4.Dataset(bundled) as a, netCDF4.Dataset(fresh) as b:
        assert a.__dict__ == b.__dict__, f"{bundled.name}: global attributes differ"
        assert set(a.variables) == set(b.variables)
        for name, va in a.variables.items():
            vb = b.variables[name]
            assert va.__dict__ == vb.__dict__ and va.dimensions == vb.dimensions, name
            xa, xb = va[:], vb[:]
            if xa.dtype.kind in "fiu":
                xa = np.ma.filled(np.ma.asarray(xa, dtype=float), np.nan)
                xb = np.ma.filled(np.ma.asarray(xb, dtype=float), np.nan)
                scale = np.nanmax(np.abs(xa)) if np.any(np.isfinite(xa)) else 0.0
                np.testing.assert_allclose(xb, xa, rtol=0, atol=BLAS_RTOL * scale,
                                           err_msg=f"{bundled.name}: {name}")
            else:
                assert np.array_equal(np.asarray(xa), np.asarray(xb)), name


def _last_digit(text: str) -> float:
    """One unit in the last decimal a number is written with (``"35.1234"`` -> 1e-4)."""
    mantissa, _, exponent = text.lower().partition("e")
    decimals = len(mantissa.partition(".")[2])
    return 10.0 ** (-decimals + (int(exponent) if exponent else 0))


def _assert_text_close(name: str, text_a: str, text_b: str) -> None:
    """Exchange-format text: the same lines and fields, numbers equal to their last digit.

    Numbers written with a fixed number of decimals may flip their last digit when another
    CPU's BLAS kernel moves them by ~1e-7; text fields must be identical.
    """
    lines_a, lines_b = text_a.splitlines(), text_b.splitlines()
    assert len(lines_a) == len(lines_b), f"{name}: {len(lines_a)} lines, fresh {len(lines_b)}"
    for n, (la, lb) in enumerate(zip(lines_a, lines_b, strict=True), start=1):
        fa, fb = la.split(","), lb.split(",")
        assert len(fa) == len(fb), f"{name} line {n}: fields differ"
        for a, b in zip(fa, fb, strict=True):
            try:
                va, vb = float(a), float(b)
            except ValueError:
                assert a == b, f"{name} line {n}: {a!r} != {b!r}"
                continue
            tol = BLAS_RTOL * max(abs(va), abs(vb)) + 1.01 * max(_last_digit(a), _last_digit(b))
            assert abs(va - vb) <= tol, f"{name} line {n}: {a} != {b}"


def _assert_zip_close(bundled: Path, fresh: Path) -> None:
    with zipfile.ZipFile(bundled) as za, zipfile.ZipFile(fresh) as zb:
        assert za.namelist() == zb.namelist(), f"{bundled.name}: members differ"
        for member in za.namelist():
            _assert_text_close(f"{bundled.name}/{member}", za.read(member).decode("utf-8"),
                               zb.read(member).decode("utf-8"))


def test_bundled_demo_sections_are_what_the_generator_writes(tmp_path):
    # the committed files must be reproducible from the code as it is: text exactly,
    # numbers to a tolerance that absorbs other CPUs' BLAS kernels (tests run on any CPU)
    if not (BUNDLED / "demo.toml").is_file():
        pytest.skip("demo_sections/ is not present in this checkout")
    fresh = demo.write_demo(tmp_path / "fresh")
    for key, path in fresh.items():
        bundled = BUNDLED / path.name
        assert bundled.is_file(), f"{bundled} is missing; run python -m sectionkit.demo --write"
        if path.name.startswith("truth_"):
            _assert_csv_close(bundled, path)
        elif path.suffix == ".zip":
            _assert_zip_close(bundled, path)
        elif path.suffix == ".csv":
            _assert_text_close(path.name, bundled.read_text(encoding="utf-8"),
                               path.read_text(encoding="utf-8"))
        elif path.suffix == ".nc":
            _assert_netcdf_close(bundled, path)
        elif path.suffix == ".zip":  # CTD casts: observed water, no BLAS on the way
            assert bundled.read_bytes() == path.read_bytes(), f"{bundled.name} differs ({key})"
        else:
            assert bundled.read_text(encoding="utf-8") == path.read_text(encoding="utf-8"), (
                f"{bundled.name} differs from a fresh generation ({key})")


# --------------------------------------------------------------------------- water column


@pytest.mark.parametrize("name", ["south", "north"])
def test_noisy_water_columns_have_no_density_inversion_beyond_001(name):
    # adjacent levels compared at their mid pressure (local potential density, gsw.rho)
    ds = demo.generate_section(name, small=True)
    sa, ct, p = ds["SA"].values, ds["CT"].values, ds["pressure"].values
    mid = 0.5 * (p[1:] + p[:-1])
    drho = gsw.rho(sa[:, 1:], ct[:, 1:], mid) - gsw.rho(sa[:, :-1], ct[:, :-1], mid)
    assert np.nanmin(drho) > -0.01


@pytest.mark.parametrize("name", ["south", "north"])
def test_noise_free_water_columns_are_strictly_stable(name):
    scenario = demo.DemoScenario.small()
    line = scenario.line(name)
    x = demo.station_distances(line)
    p = np.arange(0.0, 6000.0, 5.0)
    sa, ct = demo.true_water(line, x, p, scenario)
    lat = np.full(x.size, 0.5 * (line.west[1] + line.east[1]))
    n2, _ = gsw.Nsquared(sa, ct, np.broadcast_to(p, sa.shape), lat[:, None], axis=1)
    assert n2.min() > 0.0


def test_water_masses_lie_in_their_stated_ranges(full_truth):
    for name, ds in full_truth.sections.items():
        sa, ct, p = ds["SA"].values, ds["CT"].values, ds["pressure"].values
        sp = gsw.SP_from_SA(sa, p, ds["lon"].values[:, None], ds["lat"].values[:, None])
        interior = slice(10, -5)
        assert 20.0 < np.nanmin(ct[:, 0]) and np.nanmax(ct[:, 0]) < 27.0, name
        assert 36.0 < np.nanmax(sp[:, :150]) < 36.8, name  # warm salty thermocline
        band = (p >= 800) & (p <= 1300)
        sp_min = np.nanmin(sp[interior][:, band], axis=1)
        assert np.all((sp_min > 34.9) & (sp_min < 35.1)), name  # fresher intermediate water
        deep = (p >= 2000) & (p <= 3500)
        assert 2.0 < np.nanmin(ct[interior][:, deep]) and np.nanmax(ct[interior][:, deep]) < 4.5
        last = [np.flatnonzero(np.isfinite(c))[-1] for c in ct]
        bottom_ct = np.array([ct[i, k] for i, k in enumerate(last)])
        abyssal = ds["bottom_depth"].values > 4800
        assert abyssal.sum() >= 5, name
        assert np.all((bottom_ct[abyssal] > 0.5) & (bottom_ct[abyssal] < 1.6)), name


def test_thermocline_deepens_westward_to_the_jet_and_rises_inshore_of_it():
    scenario = demo.DemoScenario()
    line = scenario.line("south")
    x = np.array([20.0, line.jet_offset + 4 * line.jet_width, line.length_km - 100.0])
    p = np.arange(0.0, 2000.0, 2.0)
    _, ct = demo.true_water(line, x, p, scenario)
    depth_12c = np.array([np.interp(-12.0, -row, p) for row in ct])
    inshore, offshore, east = depth_12c
    assert offshore > east + 150.0  # deepens toward the west
    assert offshore > inshore + 300.0  # the jet's front


def test_topography_has_slopes_ridge_and_abyssal_plains(full_truth):
    for name, ds in full_truth.sections.items():
        depth = ds["bottom_depth"].values
        n = depth.size
        assert depth[0] < 500 and depth[-1] < 500, name  # shelves at both ends
        middle = depth[n // 4 : 3 * n // 4]
        assert 2400 < middle.min() < 3100, name  # the ridge crest
        assert 5000 < depth.max() < 5700, name  # abyssal plains


def test_stations_crowd_over_the_slopes_and_spread_in_the_interior():
    for line in demo.DemoScenario().lines:
        gaps = np.diff(demo.station_distances(line))
        assert 30 <= gaps.size + 1 <= 50
        assert 10.0 <= gaps[0] <= 20.0 and 10.0 <= gaps[-1] <= 20.0
        assert 50.0 <= np.median(gaps) <= 95.0


# --------------------------------------------------------------------------- classes and flow


@pytest.mark.parametrize("name", ["south", "north"])
def test_every_configured_class_has_area_on_each_line(small_truth, name):
    area = small_truth.operators[name].area[0].sum(axis=0)  # volume quantity, m^2
    assert area.shape == (len(small_truth.scenario.layer_names),)
    assert np.all(area > 1e8)  # > 100 km^2


def test_western_boundary_jet_is_poleward_and_the_interior_returns(full_truth):
    op = full_truth.operators["south"]
    v = op.absolute_velocity(full_truth.offset["south"], full_truth.b_true["south"])
    x = _pair_distance_km(op)
    upper = op.pressure <= 1000.0
    assert np.nanmax(v[x < 250][:, 0]) > 1.0  # m s^-1, strong and narrow
    transport = op.transports(full_truth.offset["south"], full_truth.b_true["south"])[0]
    jet = transport[x < 250][:, :2].sum() / SV
    interior = transport[x >= 250][:, :2].sum() / SV
    assert jet > 30.0 and interior < -20.0
    assert np.nanmean(v[x > 400][:, upper]) < 0.0


def test_true_deep_western_boundary_current_flows_south_and_interior_is_weak(full_truth):
    for name in ("south", "north"):
        op = full_truth.operators[name]
        v = op.absolute_velocity(full_truth.offset[name], full_truth.b_true[name])
        x = _pair_distance_km(op)
        deep = (op.pressure >= 2500.0) & (op.pressure <= 3500.0)
        assert np.nanmean(v[x < 250][:, deep]) < -0.01, name
        assert abs(np.nanmean(v[x > 400][:, deep])) < 0.005, name
        assert np.sqrt(np.mean(full_truth.b_true[name] ** 2)) < 0.03, name


# --------------------------------------------------------------------------- the truth


def test_truth_closes_every_class_mass_budget_of_the_box(small_truth):
    # Twin-experiment check of the truth itself: built again here from the engine
    # (build_operator, resolve_references, ekman_volume), the true reference
    # velocities must close each class's mass budget between the lines given
    # the diapycnal transfers W, the Ekman transports and the strait.
    sc = small_truth.scenario
    total = np.zeros(len(sc.layer_names))
    for line in sc.lines:
        ds = demo.generate_section(line.name, sc)
        op = build_operator(ds, list(sc.interfaces), list(sc.layer_names),
                            bottom_triangle=sc.bottom_triangle, ekman_depth=sc.ekman_depth)
        choice = ReferenceChoice("pressure", sc.reference_pressure)
        _, offset = resolve_references([choice] * op.n_pair, op.v_eff, op.pressure, op.common)
        ekman = op.ekman_volume(*line.wind_stress)
        mass = op.transports(offset, small_truth.b_true[line.name], ekman=ekman)[1].sum(axis=0)
        total += (1.0 if line.into_box else -1.0) * mass / SV
    w = np.concatenate([[0.0], sc.diapycnal, [0.0]])
    strait = np.zeros_like(total)
    strait[sc.layer_names.index(sc.strait_layer)] = sc.strait_transport
    residual = total + strait + w[:-1] - w[1:]
    np.testing.assert_allclose(residual, 0.0, atol=1e-6)
    assert np.abs(total).max() > 0.1  # the budget is not trivially empty


def test_truth_needs_the_inverse_the_configured_reference_does_not_close_the_box(small_truth):
    initial = sum(
        (1.0 if line.into_box else -1.0) * small_truth.class_transports(line.name, true=False)
        for line in small_truth.scenario.lines
    ) / SV
    w = np.concatenate([[0.0], small_truth.diapycnal, [0.0]])
    imbalance = initial + small_truth.known + w[:-1] - w[1:]
    assert np.abs(imbalance).max() > 1.0  # Sv: the level of no motion is wrong


def test_truth_net_transport_of_the_inflow_line_is_as_chosen(small_truth):
    net = small_truth.class_transports("south", "mass").sum() / SV
    assert net == pytest.approx(small_truth.scenario.inflow_net, abs=1e-6)


def test_truth_read_back_from_the_files_closes_the_budgets(small_files):
    # the same twin check from what a user has: demo.toml, the NetCDF files
    # through the reader, and b_true from truth_pairs.csv
    io = pytest.importorskip("sectionkit.io")
    config = tomllib.loads(small_files["config"].read_text())
    faces = [Interface(f["sigma"], f["p_ref"]) for f in config["classes"]["interfaces"]]
    names = config["classes"]["names"]
    with small_files["truth_pairs"].open() as fh:
        rows = list(csv.DictReader(fh))
    folder = small_files["config"].parent
    total = np.zeros(len(names))
    for spec in config["sections"]:
        ds, _ = io.load_section(folder / spec["file"], name=spec["name"], dp=config["grid"]["dp"])
        op = build_operator(ds, faces, names,
                            bottom_triangle=config["reference"]["bottom_triangle"],
                            ekman_depth=config["ekman"]["depth"])
        choice = ReferenceChoice("pressure", config["reference"]["pressure"])
        _, offset = resolve_references([choice] * op.n_pair, op.v_eff, op.pressure, op.common)
        ekman = op.ekman_volume(*config["ekman"]["stress"][spec["name"]])
        b = np.array([float(r["b_true_m_s"]) for r in rows if r["section"] == spec["name"]])
        mass = op.transports(offset, b, ekman=ekman)[1].sum(axis=0) / SV
        total += (1.0 if spec["into_box"] else -1.0) * mass
    with small_files["truth_diapycnal"].open() as fh:
        w = np.array([0.0] + [float(r["w_true_sv"]) for r in csv.DictReader(fh)] + [0.0])
    known = np.zeros(len(names))
    for k in config["inverse"]["known"]:
        known[names.index(k["class"])] += k["transport"]
    np.testing.assert_allclose(total + known + w[:-1] - w[1:], 0.0, atol=1e-5)


def test_in_memory_section_equals_the_file_read_by_the_loader(small_files):
    io = pytest.importorskip("sectionkit.io")
    loaded, _ = io.load_section(small_files["south"], name="south", dp=10.0)
    memory = demo.generate_section("south", small=True)
    np.testing.assert_allclose(loaded["SA"].values, memory["SA"].values, atol=1e-10)
    np.testing.assert_allclose(loaded["CT"].values, memory["CT"].values, atol=1e-10)
    np.testing.assert_allclose(
        loaded["bottom_pressure"].values, memory["bottom_pressure"].values, atol=1e-9
    )


def test_ekman_transports_follow_the_trade_winds_and_westerlies(small_truth):
    # -(tau . t) L / (rho f): easterlies push water north, westerlies south
    south = small_truth.ekman["south"].sum() / SV
    north = small_truth.ekman["north"].sum() / SV
    f = gsw.f(28.0)
    length = small_truth.operators["south"].pairs["distance"].values.sum()
    assert south == pytest.approx(0.06 * length / (RHO0 * f) / SV, rel=0.03)
    assert south > 2.0 and north < -1.5


# --------------------------------------------------------------------------- file contracts


@pytest.mark.parametrize("name", ["south", "north"])
def test_netcdf_files_carry_the_cf_standard_names(small_files, name):
    with netCDF4.Dataset(small_files[name]) as nc:
        assert nc.getncattr("featureType") == "profile"
        assert nc.getncattr("Conventions") == "CF-1.8"
        assert nc.getncattr("title")
        assert "sectionkit.demo" in nc.getncattr("history")
        assert "station" in nc.dimensions
        by_name = {}
        for var in nc.variables.values():
            if "standard_name" in var.ncattrs():
                by_name[var.getncattr("standard_name")] = var
        expected = {
            "sea_water_pressure": ("dbar", 1),
            "sea_water_temperature": ("degC", 2),
            "sea_water_practical_salinity": ("1", 2),
            "latitude": ("degrees_north", 1),
            "longitude": ("degrees_east", 1),
            "sea_floor_depth_below_sea_surface": ("m", 1),
        }
        for standard_name, (units, ndim) in expected.items():
            var = by_name[standard_name]
            assert var.getncattr("units") == units, standard_name
            assert var.ndim == ndim, standard_name
        for standard_name in ("latitude", "longitude", "sea_floor_depth_below_sea_surface"):
            assert by_name[standard_name].dimensions == ("station",)
        assert by_name["sea_water_temperature"].dimensions[0] == "station"
        ids = [v for v in nc.variables.values() if v.__dict__.get("cf_role") == "profile_id"]
        assert len(ids) == 1 and ids[0].dimensions == ("station",)
        # names are unusual on purpose: readers must look up standard_name
        assert by_name["sea_water_temperature"].name not in ("temperature", "CT", "t")


def test_values_below_the_sea_floor_are_fill_values(small_files):
    with netCDF4.Dataset(small_files["north"]) as nc:
        temp = nc["temp"][:]
        pres = np.asarray(nc["pres"][:])
        lat = np.asarray(nc["stn_lat"][:])
        bottom_p = gsw.p_from_z(-np.asarray(nc["water_depth"][:]), lat)
        assert "_FillValue" in nc["temp"].ncattrs()
    below = pres[None, :] > bottom_p[:, None]
    assert below.any()
    assert np.all(np.ma.getmaskarray(temp)[below])
    assert not np.ma.getmaskarray(temp)[~below].any()


def test_files_store_in_situ_temperature_and_practical_salinity(small_files):
    memory = demo.generate_section("south", small=True)
    with netCDF4.Dataset(small_files["south"]) as nc:
        t = np.ma.filled(nc["temp"][:].astype(float), np.nan)
        sp = np.ma.filled(nc["psal"][:].astype(float), np.nan)
    deep = memory["pressure"].values > 4000
    # in-situ temperature exceeds CT at depth (adiabatic heating); SA exceeds SP
    assert np.nanmin((t - memory["CT"].values)[:, deep]) > 0.2
    assert np.nanmin(memory["SA"].values - sp) > 0.1


def test_demo_toml_follows_the_configuration_contract(small_files):
    config = tomllib.loads(small_files["config"].read_text())
    assert config["grid"]["dp"] == 10.0
    names = [s["name"] for s in config["sections"]]
    assert names == ["south", "north"]
    for spec in config["sections"]:
        assert (small_files["config"].parent / spec["file"]).is_file()
    assert config["reference"]["pressure"] == 3000.0
    faces = config["classes"]["interfaces"]
    assert len(config["classes"]["names"]) == len(faces) + 1
    inverse = config["inverse"]
    assert inverse["solver"] == "gauss-markov"
    assert inverse["conserve"] == ["mass", "salt"]
    assert len(inverse["noise_class"]) == len(faces) + 1
    (strait,) = inverse["known"]
    assert strait["transport"] == 0.8 and strait["class"] == "upper"
    assert set(config["ekman"]["stress"]) == set(names)


def test_demo_toml_is_accepted_by_the_configuration_loader(small_files):
    config_mod = pytest.importorskip("sectionkit.config")
    cfg = config_mod.load_config(small_files["config"])
    assert [s.name for s in cfg.sections] == ["south", "north"]


def test_command_line_help_and_write(tmp_path, capsys):
    with pytest.raises(SystemExit) as stop:
        demo.main(["--help"])
    assert stop.value.code == 0
    assert "--write" in capsys.readouterr().out
    assert demo.main(["--write", str(tmp_path / "cli"), "--small"]) == 0
    assert (tmp_path / "cli" / "demo.toml").is_file()


def test_scenario_refuses_mismatched_class_counts():
    bad = demo.DemoScenario(diapycnal=(1.0, 2.0))
    with pytest.raises(ComputationError, match="diapycnal"):
        bad.check()


def test_failed_generation_leaves_no_half_written_demo(tmp_path, monkeypatch):
    import sectionkit.demo.files as files

    def broken(*args, **kwargs):
        raise RuntimeError("truth failed")

    monkeypatch.setattr(files, "demo_truth", broken)  # the file writer's step that fails
    out = tmp_path / "demo"
    with pytest.raises(RuntimeError):
        demo.write_demo(out, small=True)
    assert list(out.iterdir()) == []
    assert [p.name for p in tmp_path.iterdir()] == ["demo"]
