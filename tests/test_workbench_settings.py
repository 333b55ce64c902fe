"""Nothing changes silently: the workbench state keeps every setting a change does not name.

The same invented two-line box as ``test_workbench_model.py``. Each rule of
issue 14 is one test: per-class inverse settings follow their class by name
when the classes change, new classes get defaults and are flagged, the
Inverse panel's settings reach the engine as a saved file would, the initial
box budget does not depend on the inverse switch, a slider drag is one undo
step and the status names what was undone. The expected values come from a
batch run of a configuration written by hand with the settings the rule
promises (``Study.from_config(...).solve()``), or from DESIGN.md's stated
conventions.
"""

# ruff: noqa: F811  (the fixtures box_dir and state come from test_workbench_model)
from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
from test_workbench_model import BASE, assert_same, batch, box_dir, settings, state  # noqa: F401

from sectionkit.errors import ConfigError

FACES = [{"sigma": 27.2, "p_ref": 0.0}, {"sigma": 36.9, "p_ref": 2000.0}]


class Clock:
    """A clock the test moves by hand, s."""

    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def _inverse(**changes) -> dict:
    inverse = copy.deepcopy(BASE["inverse"])
    inverse.update(changes)
    return inverse


# --------------------------------------------------------------- classes change
def test_split_class_keeps_the_other_classes_noise_by_name(state, box_dir):
    state.set_inverse_settings(noise_layer=[0.9, 0.6, 0.3], noise_salt=[0.2, 0.1, 0.05])
    # a new interface splits "intermediate"; "upper" and "deep" keep both their interfaces
    state.set_interfaces([(27.2, 0.0), (27.6, 0.0), (36.9, 2000.0)])
    names = state.layer_names
    assert names[0] == "upper" and names[-1] == "deep"
    inv = state.config.inverse
    # by name: upper 0.9 and deep 0.3 kept; new classes get the default 1.0 Sv and the
    # automatic salt noise (0)
    assert inv.noise_layer == [0.9, 1.0, 1.0, 0.3]
    assert inv.noise_salt == [0.2, 0.0, 0.0, 0.05]
    layers = {"interfaces": [*FACES[:1], {"sigma": 27.6, "p_ref": 0.0}, FACES[1]],
              "names": names}
    expected = _inverse(noise_layer=[0.9, 1.0, 1.0, 0.3], noise_salt=[0.2, 0.0, 0.0, 0.05])
    assert_same(state, batch(box_dir, settings(layers=layers, inverse=expected)))


def test_new_classes_are_flagged_until_their_settings_are_edited(state):
    assert state.flagged_classes == []
    change = state.set_interfaces([(27.2, 0.0), (27.6, 0.0), (36.9, 2000.0)])
    new = [n for n in state.layer_names if n not in ("upper", "deep")]
    assert state.flagged_classes == new
    assert all(n in change.description for n in new)  # the status line says so
    state.set_inverse_settings(noise_layer=[0.9, 0.8, 0.7, 0.3])
    assert state.flagged_classes == []


def test_named_classes_carry_noise_and_known_transport_by_name(state, box_dir):
    state.set_inverse_settings(noise_layer=[0.9, 0.6, 0.3], noise_heat=[0.01, 0.02, 0.03],
                               conserve=["mass", "salt", "heat"])
    names = ["upper", "thermocline", "intermediate", "deep"]
    state.set_interfaces([(26.8, 0.0), (27.6, 0.0), (36.95, 2000.0)], names=names)
    inv = state.config.inverse
    assert inv.noise_layer == [0.9, 1.0, 0.6, 0.3]
    assert inv.noise_heat == [0.01, 0.0, 0.02, 0.03]
    assert [k.layer for k in inv.known] == ["upper"]  # the strait still enters "upper"
    assert state.flagged_classes == ["thermocline"]
    layers = {"interfaces": [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 27.6, "p_ref": 0.0},
                             {"sigma": 36.95, "p_ref": 2000.0}], "names": names}
    expected = _inverse(noise_layer=[0.9, 1.0, 0.6, 0.3], noise_heat=[0.01, 0.0, 0.02, 0.03],
                        conserve=["mass", "salt", "heat"])
    assert_same(state, batch(box_dir, settings(layers=layers, inverse=expected)))


def test_class_settings_of_a_switched_off_inverse_follow_the_classes_too(state):
    state.set_inverse_settings(noise_layer=[0.9, 0.6, 0.3])
    state.set_inverse(False)
    state.set_interfaces([(27.2, 0.0), (27.6, 0.0), (36.9, 2000.0)])
    state.set_inverse(True)
    assert state.config.inverse.noise_layer == [0.9, 1.0, 1.0, 0.3]


