"""The user guide in docs/ covers what the program accepts and writes.

The key list comes from the configuration parser's own schema
(``sectionkit.config.SCHEMA``, the typed tables ``parse_config`` checks against),
the column lists from the tables a run writes: a key or column added without
documentation fails here.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from _synthetic import invented_line

from sectionkit import config as config_module
from sectionkit.config import ALIASES, SCHEMA, parse_config
from sectionkit.errors import ConfigError
from sectionkit.outputs import SECTION_OUTPUTS
from sectionkit.study import Study
from sectionkit.tables import tables

DOCS = Path(__file__).resolve().parent.parent / "docs"


def _sections(text: str) -> dict[str, str]:
    """Body of every heading that ends with a schema name in backticks."""
    out: dict[str, str] = {}
    parts = re.split(r"^#{2,3} (.*)$", text, flags=re.MULTILINE)
    for heading, body in zip(parts[1::2], parts[2::2], strict=True):
        m = re.search(r"`([^`]+)`\s*$", heading.strip())
        if m:
            out[m.group(1)] = body
    return out


def test_every_configuration_key_is_in_the_reference():
    sections = _sections((DOCS / "configuration.md").read_text())
    missing = []
    for table, keys in SCHEMA.items():
        body = sections.get(table or "(top)")
        if body is None:
            missing.append(f"section for [{table or 'top level'}]")
            continue
        for key in keys:
            if not re.search(rf"^\| `{re.escape(key)}` \|", body, flags=re.MULTILINE):
                missing.append(f"{table or '(top)'}.{key}")
    assert not missing, f"docs/configuration.md lacks: {', '.join(missing)}"


def test_every_old_key_name_is_documented():
    text = (DOCS / "configuration.md").read_text()
    for aliases in ALIASES.values():
        for old, new in aliases.items():
            assert f"`{old}`" in text or f"`[{old}]`" in text, old
            assert new in text


@pytest.mark.parametrize("table, key, data", [
    ("grid", "dp", {"grid": {"dp": 5.0}}),
    ("inverse", "rank", {"inverse": {"rank": 3}}),
    ("inverse.known", "box", {"inverse": {"known": [{"name": "k", "transport": 1.0,
                                                    "noise": 0.1, "class": "class_0",
                                                    "box": "box"}]}}),
])
def test_the_schema_is_what_the_parser_checks(monkeypatch, table, key, data):
    # SCHEMA is not a documentation list kept beside the parser: take a key out of it and
    # the parser refuses that key
    data = {"sections": [{"name": "a", "file": "a.nc"}], **data}
    parse_config(data)
    monkeypatch.setitem(config_module.SCHEMA, table,
                        {k: v for k, v in SCHEMA[table].items() if k != key})
    with pytest.raises(ConfigError, match=f"unknown key '{key}'"):
        parse_config(data)


def test_every_output_column_is_in_the_output_guide():
    cfg = parse_config({
        "sections": [{"name": "south", "file": "s.nc"}, {"name": "north", "file": "n.nc",
                                                          "into_box": False}],
        "ekman": {"stress": {"south": [-0.05, 0.0]}},
        "classes": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0}], "names": ["a", "b"]},
        "inverse": {},
    })
    study = Study.from_config(cfg, sections={"south": invented_line(5, 25.0),
                                             "north": invented_line(5, 40.0)})
    text = (DOCS / "outputs.md").read_text()
    sections = re.split(r"^## ", text, flags=re.MULTILINE)
    for name, frame in tables(study, study.solve()).items():
        body = next((s for s in sections if s.startswith(name)), None)
        assert body is not None, f"docs/outputs.md has no section for {name}"
        for column in frame.columns:
            assert f"`{column}`" in body, f"{name}: column {column} undocumented"
    for spec in SECTION_OUTPUTS:
        assert f"`{spec.name}_*`" in text, spec.name


def test_readme_quick_start_is_two_commands_in_a_virtual_environment():
    readme = (DOCS.parent / "README.md").read_text()
    quick = readme.split("## Quick start")[1].split("\n## ")[0]
    blocks = re.findall(r"```\n(.*?)```", quick, flags=re.DOTALL)
    assert len(blocks) == 2
    commands = [b.strip() for b in blocks]
    assert all("\n" not in c for c in commands), "one command line per block"
    for command in commands:
        assert command.startswith("python3 -m venv .venv && . .venv/bin/activate && ")
    assert "sectionkit demo" in commands[0]
    assert "pytest" in commands[1]
    assert "chromium" in quick and "LaTeX" in quick and "skipped" in quick
