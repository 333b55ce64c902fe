"""Benchmark of the workbench's state model: reference slider -> updated class table.

A move of the global reference-level slider asks the state model for a new
reference (``WorkbenchState.set_reference_pressure``) and then for the class
transport table (``class_table``). The model resolves the references again
and updates the table linearly (class transports ``relative + area *
offset``; the inverse's estimate through the fitted gain), without
recomputing dynamic height or the full budget. Goals: under 20 ms per move,
and at most 1/100 of a full recompute (``Study.from_config`` + ``solve``).

Two boxes: the bundled demo box (read from its files, as a user opens it)
and an invented box of 200 station pairs (two lines of 101 stations, 2 dbar
grid to 5000 dbar, built directly as canonical sections; its full recompute
therefore excludes file reading).

Run as a script (``python benchmarks/bench_workbench.py [--quick]``) or call
:func:`run` from a project-wide runner.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

#: Seconds allowed for one slider move -> updated class table.
GOAL_SECONDS = 0.020
#: Largest allowed ratio of a slider move to a full recompute.
GOAL_RATIO = 0.01


def _ensure_importable() -> None:
    """Let the script run from a source checkout without installing the package."""
    try:
        import sectionkit.workbench  # noqa: F401
    except ImportError:
        sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def invented_line(n: int, lat0: float, lon0: float, *, dp: float = 2.0, pmax: float = 5000.0):
    """A canonical section of an invented ocean (smooth thermocline, sloping bottom).

    Parameters
    ----------
    n : int
        Number of stations.
    lat0, lon0 : float
        Position of the first station, degrees_north and degrees_east.
    dp : float
        Grid step, dbar.
    pmax : float
        Deepest grid pressure, dbar.

    Returns
    -------
    xr.Dataset
        SA (g/kg) and CT (degC) on (station, pressure), lat, lon,
        bottom_pressure (dbar) and bottom_depth (m) per station.
    """
    import gsw
    import xarray as xr

    p = np.arange(0.0, pmax + dp / 2, dp)
    lon = lon0 + np.linspace(0.0, 30.0, n)
    lat = np.full(n, lat0)
    x = np.linspace(0.0, 1.0, n)
    bottom = 3200.0 + 1700.0 * np.sin(np.pi * x) ** 0.5
    ct = 2.0 + 18.0 * np.exp(-p / (700.0 + 300.0 * x[:, None]))
    sa = 34.9 + 1.2 * np.exp(-p / 900.0) + 0.1 * x[:, None]
    wet = p[None, :] <= np.floor(bottom / dp)[:, None] * dp
    return xr.Dataset(
        {
            "SA": (("station", "pressure"), np.where(wet, sa, np.nan)),
            "CT": (("station", "pressure"), np.where(wet, ct, np.nan)),
            "lat": ("station", lat),
            "lon": ("station", lon),
            "bottom_pressure": ("station", bottom),
            "bottom_depth": ("station", -gsw.z_from_p(bottom, lat)),
        },
        coords={"pressure": p, "station": [str(i + 1) for i in range(n)]},
        attrs={"dp": dp},
    )


def invented_box(pairs_per_line: int = 100):
    """Configuration and sections of a two-line invented box with an inverse.

    Returns
    -------
    config : Config
    sections : dict of str -> xr.Dataset
    """
    from sectionkit.config import parse_config

    config = parse_config({
        "title": "Invented 200-pair box",
        "sections": [{"name": "south", "file": "south.nc"},
                     {"name": "north", "file": "north.nc", "into_box": False}],
        "reference": {"pressure": 2000.0},
        "ekman": {"stress": {"south": [-0.06, 0.0], "north": [0.08, 0.0]}},
        "layers": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0},
                                  {"sigma": 32.0, "p_ref": 1000.0},
                                  {"sigma": 36.9, "p_ref": 2000.0}],
                   "names": ["upper", "intermediate", "deep", "bottom"]},
        "inverse": {"conserve": ["mass", "salt"], "noise_layer": [1.0, 0.7, 0.7, 0.5],
                    "known": [{"name": "strait", "transport": 0.8, "noise": 0.2,
                               "layer": "upper"}]},
    })
    sections = {
        "south": invented_line(pairs_per_line + 1, 25.0, -60.0).assign_attrs(section="south"),
        "north": invented_line(pairs_per_line + 1, 40.0, -62.0).assign_attrs(section="north"),
    }
    return config, sections


def _median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def _measure(label: str, open_state, full_recompute, repeats: int):
    """Median slider move and full recompute of one box."""
    state = open_state()
    state.flush_autosave()
    p_lo = 1000.0
    levels = iter(p_lo + 10.0 * np.arange(10_000))

    def slider_move() -> None:
        state.set_reference_pressure(next(levels))
        state.class_table()

    slider_move()  # warm caches (sigma, gradients) as a first move would
    t_move = _median_time(slider_move, max(10, 10 * repeats))
    state.flush_autosave()
    t_full = _median_time(full_recompute, repeats)
    pairs = sum(op.n_pair for op in state.study.operators.values())
    return [
        (f"workbench: slider -> class table, {label} ({pairs} pairs)", t_move, GOAL_SECONDS),
        (f"workbench: slider / full recompute of {t_full:.2f} s, {label} (ratio)",
         t_move / t_full, GOAL_RATIO),
    ]


def run(quick: bool = False) -> list[tuple[str, float, float]]:
    """Time a reference-slider move against a full recompute, demo and 200-pair box.

    Parameters
    ----------
    quick : bool
        Fewer repeats (median of 1 full recompute and 10 slider moves);
        otherwise 3 full recomputes and 30 moves.

    Returns
    -------
    list of (name, measured, goal)
        Per box: the slider move in seconds against 0.020 s, and the ratio
        of a move to a full recompute (dimensionless; the full recompute's
        seconds are in the name) against 0.01.
    """
    _ensure_importable()
    from sectionkit.cli import demo_config_path
    from sectionkit.config import load_config
    from sectionkit.study import Study
    from sectionkit.workbench.model import WorkbenchState

    repeats = 1 if quick else 3
    demo = demo_config_path()
    config, sections = invented_box()
    # autosave on, as in a session (the file is written on a background thread)
    with tempfile.TemporaryDirectory() as tmp:
        results = _measure(
            "demo box",
            lambda: WorkbenchState.open(demo, autosave=Path(tmp) / "demo.autosave.toml"),
            lambda: Study.from_config(load_config(demo)).solve(),
            repeats,
        )
        results += _measure(
            "invented box",
            lambda: WorkbenchState(config, sections, autosave=Path(tmp) / "box.autosave.toml"),
            lambda: Study.from_config(config, sections=sections).solve(),
            repeats,
        )
    return results


def main(argv: list[str] | None = None) -> None:
    """Print the benchmark table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    args = parser.parse_args(argv)
    print(f"{'step':<66} {'measured':>10} {'goal':>8}")
    for name, measured, goal in run(args.quick):
        unit = "" if "ratio" in name else " s"
        print(f"{name:<66} {measured:10.5f} {goal:8.3f}{unit}")


if __name__ == "__main__":
    main()