def test_a_class_name_list_of_the_wrong_length_is_refused(state):
    with pytest.raises(ConfigError, match="3 interfaces make 4 classes"):
        state.set_interfaces([(26.8, 0.0), (27.6, 0.0), (36.95, 2000.0)],
                             names=["a", "b", "c"])
    assert state.layer_names == ["upper", "intermediate", "deep"]


def test_zero_salt_noise_of_a_class_is_the_automatic_noise(box_dir):
    from sectionkit.config import parse_config
    from sectionkit.study import Study

    def noise(inverse: dict) -> np.ndarray:
        study = Study.from_config(parse_config(settings(inverse=inverse), base_dir=box_dir))
        return study.solve().inverse.system.noise

    automatic = noise(_inverse())
    mixed = noise(_inverse(noise_salt=[0.0, 0.3, 0.0]))
    # rows: mass x3, mass:total, salt x3 (inverse.assemble order)
    np.testing.assert_allclose(mixed[[4, 6]], automatic[[4, 6]], rtol=1e-12)
    assert mixed[5] == pytest.approx(0.3)


# --------------------------------------------------------------- the Inverse panel
def test_known_net_bounds_and_heat_noise_reach_the_engine_as_a_file_would(state, box_dir):
    state.set_inverse_settings(
        solver="bounded", conserve=["mass", "salt", "heat"], noise_heat=[0.02, 0.01, 0.005],
        known=[{"name": "strait", "transport": 0.7, "noise": 0.1, "class": "deep"}],
        section_net=[{"section": "south", "transport": 0.0, "noise": 0.5}],
        bounds={"south:1": [-0.01, 0.01]})
    expected = _inverse(
        solver="bounded", conserve=["mass", "salt", "heat"], noise_heat=[0.02, 0.01, 0.005],
        known=[{"name": "strait", "transport": 0.7, "noise": 0.1, "layer": "deep"}],
        section_net=[{"section": "south", "transport": 0.0, "noise": 0.5}],
        bounds={"south:1": [-0.01, 0.01]})
    assert_same(state, batch(box_dir, settings(inverse=expected)))


def test_a_known_transport_into_a_missing_class_is_refused_by_name(state):
    with pytest.raises(ConfigError, match="class 'abyssal' does not exist"):
        state.set_inverse_settings(
            known=[{"name": "strait", "transport": 0.7, "noise": 0.1, "class": "abyssal"}])
    assert state.config.inverse.known[0].layer == "upper"


def test_automatic_svd_rank_is_reported(state):
    state.set_solver("svd", rank=0)
    rank = state.rank_used()
    system = state.results.inverse.system
    # a rank is a count of kept singular values: between 1 and min(rows, unknowns)
    assert 1 <= rank <= min(system.matrix.shape[0], int((system.prior > 0).sum()))
    assert state.results.inverse.summary()["rank"] == rank


# --------------------------------------------------------------- box budget
def test_initial_box_budget_is_the_same_with_the_inverse_on_or_off(state):
    on = state.box_budget()
    state.set_inverse(False)
    off = state.box_budget()
    mass = [k for k, (_, c) in enumerate(on.rows) if c.startswith("mass:")]
    assert [on.rows[k] for k in mass] == list(off.rows)
    np.testing.assert_allclose(off.initial, on.initial[mass], rtol=1e-12, atol=1e-12)


def test_the_known_transport_counts_in_the_initial_budget_without_inverse(state):
    state.set_inverse(False)
    with_known = state.box_budget()
    state.set_inverse(True)
    state.set_inverse_settings(known=[])
    state.set_inverse(False)
    without = state.box_budget()
    k = with_known.rows.index(("box", "mass:upper"))
    # BASE: the strait brings 0.5 Sv into "upper"
    assert with_known.initial[k] - without.initial[k] == pytest.approx(0.5, abs=1e-12)


# --------------------------------------------------------------- undo
def test_a_slider_drag_is_one_undo_step(state):
    state.clock = clock = Clock()
    for p in np.arange(2010.0, 2110.0, 10.0):
        clock.now += 0.05
        state.set_reference_pressure(p, gesture="reference-slider")
    assert state.config.reference.pressure == 2100.0
    change = state.undo()
    assert state.config.reference.pressure == 2000.0 and not state.can_undo
    assert change.description == "undid: reference: level of no motion at 2100 dbar"


def test_a_pause_longer_than_the_gesture_gap_starts_a_new_undo_step(state):
    from sectionkit.workbench.model import GESTURE_GAP

    state.clock = clock = Clock()
    state.set_reference_pressure(2100.0, gesture="reference-slider")
    clock.now += GESTURE_GAP + 0.5
    state.set_reference_pressure(2200.0, gesture="reference-slider")
    state.undo()
    assert state.config.reference.pressure == 2100.0


