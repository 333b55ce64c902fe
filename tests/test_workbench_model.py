"""The workbench's state model against batch runs of the same settings.

Every control must give what a batch run of a configuration written with the
same settings gives (``Study.from_config(...).solve()``): the class table
updated at once by the linear reference update agrees to rounding, the full
tables agree exactly, and the exported CSVs are byte-identical to
``sectionkit budget``. The sections are invented here (a smooth warm, salty
thermocline over cold deep water on two made-up lines); nothing is a real
cruise.
"""

from __future__ import annotations

import copy
import subprocess
import sys
from pathlib import Path

import gsw
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from sectionkit.config import load_config, parse_config
from sectionkit.errors import ConfigError
from sectionkit.report import tables
from sectionkit.study import Study
from sectionkit.workbench.model import WorkbenchState

# --------------------------------------------------------------- invented box
BASE = {
    "title": "Invented test box",
    "grid": {"dp": 2.0},
    "sections": [
        {"name": "south", "file": "south.nc", "into_box": True},
        {"name": "north", "file": "north.nc", "into_box": False},
    ],
    "reference": {"pressure": 2000.0, "bottom_triangle": "constant"},
    "ekman": {"depth": 50.0, "stress": {"south": [-0.05, 0.02]}},
    "layers": {
        "interfaces": [{"sigma": 27.2, "p_ref": 0.0}, {"sigma": 36.9, "p_ref": 2000.0}],
        "names": ["upper", "intermediate", "deep"],
    },
    "inverse": {
        "solver": "gauss-markov",
        "conserve": ["mass", "salt"],
        "prior_velocity": 0.02,
        "noise_layer": [1.0, 1.0, 1.0],
        "known": [{"name": "strait", "transport": 0.5, "noise": 0.2, "layer": "upper"}],
    },
}


