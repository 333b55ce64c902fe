"""Every configuration value is checked against its TOML type (DESIGN.md §6).

A wrong type or an inconsistent choice is one ConfigError line naming the key,
what was expected and what was found; nothing is silently coerced
(``bool("false")`` is true in Python).
"""

from __future__ import annotations

import copy

import pytest

from sectionkit.config import SCHEMA, did_you_mean, load_config, parse_config
from sectionkit.errors import ConfigError, InputFileError

BASE = {
    "title": "type checks",
    "grid": {"dp": 2.0},
    "sections": [{"name": "south", "file": "south.nc", "into_box": True},
                 {"name": "north", "file": "north.nc", "into_box": False}],
    "reference": {"pressure": 3000.0, "overrides": {"south:1": "bottom"}},
    "ekman": {"depth": 50.0, "stress": {"south": [0.05, 0.0]}},
    "layers": {"interfaces": [{"sigma": 27.0, "p_ref": 0.0}], "names": ["upper", "deep"]},
    "inverse": {"conserve": ["mass", "salt"], "noise_layer": [1.0, 0.5]},
}


def _with(path: str, value) -> dict:
    """BASE with one value replaced; ``path`` like "sections.0.into_box"."""
    data = copy.deepcopy(BASE)
    node = data
    keys = path.split(".")
    for key in keys[:-1]:
        node = node[int(key)] if key.isdigit() else node[key]
    node[int(keys[-1]) if keys[-1].isdigit() else keys[-1]] = value
    return data


def _refusal(data: dict) -> str:
    with pytest.raises(ConfigError) as info:
        parse_config(data)
    message = str(info.value)
    assert "\n" not in message
    return message


def test_base_configuration_is_accepted():
    cfg = parse_config(copy.deepcopy(BASE))
    assert cfg.sections[1].into_box is False


def test_into_box_string_false_is_refused_not_read_as_true():
    msg = _refusal(_with("sections.1.into_box", "false"))
    assert "into_box" in msg and "boolean" in msg and '"false"' in msg


def test_allow_equator_string_no_is_refused():
    msg = _refusal(_with("reference.allow_equator", "no"))
    assert "allow_equator" in msg and "boolean" in msg and '"no"' in msg


def test_grid_as_a_number_is_refused():
    msg = _refusal(_with("grid", 2))
    assert msg == "grid: expected a table, found the number 2"


def test_file_as_a_number_is_refused():
    msg = _refusal(_with("sections.0.file", 5))
    assert "[[sections]] #1 file" in msg and "a string or a list of strings" in msg
    assert "the number 5" in msg


def test_columns_as_a_string_is_refused():
    msg = _refusal(_with("sections.0.columns", "abc"))
    assert "columns" in msg and "table of strings" in msg and '"abc"' in msg


def test_overrides_as_a_number_is_refused():
    msg = _refusal(_with("reference.overrides", 3))
    assert "[reference] overrides" in msg and "a table" in msg and "the number 3" in msg


def test_stress_as_a_number_is_refused():
    msg = _refusal(_with("ekman.stress", 5))
    assert "[ekman] stress" in msg and "table of lists" in msg


def test_noise_layer_as_a_number_is_refused():
    msg = _refusal(_with("inverse.noise_layer", 1.0))
    assert "noise_layer" in msg and "list of numbers" in msg and "the number 1.0" in msg


def test_conserve_as_a_string_is_refused_as_a_type_not_letter_by_letter():
    msg = _refusal(_with("inverse.conserve", "mass"))
    assert "conserve" in msg and "list of strings" in msg and '"mass"' in msg
    assert "'m'" not in msg


def test_wrong_element_of_a_list_names_its_index():
    msg = _refusal(_with("inverse.noise_layer", [1.0, "big"]))
    assert "noise_layer[1]" in msg and '"big"' in msg


def test_dp_as_a_string_is_refused():
    msg = _refusal(_with("grid.dp", "2"))
    assert "[grid] dp" in msg and "number" in msg


def test_rank_as_a_float_is_refused():
    msg = _refusal(_with("inverse.rank", 2.5))
    assert "rank" in msg and "whole number" in msg


def test_known_transport_as_a_string_is_refused():
    data = _with("inverse.known", [{"name": "strait", "transport": "0.8", "noise": 0.2,
                                    "layer": "upper"}])
    msg = _refusal(data)
    assert "known #1 transport" in msg and '"0.8"' in msg


