"""Bottom triangles follow a bathymetry track when one is given."""

from __future__ import annotations

import numpy as np
import pandas as pd
from _synthetic import thermocline_section

from sectionkit.config import parse_config
from sectionkit.geometry import great_circle_distance
from sectionkit.study import Study


def _study(tmp_path, track: pd.DataFrame | None) -> Study:
    section = thermocline_section(n=5, dp=10.0, bottoms=np.array([3000, 4000, 3500, 4500, 4000.]),
                                  name="line")
    spec = {"name": "line", "file": "unused.nc"}
    if track is not None:
        track.to_csv(tmp_path / "track.csv", index=False)
        spec["bathymetry"] = "track.csv"
    config = parse_config({"sections": [spec], "reference": {"pressure": "bottom"},
                           "layers": {"interfaces": [{"sigma": 27.0, "p_ref": 0.0}]}},
                          base_dir=tmp_path)
    return Study.from_config(config, sections={"line": section})


def _section_area(study: Study) -> float:
    op = study.operators["line"]
    return float((op.weights.sum(axis=(-2, -1)) * op.pairs["distance"].values).sum())


def _straight_track(study: Study, extra_depth: float = 0.0) -> pd.DataFrame:
    ds = study.sections["line"]
    dist = np.concatenate([[0.0], np.cumsum(great_circle_distance(ds["lon"].values,
                                                                  ds["lat"].values))]) / 1e3
    fine = np.linspace(0.0, dist[-1], 400)
    depth = np.interp(fine, dist, ds["bottom_depth"].values)
    bump = extra_depth * np.sin(np.pi * ((fine - dist[0]) / (dist[1] - dist[0])).clip(0, 1))
    return pd.DataFrame({"distance_km": fine, "depth_m": depth + bump})


def test_track_along_straight_bottom_gives_the_same_area(tmp_path):
    plain = _study(tmp_path, None)
    tracked = _study(tmp_path, _straight_track(plain))
    np.testing.assert_allclose(_section_area(tracked), _section_area(plain), rtol=2e-3)


def test_deeper_track_between_stations_adds_area_below_the_shallower_station(tmp_path):
    plain = _study(tmp_path, None)
    # a trench 600 m deep between the first two stations, outside the trapezoid
    tracked = _study(tmp_path, _straight_track(plain, extra_depth=600.0))
    op_plain, op_track = plain.operators["line"], tracked.operators["line"]
    first_plain = float(op_plain.weights[0].sum())
    first_track = float(op_track.weights[0].sum())
    assert first_track > first_plain
    # other pairs follow the same straight bottom (sampled track vs analytic)
    np.testing.assert_allclose(op_track.weights[2:].sum(), op_plain.weights[2:].sum(), rtol=1e-3)