def _write_line(path: Path, n: int, lat0: float, lon0: float, dlon: float) -> None:
    """An invented CF-NetCDF line: Absolute Salinity and Conservative Temperature."""
    lat = lat0 + 0.02 * np.arange(n)
    lon = lon0 + dlon * np.arange(n)
    depth = 3000.0 + 1500.0 * np.sin(np.linspace(0.2, 2.9, n))
    p = np.arange(0.0, 5000.0, 2.0)
    bottom = gsw.p_from_z(-depth, lat)
    x = np.linspace(0.0, 1.0, n)[:, None]
    ct = 2.0 + 16.0 * np.exp(-p / (600.0 + 400.0 * x))
    sa = 34.9 + 1.3 * np.exp(-p / 800.0) + 0.15 * x * np.exp(-p / 1500.0)
    wet = p[None, :] <= bottom[:, None] - 4.0
    xr.Dataset(
        {
            "pres": ("z", p, {"standard_name": "sea_water_pressure", "units": "dbar"}),
            "asal": (("profile", "z"), np.where(wet, sa, np.nan),
                     {"standard_name": "sea_water_absolute_salinity", "units": "g/kg"}),
            "ctemp": (("profile", "z"), np.where(wet, ct, np.nan),
                      {"standard_name": "sea_water_conservative_temperature", "units": "degC"}),
            "lat": ("profile", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("profile", lon, {"standard_name": "longitude", "units": "degrees_east"}),
            "depth": ("profile", depth,
                      {"standard_name": "sea_floor_depth_below_sea_surface", "units": "m"}),
        },
        attrs={"featureType": "profile", "Conventions": "CF-1.8"},
    ).to_netcdf(path)


@pytest.fixture(scope="module")
def box_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("box")
    _write_line(folder / "south.nc", 6, 24.0, -60.0, 0.8)
    _write_line(folder / "north.nc", 8, 36.0, -62.0, 0.7)
    parse_config(copy.deepcopy(BASE), base_dir=folder).save(folder / "box.toml")
    return folder


@pytest.fixture()
def state(box_dir: Path, tmp_path: Path) -> WorkbenchState:
    return WorkbenchState.open(box_dir / "box.toml", autosave=tmp_path / "box.autosave.toml")


def batch(box_dir: Path, data: dict) -> dict[str, pd.DataFrame]:
    """Tables of a batch run of the configuration ``data`` (a TOML dictionary)."""
    study = Study.from_config(parse_config(copy.deepcopy(data), base_dir=box_dir))
    return tables(study, study.solve())


def settings(**changes) -> dict:
    """BASE with some tables replaced, e.g. settings(reference={...})."""
    data = copy.deepcopy(BASE)
    for key, value in changes.items():
        if value is None:
            data.pop(key, None)
        else:
            data[key] = value
    return data


def assert_same(state: WorkbenchState, expected: dict[str, pd.DataFrame]) -> None:
    """The quick class table agrees to rounding; the full tables agree exactly."""
    quick = state.class_table().to_frame()
    layers = expected["class_transports.csv"]
    assert list(quick["section"]) == list(layers["section"])
    assert list(quick["class"]) == list(layers["class"])
    for col in ("initial_sv", "adjusted_sv", "adjusted_err_sv"):
        np.testing.assert_allclose(quick[col], layers[col], rtol=1e-9, atol=1e-9,
                                   equal_nan=True, err_msg=col)
    full = state.tables()
    for name, df in expected.items():
        pd.testing.assert_frame_equal(full[name], df, check_exact=True, obj=name)


# --------------------------------------------------------------- reference controls
def test_opening_gives_the_batch_run(state, box_dir):
    assert_same(state, batch(box_dir, BASE))


def test_reference_slider_equals_batch_at_every_level(state, box_dir):
    for p in (1500.0, 2750.0, 6000.0):  # the last is below every pair: deepest common level
        change = state.set_reference_pressure(p)
        assert change.linear
        assert_same(state, batch(box_dir, settings(reference={"pressure": p})))
    assert any("reference-below-pair" in c for c in state.cautions())


def test_new_global_level_gives_exactly_the_engines_references(state):
    state.set_inverse(False)
    state.set_override("south:1", "bottom")
    state.set_override("north:2", 1200.0)
    for p in (2750.0, 600.0, 9000.0):
        assert state.set_reference_pressure(p).linear
        engine = state.study.references()
        for name, ref in engine.items():
            assert np.array_equal(state.reference_pressures(name), ref.pressure)
            op = state.study.operators[name]
            np.testing.assert_array_equal(state.velocity_section(name).velocity,
                                          op.absolute_velocity(ref.offset))
    assert any("reference-below-pair" in c for c in state.reference_cautions())


def test_bottom_mode_equals_batch(state, box_dir):
    state.set_reference_mode("bottom")
    assert_same(state, batch(box_dir, settings(reference={"pressure": "bottom"})))


def test_isopycnal_mode_equals_batch(state, box_dir):
    state.set_reference_mode("isopycnal", sigma=36.9, p_ref=2000.0)
    iso = {"isopycnal": {"sigma": 36.9, "p_ref": 2000.0}}
    assert_same(state, batch(box_dir, settings(reference=iso)))


def test_pair_overrides_equal_batch_and_clear(state, box_dir):
    state.set_override("south:1", 1000.0)
    state.set_override("north:4", "bottom")
    ref = {"pressure": 2000.0, "overrides": {"south:1": 1000.0, "north:4": "bottom"}}
    assert_same(state, batch(box_dir, settings(reference=ref)))
    state.clear_override("south:1")
    ref = {"pressure": 2000.0, "overrides": {"north:4": "bottom"}}
    assert_same(state, batch(box_dir, settings(reference=ref)))


def test_known_velocity_override_sets_its_prior_like_batch(state, box_dir):
    # a known velocity with an error changes that pair's prior: not a linear update
    known = {"velocity": 0.01, "pressure": 1500.0, "error": 0.005}
    change = state.set_override("south:2", known)
    assert not change.linear
    ref = {"pressure": 2000.0, "overrides": {"south:2": known}}
    assert_same(state, batch(box_dir, settings(reference=ref)))


def test_reference_change_never_recomputes_dynamic_height(state, monkeypatch):
    import sectionkit.geostrophy
    import sectionkit.operator

    def refuse(*args, **kwargs):
        raise AssertionError("dynamic height recomputed for a reference change")

    # the operator integrates dynamic height in its one equation-of-state pass
    monkeypatch.setattr(sectionkit.operator, "specific_volume_pass", refuse)
    monkeypatch.setattr(sectionkit.geostrophy, "dynamic_height", refuse)
    operators = dict(state.study.operators)
    state.set_reference_pressure(1200.0)
    state.set_override("north:0", "bottom")
    state.set_reference_mode("isopycnal", sigma=27.2, p_ref=0.0)
    state.set_ekman_stress("north", 0.08, 0.0)
    state.set_priors(velocity=0.01)
    assert state.results.inverse is not None  # the deferred full budget, too
    assert all(state.study.operators[k] is op for k, op in operators.items())


# --------------------------------------------------------------- operator controls
def test_bottom_triangle_rule_rebuilds_and_equals_batch(state, box_dir):
    before = state.study.operators["south"]
    state.set_bottom_triangle("shear")
    assert state.study.operators["south"] is not before
    ref = {"pressure": 2000.0, "bottom_triangle": "shear"}
    assert_same(state, batch(box_dir, settings(reference=ref)))


def test_new_interfaces_rebuild_and_equal_batch(state, box_dir):
    faces = [(26.8, 0.0), (27.6, 0.0), (36.95, 2000.0)]
    names = ["upper", "thermocline", "intermediate", "deep"]
    state.set_interfaces(faces, names=names)
    layers = {"interfaces": [{"sigma": s, "p_ref": p} for s, p in faces], "names": names}
    inverse = copy.deepcopy(BASE["inverse"])
    del inverse["noise_layer"]  # a new number of classes returns per-class noise to defaults
    assert_same(state, batch(box_dir, settings(layers=layers, inverse=inverse)))


def test_interfaces_that_orphan_a_known_transport_are_refused(state, box_dir):
    with pytest.raises(ConfigError, match="known transport 'strait' enters the class 'upper'"):
        state.set_interfaces([(26.8, 0.0), (36.95, 2000.0)], names=["light", "mid", "dense"])
    assert state.layer_names == ["upper", "intermediate", "deep"]
    assert_same(state, batch(box_dir, BASE))


def test_ekman_depth_rebuilds_and_equals_batch(state, box_dir):
    state.set_ekman_depth(80.0)
    assert_same(state, batch(box_dir, settings(ekman={"depth": 80.0,
                                                      "stress": {"south": [-0.05, 0.02]}})))


# --------------------------------------------------------------- Ekman and inverse
def test_ekman_stress_equals_batch(state, box_dir):
    state.set_ekman_stress("north", 0.1, -0.03)
    state.set_ekman_stress("south", 0.0, 0.0)
    assert_same(state, batch(box_dir, settings(ekman={"depth": 50.0,
                                                      "stress": {"north": [0.1, -0.03]}})))


def test_inverse_off_and_on_equal_batch(state, box_dir):
    state.set_inverse(False)
    assert_same(state, batch(box_dir, settings(inverse=None)))
    assert np.isnan(state.class_table().error).all()
    state.set_reference_pressure(1000.0)  # linear update without an inverse
    assert_same(state, batch(box_dir, settings(inverse=None, reference={"pressure": 1000.0})))
    state.set_inverse(True)  # the settings it had come back
    assert_same(state, batch(box_dir, settings(reference={"pressure": 1000.0})))


def test_conserve_priors_and_noise_equal_batch(state, box_dir):
    state.set_conserve(["mass"])
    state.set_priors(velocity=0.01, diapycnal=0.5, ekman=0.2)
    state.set_noise(total=0.3, layer=[0.8, 0.6, 0.4])
    inverse = copy.deepcopy(BASE["inverse"])
    inverse.update(conserve=["mass"], prior_velocity=0.01, prior_diapycnal=0.5,
                   prior_ekman=0.2, noise_total=0.3, noise_layer=[0.8, 0.6, 0.4])
    assert_same(state, batch(box_dir, settings(inverse=inverse)))
    state.set_reference_pressure(2500.0)  # linear update through the new gain
    assert_same(state, batch(box_dir, settings(inverse=inverse, reference={"pressure": 2500.0})))


def test_wind_of_several_lines_is_one_change_equal_to_batch(state, box_dir):
    state.set_wind({"south": (0.0, 0.0), "north": (0.06, 0.01)}, depth=60.0)
    assert_same(state, batch(box_dir, settings(ekman={"depth": 60.0,
                                                      "stress": {"north": [0.06, 0.01]}})))
    state.undo()
    assert_same(state, batch(box_dir, BASE))


def test_inverse_settings_together_are_one_change_equal_to_batch(state, box_dir):
    state.set_inverse_settings(solver="svd", rank=2, conserve=["mass", "salt", "heat"],
                               prior_velocity=0.03, noise_layer=[0.5, 0.5, 0.5])
    inverse = {**copy.deepcopy(BASE["inverse"]), "solver": "svd", "rank": 2,
               "conserve": ["mass", "salt", "heat"], "prior_velocity": 0.03,
               "noise_layer": [0.5, 0.5, 0.5]}
    assert_same(state, batch(box_dir, settings(inverse=inverse)))
    state.undo()
    assert not state.can_undo


@pytest.mark.parametrize(("solver", "rank"), [("svd", 3), ("svd", 0), ("bounded", 0)])
def test_solver_and_rank_equal_batch(state, box_dir, solver, rank):
    state.set_solver(solver, rank=rank)
    state.set_reference_pressure(1800.0)
    inverse = {**copy.deepcopy(BASE["inverse"]), "solver": solver, "rank": rank}
    assert_same(state, batch(box_dir, settings(inverse=inverse, reference={"pressure": 1800.0})))


def test_inverse_settings_need_the_inverse_on(state):
    state.set_inverse(False)
    with pytest.raises(ConfigError, match="inverse is off"):
        state.set_priors(velocity=0.05)


# --------------------------------------------------------------- history
def test_undo_and_redo_walk_the_history(state, box_dir):
    state.set_reference_pressure(1500.0)
    state.set_bottom_triangle("zero")
    state.set_ekman_stress("north", 0.05, 0.0)
    assert state.can_undo and not state.can_redo
    state.undo()
    state.undo()
    assert state.config.bottom_triangle == "constant"
    assert_same(state, batch(box_dir, settings(reference={"pressure": 1500.0})))
    state.redo()
    assert state.config.bottom_triangle == "zero"
    state.undo()
    state.undo()
    assert not state.can_undo and state.can_redo
    assert_same(state, batch(box_dir, BASE))
    with pytest.raises(ConfigError, match="nothing to undo"):
        state.undo()


def test_a_new_change_after_undo_forgets_the_redo(state):
    state.set_reference_pressure(1500.0)
    state.undo()
    state.set_reference_pressure(1700.0)
    assert not state.can_redo
    assert state.config.reference.pressure == 1700.0


def test_a_refused_change_leaves_everything_as_it_was(state):
    before = state.class_table()
    with pytest.raises(ConfigError):
        state.set_reference_pressure(-10.0)
    with pytest.raises(ConfigError):
        state.set_override("south:99", 1000.0)
    with pytest.raises(ConfigError):
        state.set_interfaces([(27.0, 0.0), (26.0, 0.0)])
    assert not state.can_undo
    assert state.class_table() is before


def test_listeners_hear_every_change(state):
    heard = []
    state.add_listener(heard.append)
    state.set_reference_pressure(1500.0)
    state.set_inverse(False)
    state.undo()
    assert [c.kind for c in heard] == ["reference", "inverse", "undo"]
    assert heard[0].linear and not heard[1].linear


# --------------------------------------------------------------- files
def test_save_then_load_gives_identical_results(state, box_dir, tmp_path):
    state.set_reference_pressure(1750.0)
    state.set_override("north:2", {"sigma": 27.2, "p_ref": 0.0})
    state.set_ekman_stress("north", 0.07, 0.0)
    state.set_solver("svd", rank=2)
    saved = state.save(tmp_path / "elsewhere" / "session.toml")  # another folder
    expected = state.tables()
    reopened = WorkbenchState.open(saved, autosave=False)
    for name, df in reopened.tables().items():
        pd.testing.assert_frame_equal(df, expected[name], check_exact=True, obj=name)
    fresh = WorkbenchState.open(box_dir / "box.toml", autosave=False)
    fresh.load(saved)
    for name, df in fresh.tables().items():
        pd.testing.assert_frame_equal(df, expected[name], check_exact=True, obj=name)
    study = Study.from_config(load_config(saved))
    for name, df in tables(study, study.solve()).items():
        pd.testing.assert_frame_equal(df, expected[name], check_exact=True, obj=name)


def test_export_writes_the_csvs_of_sectionkit_budget(state, tmp_path):
    from sectionkit.cli import run_budget

    state.set_reference_pressure(2300.0)
    state.set_override("south:3", "bottom")
    state.set_priors(velocity=0.015)
    saved = state.save(tmp_path / "session.toml")
    # the same writers as the command line; figures are left out of both to keep this fast
    written = state.export(tmp_path / "workbench", figures=False)
    assert run_budget(saved, tmp_path / "batch", figures=False, quiet=True) == 0
    batch_files = sorted(p.relative_to(tmp_path / "batch")
                         for p in (tmp_path / "batch").rglob("*") if p.is_file())
    assert sorted(written) == batch_files
    csvs = [p for p in batch_files if p.suffix == ".csv"]
    assert len(csvs) == len(tables(state.study, state.results))
    # every file but provenance.json (it records the time) is identical byte for byte
    for rel in csvs + [Path("tables.tex"), Path("tables.md")]:
        mine, theirs = tmp_path / "workbench" / rel, tmp_path / "batch" / rel
        assert mine.read_bytes() == theirs.read_bytes(), rel


def test_autosave_appears_after_a_change_and_resumes(box_dir, tmp_path):
    session = tmp_path / "box.toml"
    session.write_text((box_dir / "box.toml").read_text())
    for name in ("south.nc", "north.nc"):
        (tmp_path / name).symlink_to(box_dir / name)
    state = WorkbenchState.open(session)
    assert state.autosave_path == tmp_path / "box.autosave.toml"
    assert not state.autosave_path.exists()
    state.set_reference_pressure(1234.0)
    state.set_ekman_stress("north", 0.02, 0.0)
    assert state.flush_autosave()
    assert state.autosave_path.is_file() and state.autosave_error is None
    assert load_config(state.autosave_path).reference.pressure == 1234.0
    expected = state.tables()
    # a new session (after a crash) resumes where the last one ended
    resumed = WorkbenchState.open(session, resume=True, autosave=False)
    assert resumed.resumed_from == state.autosave_path
    for name, df in resumed.tables().items():
        pd.testing.assert_frame_equal(df, expected[name], check_exact=True, obj=name)


# --------------------------------------------------------------- views of the state
def test_velocity_vanishes_at_the_level_of_no_motion(state):
    state.set_inverse(False)
    state.set_reference_pressure(1000.0)
    v = state.velocity_section("south")
    k = int(np.searchsorted(v.pressure, 1000.0))
    np.testing.assert_allclose(v.velocity[:, k], 0.0, atol=1e-12)
    assert v.velocity.shape == (5, v.pressure.size)
    assert np.all(v.reference_pressure == 1000.0)
    assert len(v.interfaces) == 2 and not v.adjusted


def test_box_budget_rows_are_the_batch_box_table(state, box_dir):
    state.set_reference_pressure(2600.0)  # linear update of the constraint data
    quick = state.box_budget().to_frame()
    expected = batch(box_dir, settings(reference={"pressure": 2600.0}))["box_budget.csv"]
    assert list(quick["constraint"]) == list(expected["constraint"])
    for col in ("initial", "adjusted", "noise", "normalized_residual"):
        np.testing.assert_allclose(quick[col], expected[col], rtol=1e-9, atol=1e-9)


def test_the_state_model_imports_no_widgets():
    code = ("import sys, sectionkit.workbench, sectionkit.workbench.model; "
            "print('ipywidgets' in sys.modules, 'matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


def test_a_reference_change_defers_the_full_budget(state):
    state.set_reference_pressure(1600.0)
    assert not state.results_current  # the class table is current; the full budget waits
    assert state.results is state.results
    assert state.results_current


# --------------------------------------------------------------- the widget view, headless
@pytest.fixture()
def view(state):
    from sectionkit.workbench.view import WorkbenchView

    return WorkbenchView(state, redraw_delay=0.0)  # no kernel loop: redraws at once


def test_view_slider_moves_the_reference_and_the_table(view, box_dir):
    before = view.class_table.value
    view.slider.value = 1500.0
    assert view.state.config.reference.pressure == 1500.0
    assert view.class_table.value != before
    assert f"drawn ({view.draws})" in view.status.value and "1500 dbar" in view.status.value
    assert_same(view.state, batch(box_dir, settings(reference={"pressure": 1500.0})))


def test_view_controls_reach_the_state(view):
    view.mode.value = "bottom"
    assert view.state.config.reference.kind == "bottom" and view.slider.disabled
    view.line.value = "north"
    view.pair.value = 3
    view.override_kind.value = "pressure"
    view.override_pressure.value = 900.0
    view.override_apply.click()
    assert view.state.overrides()["north:3"].pressure == 900.0
    view.override_clear.click()
    assert "north:3" not in view.state.overrides()
    view.ekman_east["north"].value = 0.04
    view.ekman_apply.click()
    assert view.state.config.ekman_stress["north"] == (0.04, 0.0)
    view.prior_velocity.value = 0.01
    view.noise_total.value = 0.4
    view.noise_salt["deep"].value = 0.03
    view.inverse_apply.click()  # one change for all inverse settings
    inv = view.state.config.inverse
    assert inv.prior_velocity == 0.01 and inv.noise_salt == [0.0, 0.0, 0.03]
    assert [(k.name, k.transport, k.layer) for k in inv.known] == [("strait", 0.5, "upper")]
    view.undo_button.click()
    assert view.state.config.inverse.prior_velocity == 0.02
    assert view.prior_velocity.value == 0.02  # the controls follow an undo
    assert "undid: inverse" in view.status.value
    view.inverse_on.value = False
    assert view.state.config.inverse is None and view.inverse_box.layout.display == "none"


def test_view_keeps_a_refused_input_and_shows_why_beside_it(view):
    view.interfaces.value = "27.5 @ 0\n27.0 @ 0"  # not light to dense
    view.interfaces_apply.click()
    error = view.errors["classes"]
    assert "sk-error" in error._dom_classes and error.layout.display != "none"
    assert "increase in density" in error.value
    assert view.interfaces.value == "27.5 @ 0\n27.0 @ 0"  # kept for correction
    assert "refused" in view.status.value
    view.interfaces.value = "27.2 @ 0\n36.9 @ 2000"
    view.interfaces_apply.click()
    assert error.layout.display == "none"


def test_view_ctrl_z_undoes_and_ctrl_shift_z_redoes(view):
    view.slider.value = 1500.0
    # what the browser sends on Ctrl+Z
    view.undo_keys._message(view.undo_keys, {"action": "undo"}, [])
    assert view.state.config.reference.pressure == 2000.0
    view.undo_keys._message(view.undo_keys, {"action": "redo"}, [])
    assert view.state.config.reference.pressure == 1500.0
    assert "redid: reference" in view.status.value


def test_view_saves_and_exports(view, tmp_path):
    view.slider.value = 2200.0
    view.path.value = str(tmp_path / "mine.toml")
    view.save_button.click()
    assert load_config(tmp_path / "mine.toml").reference.pressure == 2200.0
    view.export_folder.value = str(tmp_path / "out")
    view.export_figures.value = False
    view.export_button.click()
    assert (tmp_path / "out" / "class_transports.csv").is_file()
    assert "exported" in view.status.value
    assert view.export_progress.value == 1.0


# --------------------------------------------------------------- resuming never loses work
def _session_with_autosave(box_dir, tmp_path, autosave_text: str):
    session = tmp_path / "box.toml"
    session.write_text((box_dir / "box.toml").read_text())
    for name in ("south.nc", "north.nc"):
        (tmp_path / name).symlink_to(box_dir / name)
    autosave = tmp_path / "box.autosave.toml"
    autosave.write_text(autosave_text)
    return session, autosave


def test_unresumable_autosave_opens_the_configuration_and_says_why(box_dir, tmp_path):
    session, autosave = _session_with_autosave(box_dir, tmp_path, "[grid\ndp = ")
    state = WorkbenchState.open(session, resume=True)
    assert state.resumed_from is None
    assert "could not resume from box.autosave.toml" in state.resume_error
    assert "opened box.toml" in state.resume_error
    assert state.config.reference == load_config(session).reference


def test_unresumable_autosave_is_kept_as_a_numbered_backup_before_overwriting(box_dir, tmp_path):
    text = "[grid\ndp = "
    session, autosave = _session_with_autosave(box_dir, tmp_path, text)
    (tmp_path / "box.autosave.1.toml").write_text("an older backup")
    state = WorkbenchState.open(session, resume=True)
    assert "box.autosave.2.toml" in state.resume_error
    state.set_reference_pressure(1500.0)  # overwrites the autosave
    assert state.flush_autosave()
    assert (tmp_path / "box.autosave.2.toml").read_text() == text
    assert (tmp_path / "box.autosave.1.toml").read_text() == "an older backup"


def test_any_error_while_resuming_is_caught_not_only_sectionkit_errors(box_dir, tmp_path,
                                                                        monkeypatch):
    session, autosave = _session_with_autosave(box_dir, tmp_path, "")
    autosave.write_text(session.read_text())  # a valid autosave; resuming it fails below

    def broken(self, *args, **kwargs):
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr(WorkbenchState, "_apply", broken)
    resumed = WorkbenchState.open(session, resume=True)
    assert "ZeroDivisionError: float division by zero" in resumed.resume_error
    assert (tmp_path / "box.autosave.1.toml").is_file()


def _event(fig, fx: float, fy: float, kind: str = "mousemove") -> dict:
    """An ipyevents mouse event at fractions (fx, fy) of a figure's plot area."""
    width, height = 640.0, 360.0
    m = fig.fig_margin
    return {"event": kind, "boundingRectWidth": width, "boundingRectHeight": height,
            "relativeX": m["left"] + fx * (width - m["left"] - m["right"]),
            "relativeY": m["top"] + fy * (height - m["top"] - m["bottom"])}


def test_view_hover_reads_out_the_velocity_under_the_pointer(view):
    section = view.state.velocity_section("south")
    x = section.station_distance[0] + 0.5 * (section.station_distance[-1]
                                             - section.station_distance[0])
    p = 0.25 * float(np.nanmax(section.bottom_pressure)) * 1.03  # the y axis ends 3 % deeper
    pair = int(np.searchsorted(section.station_distance, x) - 1)
    level = int(np.searchsorted(section.pressure, p))
    view._on_pointer(_event(view.figure, 0.5, 0.25))
    assert f"south:{pair}" in view.readout.value
    assert f"velocity {section.velocity[pair, level] * 100:+.2f} cm/s" in view.readout.value


def test_view_click_on_the_sensitivity_chooses_that_level(view):
    plot = view.sensitivity_plot
    middle = 0.5 * (plot.x.min + plot.x.max)
    view._on_sensitivity_click(_event(plot.figure, 0.5, 0.5, "click"))
    assert view.state.config.reference.pressure == pytest.approx(round(middle / 10.0) * 10.0)


def test_view_shows_why_an_autosave_was_not_resumed(box_dir, tmp_path):
    from sectionkit.workbench.view import WorkbenchView

    session, _ = _session_with_autosave(box_dir, tmp_path, "[grid\ndp = ")
    view = WorkbenchView(WorkbenchState.open(session, resume=True), redraw_delay=0.0)
    assert "could not resume from box.autosave.toml" in view.cautions.value