def test_section_listed_twice_in_a_box_is_refused():
    data = _with("boxes", [{"name": "b", "enters": ["south", "south"], "leaves": ["north"]}])
    assert "twice" in _refusal(data)


def test_section_in_both_enters_and_leaves_is_refused():
    data = _with("boxes", [{"name": "b", "enters": ["south"], "leaves": ["south", "north"]}])
    assert "both enters and leaves" in _refusal(data)


def test_duplicate_box_names_are_refused():
    data = _with("boxes", [{"name": "b", "enters": ["south"]}, {"name": "b", "leaves": ["north"]}])
    assert "box name 'b' is used twice" in _refusal(data)


@pytest.mark.parametrize("depth", [5000.0, 0.5, 0.0])
def test_ekman_depth_outside_1_to_500_m_is_refused(depth):
    assert "[ekman] depth" in _refusal(_with("ekman.depth", depth))


def test_ekman_depth_of_500_m_is_accepted():
    assert parse_config(_with("ekman.depth", 500.0)).ekman_depth == 500.0


def test_override_with_negative_pair_index_is_refused_without_suggesting_itself():
    msg = _refusal(_with("reference.overrides", {"south:-1": 1000.0}))
    assert "'south:-1'" in msg and "pair index" in msg and "did you mean" not in msg


def test_did_you_mean_never_suggests_the_same_text():
    assert did_you_mean("south", ["south", "north"]) in ("", "; did you mean 'north'?")
    assert "south'" not in did_you_mean("south", ["south", "north"])
    assert did_you_mean("sout", ["south", "north"]) == "; did you mean 'south'?"


def test_unknown_key_names_the_closest_valid_one():
    msg = _refusal(_with("sections.0.into_boxx", True))
    assert "into_boxx" in msg and "did you mean 'into_box'" in msg


def test_every_schema_key_is_accepted_by_the_checker_with_its_own_type():
    # the schema itself is the source: each table's keys must be distinct and typed
    for table, keys in SCHEMA.items():
        assert keys, table
        for key, spec in keys.items():
            assert spec, f"{table}.{key}"


def test_toml_file_with_a_byte_order_mark_is_read(tmp_path):
    path = tmp_path / "bom.toml"
    text = '[grid]\ndp = 2.0\n[[sections]]\nname = "south"\nfile = "south.nc"\n'
    path.write_bytes(b"\xef\xbb\xbf" + text.encode())
    assert load_config(path).sections[0].name == "south"


def test_configuration_path_that_is_a_folder_says_so(tmp_path):
    with pytest.raises(InputFileError, match="is a folder"):
        load_config(tmp_path)


def test_dual_sensor_variables_key_is_checked():
    msg = _refusal(_with("sections.0.variables", {"temprature": "TEMP2"}))
    assert "did you mean 'temperature'" in msg


def _study_with(overrides=None, bounds=None):
    from _synthetic import thermocline_section

    from sectionkit.study import Study

    data = {"sections": [{"name": "south", "file": "unused.nc"}],
            "reference": {"pressure": 1000.0, "overrides": overrides or {}}}
    if bounds is not None:
        data["inverse"] = {"bounds": bounds}
    cfg = parse_config(data)
    return Study.from_config(cfg, sections={"south": thermocline_section(n=5, name="south")})


def test_override_for_a_pair_the_section_does_not_have_is_refused():
    # 5 stations make 4 pairs: south:0 .. south:3
    with pytest.raises(ConfigError, match=r"'south:99' does not exist.*south:0 to south:3"):
        _study_with(overrides={"south:99": 500.0})


def test_override_for_the_last_pair_is_accepted():
    assert _study_with(overrides={"south:3": 500.0}).operators["south"].n_pair == 4


def test_bound_for_a_pair_the_section_does_not_have_is_refused():
    with pytest.raises(ConfigError, match="'south:4' does not exist"):
        _study_with(bounds={"south:4": [-0.1, 0.1]})


def test_the_old_table_name_layers_is_checked_like_classes():
    from sectionkit.config import check_types

    with pytest.raises(ConfigError, match=r"\[layers\] interfaces #1 sigma: expected a number"):
        check_types({"layers": {"interfaces": [{"sigma": "27.0"}]}})


def test_wrong_type_ends_in_one_line_without_a_traceback_on_the_command_line(tmp_path, capsys):
    from sectionkit.cli import main

    path = tmp_path / "study.toml"
    path.write_text('[[sections]]\nname = "south"\nfile = "south.nc"\ninto_box = "false"\n')
    assert main(["budget", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert 'into_box: expected a boolean (true or false), found the string "false"' in err