def test_another_control_between_slider_moves_ends_the_drag(state):
    state.clock = Clock()
    state.set_reference_pressure(2100.0, gesture="reference-slider")
    state.set_bottom_triangle("zero")
    state.set_reference_pressure(2200.0, gesture="reference-slider")
    state.undo()
    assert state.config.reference.pressure == 2100.0


def test_redo_names_what_it_redid(state):
    state.set_ekman_depth(70.0)
    assert state.undo().description == "undid: Ekman depth: 70 m"
    assert state.redo().description == "redid: Ekman depth: 70 m"
    assert state.config.ekman_depth == 70.0


# --------------------------------------------------------------- words beside the numbers
def test_a_west_to_east_line_counts_northward_flow_positive(state):
    # DESIGN.md §4: positive is to the left of increasing station order, so a
    # west-to-east line counts northward flow positive
    d = state.direction("south")
    assert d.compass == "northward"
    assert d.across.startswith("northward across ")
    assert d.box_text == "into the box box"  # into_box = true, the default box
    assert state.direction("north").box_text == "out of the box box"


def test_compass_names_the_eight_directions():
    from sectionkit.geometry import compass_name

    assert compass_name(0.0, 1.0) == "northward"
    assert compass_name(1.0, 1.0) == "north-eastward"
    assert compass_name(-1.0, 0.0) == "westward"
    assert compass_name(-0.1, -1.0) == "southward"


def test_heat_is_called_temperature_transport_when_net_mass_is_not_zero(state):
    from sectionkit.study import NET_MASS_HEAT_TOLERANCE

    state.set_inverse(False)  # no closure: net mass of each line is far from zero
    table = state.section_numbers()
    assert (table["net_mass_sv"].abs() > NET_MASS_HEAT_TOLERANCE).all()
    assert list(table["heat_kind"]) == ["temperature transport"] * len(table)


# --------------------------------------------------------------- sensitivity
def test_sensitivity_at_a_level_is_the_batch_run_at_that_level(state, box_dir):
    sens = state.reference_sensitivity()
    assert sens.current == 2000.0
    k = int(np.argmin(np.abs(sens.pressure - 1200.0)))
    p = float(sens.pressure[k])
    expected = batch(box_dir, settings(reference={"pressure": p}))["class_transports.csv"]
    for s, name in enumerate(sens.sections):
        want = expected[expected["section"] == name]["initial_sv"].to_numpy()
        np.testing.assert_allclose(sens.transports[s, k], want, rtol=1e-9, atol=1e-9)


def test_settings_kept_while_the_inverse_is_off_survive_an_undone_class_change(state):
    state.set_inverse_settings(noise_layer=[0.9, 0.6, 0.3])
    state.set_inverse(False)
    state.set_interfaces([(27.2, 0.0), (27.6, 0.0), (36.9, 2000.0)])
    state.undo()
    state.set_inverse(True)
    assert state.config.inverse.noise_layer == [0.9, 0.6, 0.3]


def test_a_refused_inverse_edit_keeps_the_new_class_flags(state):
    state.set_interfaces([(27.2, 0.0), (27.6, 0.0), (36.9, 2000.0)])
    flagged = state.flagged_classes
    with pytest.raises(ConfigError):
        state.set_inverse_settings(noise_layer=[1.0, 1.0])  # wrong length
    assert state.flagged_classes == flagged


def test_a_known_transport_without_a_number_is_one_clear_refusal(state):
    with pytest.raises(ConfigError, match="known transport 'strait': transport = None"):
        state.set_inverse_settings(known=[{"name": "strait", "noise": 0.1, "class": "upper"}])
    assert state.config.inverse.known[0].transport == 0.5


def test_a_south_to_north_line_counts_westward_flow_positive():
    # DESIGN.md §4: positive is to the left of increasing station order; facing north,
    # left is west (common practice)
    from types import SimpleNamespace

    import xarray as xr

    from sectionkit.config import parse_config
    from sectionkit.workbench.snapshot import line_direction

    pairs = xr.Dataset({"distance": ("pair", [1e4, 1e4]), "along_east": ("pair", [0.0, 0.0]),
                        "along_north": ("pair", [1.0, 1.0])})
    study = SimpleNamespace(operators={"west": SimpleNamespace(pairs=pairs)},
                            sections={"west": xr.Dataset(coords={"station": ["W1", "W2", "W3"]})})
    config = parse_config({"sections": [{"name": "west", "file": "w.nc", "into_box": False}]},
                          base_dir=Path("."))
    d = line_direction(study, config, "west")
    assert d.describe() == "+ = westward across W1→W3, out of the box box"


def test_numbered_stations_are_called_stations_in_the_direction():
    from sectionkit.workbench.snapshot import LineDirection

    d = LineDirection("north", "northward", "1", "41", (("interior", False),))
    assert d.describe() == "+ = northward across stations 1→41, out of the box interior"
