"""Files are written whole or not at all (temporary file beside the target, then rename)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sectionkit.atomic import replaced_atomically, write_text_atomic
from sectionkit.config import parse_config


def test_a_failed_write_keeps_the_earlier_file_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "budget.toml"
    target.write_text("earlier\n", encoding="utf-8")
    with pytest.raises(RuntimeError), replaced_atomically(target) as tmp:
        tmp.write_text("half of the new", encoding="utf-8")
        raise RuntimeError("disk full")  # stands for any failure while writing
    assert target.read_text(encoding="utf-8") == "earlier\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["budget.toml"]


def test_a_whole_write_replaces_the_file_and_leaves_nothing_else(tmp_path):
    target = tmp_path / "notes.txt"
    target.write_text("earlier\n", encoding="utf-8")
    write_text_atomic(target, "σ₀ 27.5 kg m⁻³\n")
    assert target.read_text(encoding="utf-8") == "σ₀ 27.5 kg m⁻³\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]


def test_a_configuration_that_cannot_be_written_leaves_no_temporary(tmp_path, monkeypatch):
    config = parse_config({"sections": [{"name": "s", "file": "s.nc"}]}, base_dir=tmp_path)
    target = tmp_path / "study.toml"
    config.save(target)
    before = target.read_text(encoding="utf-8")

    real_write = Path.write_text

    def full_disk(self, text, *args, **kwargs):  # half the text reaches the disk, then ENOSPC
        real_write(self, text[: len(text) // 2], *args, **kwargs)
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(Path, "write_text", full_disk)
    with pytest.raises(OSError):
        config.save(target)
    monkeypatch.undo()
    assert target.read_text(encoding="utf-8") == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study.toml"]
