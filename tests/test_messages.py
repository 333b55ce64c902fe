"""Messages point where the user looks: the file's own lines; a closed pipe ends quietly."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from _sections import invented_section, write_csv, write_netcdf

from sectionkit.errors import InputFileError, SectionDataError
from sectionkit.io import load_section

ROOT = Path(__file__).resolve().parents[1]


def _with_comments(path: Path) -> list[str]:
    """Put three comment lines and a blank line above the header and a comment mid-table."""
    lines = path.read_text().splitlines()
    lines = ["# cruise QM-07, invented", "# CTD long form", "", lines[0], *lines[1:4],
             "# (a note in the middle)", *lines[4:]]
    path.write_text("\n".join(lines) + "\n")
    return lines



def _csv_with_field(tmp_path: Path, k: int, value: str) -> Path:
    """Invented 3-station CSV (with comment lines) whose 0-based line k has field 4 set to value."""
    path = write_csv(tmp_path / "c.csv", invented_section(3))
    lines = _with_comments(path)
    fields = lines[k].split(",")
    fields[4] = value
    lines[k] = ",".join(fields)
    path.write_text("\n".join(lines) + "\n")
    return path


def test_csv_value_error_gives_the_files_own_line_number(tmp_path):
    path = _csv_with_field(tmp_path, 10, "warm")  # 0-based index into the file's lines: line 11
    with pytest.raises(InputFileError, match=r"'warm' on line 11 is not a number"):
        load_section(path)


def test_csv_out_of_range_sample_gives_the_files_own_line_number(tmp_path):
    path = _csv_with_field(tmp_path, 12, "-99.0")  # line 13
    with pytest.raises(SectionDataError, match=r"-99 degC at line 13 "):
        load_section(path)


def test_csv_row_without_station_gives_the_files_own_line_number(tmp_path):
    path = write_csv(tmp_path / "c.csv", invented_section(3))
    lines = _with_comments(path)
    lines[8] = "," + lines[8].split(",", 1)[1]  # line 9 loses its station id
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(SectionDataError, match=r"line 9 has no station id"):
        load_section(path)


def test_output_piped_into_head_ends_quietly(tmp_path):
    # `sectionkit check FILE | head -1`: head closes the pipe after one line
    path = write_netcdf(tmp_path / "line.nc", invented_section(4))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    done = subprocess.run(
        f"{sys.executable} -m sectionkit.cli check {path} {path} {path} | head -1",
        shell=True, capture_output=True, text=True, env=env, timeout=120,
        executable="/bin/bash",
    )
    assert len(done.stdout.splitlines()) == 1
    assert "Traceback" not in done.stderr and "BrokenPipe" not in done.stderr, done.stderr
