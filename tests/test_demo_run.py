"""The bundled demo end to end: every §7 file, determinism, and the twin truth."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sectionkit.cli import main
from sectionkit.config import load_config
from sectionkit.demo import BUNDLED_DIR as DEMO_DIR
from sectionkit.study import Study

CSV_FILES = ["class_transports.csv", "pair_adjustments.csv", "box_budget.csv",
             "section_summary.csv"]


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo") / "results"
    assert main(["demo", "--out", str(out), "--quiet"]) == 0
    return out


def test_demo_writes_every_output_with_finite_values(demo_run):
    for name in CSV_FILES:
        df = pd.read_csv(demo_run / name)
        assert len(df) > 0, name
        numeric = df.select_dtypes("number").drop(columns=["sigma_top", "sigma_bottom",
                                                            "p_ref_top", "p_ref_bottom"],
                                                   errors="ignore")
        assert np.isfinite(numeric.to_numpy()).all(), name
    assert (demo_run / "provenance.json").is_file()
    for name in ("tables.tex", "tables.md"):
        if not (demo_run / name).is_file():
            pytest.fail(f"{name} missing")
    assert list((demo_run / "figures").glob("*.png"))
    assert list((demo_run / "figures").glob("*.pdf"))


def test_two_demo_runs_give_identical_tables(demo_run, tmp_path):
    again = tmp_path / "again"
    assert main(["demo", "--out", str(again), "--quiet", "--no-figures"]) == 0
    for name in CSV_FILES + ["tables.tex", "tables.md"]:
        if (again / name).exists():
            assert (again / name).read_bytes() == (demo_run / name).read_bytes(), name


def test_demo_inverse_recovers_the_twin_truth_within_two_sigma():
    # twin experiment with known truth: the generator's class transports
    # (demo_sections/truth_layers.csv) against the inverse's posterior errors
    study = Study.from_config(load_config(DEMO_DIR / "demo.toml"))
    results = study.solve()
    truth = pd.read_csv(DEMO_DIR / "truth_layers.csv")
    inside = 0
    for row in truth.itertuples():
        estimate = results.value(row.section, f"volume:{row.layer}")
        sigma = results.error(row.section, f"volume:{row.layer}")
        inside += abs(estimate - row.true_volume_sv) <= 2 * sigma
    # all 10 classes were inside at the time of writing (README); allow one miss
    assert inside >= len(truth) - 1, inside
    # the initial (wrong level of no motion) budget is far from the truth
    initial = np.array([results.value(r.section, f"volume:{r.layer}", adjusted=False)
                        for r in truth.itertuples()])
    assert np.max(np.abs(initial - truth["true_volume_sv"].to_numpy())) > 5.0


def test_rerun_from_provenance_reproduces_identical_tables(demo_run, tmp_path):
    rerun = tmp_path / "rerun"
    assert main(["budget", str(demo_run / "provenance.json"), "--out", str(rerun), "--quiet",
                 "--no-figures"]) == 0
    for name in CSV_FILES + ["inverse_unknowns.csv", "results.nc"]:
        assert (rerun / name).read_bytes() == (demo_run / name).read_bytes(), name


def test_rerun_refuses_changed_inputs(demo_run, tmp_path, capsys):
    import json
    import shutil

    copy = tmp_path / "lines"
    shutil.copytree(DEMO_DIR, copy)
    record = json.loads((demo_run / "provenance.json").read_text())
    record["configuration_dir"] = str(copy)
    record["input_sha256"] = {str(copy / Path(k).name): v
                              for k, v in record["input_sha256"].items()}
    with open(copy / "south_line.nc", "ab") as fh:
        fh.write(b"\0")
    path = tmp_path / "provenance.json"
    path.write_text(json.dumps(record))
    assert main(["budget", str(path), "--out", str(tmp_path / "o"), "--quiet"]) == 1
    assert "has changed since the recorded run" in capsys.readouterr().err


def test_demo_inverse_recovers_the_true_diapycnal_transfers(demo_run):
    # twin truth of the generator: demo_sections/truth_diapycnal.csv
    truth = pd.read_csv(DEMO_DIR / "truth_diapycnal.csv")
    unknowns = pd.read_csv(demo_run / "inverse_unknowns.csv").set_index("unknown")
    for row in truth.itertuples():
        estimate = unknowns.loc[f"interior:W{row.interface}"]
        assert estimate["kind"] == "diapycnal_transfer"
        assert abs(estimate["estimate"] - row.w_true_sv) <= 2 * estimate["posterior_std"]
        assert 0 < estimate["resolution"] <= 1
