"""Bottom triangles follow a bathymetry track when one is given."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
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


def test_water_below_both_stations_is_included_with_a_caution(tmp_path):
    # a box-shaped trench 600 m below two stations of equal depth (3000 dbar) over the middle
    # half of the pair: the pair's cross-section is its width times the mean depth along the
    # track (hand calculation: station depth + 300 m); a uniform reference velocity b then
    # carries b times that area (gsw.distance, gsw.z_from_p)
    import gsw
    from _synthetic import canonical_section

    from sectionkit.budget import section_values

    lat, dp = 30.0, 10.0
    bottoms = np.array([3000.0, 3000.0, 4000.0, 4000.0])
    p = np.arange(0.0, 4000.0 + dp / 2, dp)
    lon = np.array([-40.0, -39.5, -39.0, -38.5])
    sa = np.where(p[None, :] <= bottoms[:, None], 35.0, np.nan)
    ct = np.where(p[None, :] <= bottoms[:, None], 4.0, np.nan)
    section = canonical_section(sa, ct, p, lon, np.full(4, lat), bottoms, name="line")
    dist = np.concatenate([[0.0], np.cumsum(gsw.distance(lon, np.full(4, lat)))]) / 1e3
    depth = -gsw.z_from_p(bottoms, lat)
    fine = np.linspace(0.0, dist[-1], 8001)
    track_depth = np.interp(fine, dist, depth)
    trench = (fine > dist[0] + 0.25 * dist[1]) & (fine < dist[0] + 0.75 * dist[1])
    track_depth[trench] += 600.0
    pd.DataFrame({"distance_km": fine, "depth_m": track_depth}).to_csv(tmp_path / "t.csv",
                                                                       index=False)
    config = parse_config({"sections": [{"name": "line", "file": "x.nc",
                                         "bathymetry": "t.csv"}],
                           "reference": {"pressure": 1000.0}}, base_dir=tmp_path)
    study = Study.from_config(config, sections={"line": section})
    results = study.solve()
    op = study.operators["line"]
    b = 0.05
    pair0 = section_values(op, np.full(op.n_pair, b))["pair_volume_transport"][0].sum()
    expected = b * dist[1] * 1e3 * (depth[0] + 300.0) / 1e6
    # the engine samples the track at 64 points per pair: the trench edges are known to
    # 1/64 of the width, i.e. 600 m / 64 of mean depth
    assert pair0 == pytest.approx(expected, rel=600.0 / 64 / depth[0])
    # dropping the trench would lose 300 m of 3000
    assert pair0 > 1.05 * b * dist[1] * 1e3 * depth[0] / 1e6
    (caution,) = results.cautions.of_kind("bathymetry-below-stations")
    assert "line:0" in str(caution)
    # the potential density of the water continued down to the track is the deepest
    # measured one (uniform water here: gsw.rho at 0 dbar of SA 35, CT 4, minus 1000)
    sigma0 = op.sigma_pair[0.0]
    k_last = int(np.searchsorted(p, 3000.0))
    below_stations = sigma0[0, k_last + 1 : int(op.deepest[0]) + 1]
    assert below_stations.size > 0
    np.testing.assert_allclose(below_stations, gsw.rho(35.0, 4.0, 0.0) - 1000.0, rtol=0,
                               atol=1e-12)
    np.testing.assert_allclose(op.sigma_pair[2000.0][0, k_last + 1 : int(op.deepest[0]) + 1],
                               gsw.rho(35.0, 4.0, 2000.0) - 1000.0, rtol=0, atol=1e-12)
