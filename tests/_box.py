"""The invented two-line box used by the end-to-end budget tests.

A southern line flowing into the box and a northern line closing it (``into_box = false``),
written as ``south.nc`` and ``north.nc`` beside the study file.
"""

from __future__ import annotations

from pathlib import Path

from _sections import invented_section, write_netcdf

# [grid] and the two [[sections]] tables; callers append [reference] and what follows.
TWO_LINES = """
[grid]
dp = 10.0
[[sections]]
name = "south"
file = "south.nc"
[[sections]]
name = "north"
file = "north.nc"
into_box = false
"""


def write_two_lines(directory: Path) -> None:
    """Write the invented south (6 stations, 24 N) and north (5 stations, 36 N) lines.

    Parameters
    ----------
    directory : Path
        Folder that receives ``south.nc`` and ``north.nc`` (10 dbar grid).
    """
    write_netcdf(directory / "south.nc", invented_section(
        6, dp=10.0, lat0=24.0, bottoms=[900, 1500, 2000, 2000, 1600, 900]))
    write_netcdf(directory / "north.nc", invented_section(
        5, dp=10.0, lat0=36.0, bottoms=[800, 1400, 1900, 1500, 800]))
