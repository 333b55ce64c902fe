"""`sectionkit budget` end to end on files: §7 outputs, atomicity, clear errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from _box import TWO_LINES, write_two_lines

from sectionkit.cli import main

CLASS_COLUMNS = ["section", "class", "sigma_top", "sigma_bottom", "p_ref_top", "p_ref_bottom",
                 "area_km2", "initial_sv", "adjusted_sv", "adjusted_err_sv"]
PAIR_COLUMNS = ["section", "pair", "lon", "lat", "distance_km", "ref_kind", "ref_pressure",
                "adjustment_m_s", "adjustment_err_m_s"]
SUMMARY_COLUMNS = ["section", "net_sv", "net_err_sv", "heat_pw", "heat_err_pw", "freshwater_sv",
                   "freshwater_err_sv", "overturning_sv", "overturning_err_sv"]
BOX_COLUMNS = ["box", "constraint", "initial", "adjusted", "noise", "normalized_residual",
               "posterior_residual_std", "posterior_normalized_residual"]


def _write_study(tmp_path: Path, inverse: bool, old_names: bool = False) -> Path:
    write_two_lines(tmp_path)
    text = """
title = "file test"
""" + TWO_LINES + """[reference]
pressure = 800.0
overrides = { "south:2" = "deepest_common", "north:1" = { sigma = 27.3, p_ref = 0.0 } }
[ekman]
stress = { south = [-0.05, 0.0] }
[classes]
interfaces = [ { sigma = 26.0, p_ref = 0.0 }, { sigma = 27.2, p_ref = 0.0 } ]
names = ["warm", "thermocline", "cold"]
"""
    if inverse:
        text += """
[inverse]
prior_velocity = 0.01
noise_class = [1.0, 1.0, 0.5]
known = [ { name = "gap", transport = 0.3, noise = 0.1, class = "warm" } ]
"""
    if old_names:  # the names before "density class" was used throughout; still accepted
        for new, old in (("[classes]", "[layers]"), ("noise_class", "noise_layer"),
                         ("class = ", "layer = "), ('"deepest_common"', '"bottom"')):
            text = text.replace(new, old)
    path = tmp_path / "study.toml"
    path.write_text(text)
    return path


def test_budget_without_inverse_writes_initial_budgets(tmp_path):
    config = _write_study(tmp_path, inverse=False)
    out = tmp_path / "out"
    assert main(["budget", str(config), "--out", str(out), "--no-figures", "--quiet"]) == 0
    layers = pd.read_csv(out / "class_transports.csv")
    assert list(layers.columns)[: len(CLASS_COLUMNS)] == CLASS_COLUMNS
    np.testing.assert_allclose(layers["adjusted_sv"], layers["initial_sv"])
    assert layers["adjusted_err_sv"].isna().all()
    # open bounds are blank
    assert layers.loc[layers["class"] == "warm", "sigma_top"].isna().all()
    assert layers.loc[layers["class"] == "cold", "sigma_bottom"].isna().all()
    pairs = pd.read_csv(out / "pair_adjustments.csv")
    assert list(pairs.columns)[: len(PAIR_COLUMNS)] == PAIR_COLUMNS
    assert (pairs["adjustment_m_s"] == 0).all()
    assert set(pairs["ref_kind"]) == {"pressure", "bottom", "isopycnal"}
    assert pairs["ref_pressure"].notna().all()
    summary = pd.read_csv(out / "section_summary.csv")
    assert list(summary.columns)[: len(SUMMARY_COLUMNS)] == SUMMARY_COLUMNS
    assert (out / "provenance.json").is_file()


def test_budget_with_inverse_fills_errors_and_box_budget(tmp_path):
    config = _write_study(tmp_path, inverse=True)
    out = tmp_path / "out"
    assert main(["budget", str(config), "--out", str(out), "--no-figures", "--quiet"]) == 0
    layers = pd.read_csv(out / "class_transports.csv")
    assert (layers["adjusted_err_sv"] > 0).all()
    box = pd.read_csv(out / "box_budget.csv")
    assert list(box.columns)[: len(BOX_COLUMNS)] == BOX_COLUMNS
    assert {"mass:warm", "mass:total", "salt:cold"} <= set(box["constraint"])
    np.testing.assert_allclose(box["normalized_residual"], box["adjusted"] / box["noise"],
                               rtol=1e-6)
    summary = pd.read_csv(out / "section_summary.csv")
    assert np.isfinite(summary[SUMMARY_COLUMNS[1:]].to_numpy()).all()


def test_old_key_names_give_identical_results(tmp_path):
    # [layers], noise_layer, known.layer and "bottom" are the old names of [classes],
    # noise_class, known.class and "deepest_common": the same study, the same numbers
    outputs = {}
    for tag, old in (("new", False), ("old", True)):
        folder = tmp_path / tag
        folder.mkdir()
        config = _write_study(folder, inverse=True, old_names=old)
        assert ("[layers]" in config.read_text()) is old
        assert main(["budget", str(config), "--out", str(folder / "out"), "--no-figures",
                     "--quiet"]) == 0
        outputs[tag] = {name: pd.read_csv(folder / "out" / name) for name in
                        ("class_transports.csv", "pair_adjustments.csv", "box_budget.csv",
                         "section_summary.csv", "inverse_unknowns.csv")}
    for name, frame in outputs["new"].items():
        pd.testing.assert_frame_equal(frame, outputs["old"][name], check_exact=False,
                                      rtol=1e-9)


def test_failed_run_leaves_no_files(tmp_path, capsys):
    config = _write_study(tmp_path, inverse=False)
    (tmp_path / "north.nc").write_bytes(b"not a netcdf file")
    out = tmp_path / "out"
    assert main(["budget", str(config), "--out", str(out), "--no-figures", "--quiet"]) == 1
    assert not out.exists()
    assert not list(tmp_path.glob(".out.*"))
    err = capsys.readouterr().err
    assert "north.nc" in err and "Traceback" not in err


def test_missing_section_file_is_named(tmp_path, capsys):
    config = _write_study(tmp_path, inverse=False)
    (tmp_path / "south.nc").unlink()
    assert main(["budget", str(config), "--out", str(tmp_path / "o"), "--quiet"]) == 1
    assert "south.nc" in capsys.readouterr().err


def test_unknown_key_is_named_with_closest_valid_one(tmp_path, capsys):
    config = _write_study(tmp_path, inverse=False)
    config.write_text(config.read_text().replace("[ekman]\n", "[ekman]\ndepht = 40.0\n"))
    assert main(["budget", str(config), "--out", str(tmp_path / "o"), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "'depht'" in err and "'depth'" in err


@pytest.mark.parametrize("command", ["check", "budget", "demo", "lab", "ensemble"])
def test_every_command_has_help(command, capsys):
    with pytest.raises(SystemExit) as exc:
        main([command, "--help"])
    assert exc.value.code == 0
    assert "usage" in capsys.readouterr().out
