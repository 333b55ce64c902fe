"""Outputs complete or absent: the result set replaces the output folder as a whole."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest
from test_cli_budget import _write_study

import sectionkit.outdir as outdir
from sectionkit.cli import main
from sectionkit.config import load_config
from sectionkit.errors import OutputError
from sectionkit.report import write_outputs
from sectionkit.study import Study

ARGS = ["--no-figures", "--quiet"]


def _files(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture()
def study(tmp_path):
    config = _write_study(tmp_path, inverse=False)
    st = Study.from_config(load_config(config))
    return st, st.solve()


def _note(study, results, folder):
    (folder / "note.txt").write_text("written by an extra writer\n")


def _fail(study, results, folder):
    (folder / "half.csv").write_text("a,b\n")
    raise RuntimeError("disk full")


def test_failure_part_way_leaves_previous_results_untouched(study, tmp_path):
    st, res = study
    out = tmp_path / "out"
    write_outputs(st, res, out)
    before = _files(out)
    with pytest.raises(RuntimeError):
        write_outputs(st, res, out, [_fail])
    assert _files(out) == before
    assert not list(tmp_path.glob(".out.sectionkit-*"))


def test_output_folder_holds_exactly_one_runs_files(study, tmp_path):
    st, res = study
    out = tmp_path / "out"
    write_outputs(st, res, out, [_note])
    assert (out / "note.txt").is_file()
    write_outputs(st, res, out)  # the second run writes no note
    assert not (out / "note.txt").exists()
    recorded = json.loads((out / "provenance.json").read_text())["outputs"]
    assert sorted(_files(out)) == recorded


def test_non_empty_folder_without_provenance_is_refused_with_advice(tmp_path, capsys):
    config = _write_study(tmp_path, inverse=False)
    out = tmp_path / "mine"
    out.mkdir()
    (out / "thesis.tex").write_text("precious")
    assert main(["budget", str(config), "--out", str(out), *ARGS]) == 1
    err = capsys.readouterr().err
    assert "no sectionkit provenance.json" in err and "choose a new or empty folder" in err
    assert (out / "thesis.tex").read_text() == "precious"


def test_file_added_to_a_result_folder_is_never_removed(tmp_path, capsys):
    config = _write_study(tmp_path, inverse=False)
    out = tmp_path / "out"
    assert main(["budget", str(config), "--out", str(out), *ARGS]) == 0
    (out / "notes.txt").write_text("mine")
    assert main(["budget", str(config), "--out", str(out), *ARGS]) == 1
    assert "notes.txt" in capsys.readouterr().err
    assert (out / "notes.txt").read_text() == "mine"


def test_out_that_is_a_file_is_refused_before_computation(tmp_path, capsys, monkeypatch):
    config = _write_study(tmp_path, inverse=False)
    target = tmp_path / "results.txt"
    target.write_text("x")
    monkeypatch.setattr(Study, "from_config", lambda *a, **k: pytest.fail("computed"))
    assert main(["budget", str(config), "--out", str(target), *ARGS]) == 1
    assert "is a file, not a folder" in capsys.readouterr().err


def test_out_that_is_not_writable_is_refused_before_computation(tmp_path, capsys, monkeypatch):
    config = _write_study(tmp_path, inverse=False)

    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    # root may write anywhere: the refusal is what mkdtemp's failure leads to
    monkeypatch.setattr(outdir.tempfile, "mkdtemp", refuse)
    monkeypatch.setattr(Study, "from_config", lambda *a, **k: pytest.fail("computed"))
    assert main(["budget", str(config), "--out", str(tmp_path / "o"), *ARGS]) == 1
    assert "cannot write" in capsys.readouterr().err


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into any folder")
def test_read_only_parent_is_refused(tmp_path, capsys):
    config = _write_study(tmp_path, inverse=False)
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        assert main(["budget", str(config), "--out", str(locked / "o"), *ARGS]) == 1
    finally:
        locked.chmod(0o755)


def test_temporary_folders_of_killed_runs_are_removed_by_the_next_run(study, tmp_path):
    st, res = study
    dead = 2**22 + 17  # above Linux's largest pid (pid_max is at most 2^22)
    left = tmp_path / f".out{outdir.PARTIAL}{dead}-abc123"
    left.mkdir()
    (left / "layer_transports.csv").write_text("half")
    write_outputs(st, res, tmp_path / "out")
    assert not left.exists()


def test_run_killed_during_the_swap_gets_its_previous_results_back(study, tmp_path):
    st, res = study
    out = tmp_path / "out"
    write_outputs(st, res, out)
    before = _files(out)
    dead = 2**22 + 17
    os.rename(out, tmp_path / f".out{outdir.PREVIOUS}{dead}-xyz")  # killed between renames
    outdir.check_output_folder(out)
    assert _files(out) == before


def test_library_write_into_a_foreign_folder_is_an_output_error(study, tmp_path):
    st, res = study
    (tmp_path / "data.nc").write_text("someone's data")
    with pytest.raises(OutputError, match="no sectionkit provenance.json"):
        write_outputs(st, res, tmp_path)


def test_current_folder_as_out_is_refused(tmp_path, monkeypatch, capsys):
    config = _write_study(tmp_path, inverse=False)
    empty = tmp_path / "here"
    empty.mkdir()
    monkeypatch.chdir(empty)
    assert main(["budget", str(config), "--out", ".", *ARGS]) == 1
    assert "give a subfolder" in capsys.readouterr().err


def test_out_that_is_a_link_replaces_the_folder_it_points_to(study, tmp_path):
    st, res = study
    real = tmp_path / "real"
    link = tmp_path / "link"
    link.symlink_to(real, target_is_directory=True)
    write_outputs(st, res, link)
    write_outputs(st, res, link)
    assert link.is_symlink() and (real / "provenance.json").is_file()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []
