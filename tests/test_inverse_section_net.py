"""A net-transport constraint on one section (closed basin) pins its barotropic flow."""

from __future__ import annotations

import pytest
from _synthetic import thermocline_section

from sectionkit.config import parse_config
from sectionkit.errors import ConfigError
from sectionkit.study import Study


def _config(section_net):
    return parse_config({
        "sections": [{"name": "south", "file": "s.nc"},
                     {"name": "north", "file": "n.nc", "into_box": False}],
        "reference": {"pressure": 1000.0},
        "layers": {"interfaces": [{"sigma": 27.0, "p_ref": 0.0}], "names": ["warm", "cold"]},
        "inverse": {"prior_velocity": 0.01, "noise_layer": [0.5, 0.5],
                    "section_net": section_net},
    })


def test_section_net_constraint_moves_net_transport_to_stated_value():
    sections = {"south": thermocline_section(n=6, dp=20.0, lat0=26.0, name="south"),
                "north": thermocline_section(n=6, dp=20.0, lat0=36.0, name="north")}
    free = Study.from_config(_config([]), sections=sections).solve()
    tied = Study.from_config(_config([{"section": "south", "transport": 0.0, "noise": 0.1}]),
                             sections=sections).solve()
    assert abs(free.value("south", "net_mass")) > 1.0
    assert abs(tied.value("south", "net_mass")) < 0.3
    assert tied.error("south", "net") < free.error("south", "net")
    assert ("section:south", "net_mass") in tied.inverse.system.rows


def test_section_net_naming_missing_section_is_refused():
    with pytest.raises(ConfigError, match="section 'sooth' does not exist.*'south'"):
        _config([{"section": "sooth", "transport": 0.0, "noise": 0.1}])
