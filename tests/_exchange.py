"""An invented cruise as WHP-Exchange files, for the exchange reader tests.

The ocean is :func:`tests._sections.invented_section` (made up), rounded to
the precision the exchange files hold (4 decimals of temperature and
salinity, 0.1 dbar, whole metres of depth), so that a CF-NetCDF file of the
same rounded values holds exactly the same section.
"""

from __future__ import annotations

import numpy as np

try:
    from tests._sections import invented_section
except ImportError:  # tests/ itself on sys.path
    from _sections import invented_section


def rounded_section(n: int = 5, **kwargs) -> dict:
    """The invented section rounded to exchange precision; station ids "1" .. "n"."""
    sec = invented_section(n, **kwargs)
    sec["temperature"] = np.round(sec["temperature"], 4)
    sec["salinity"] = np.round(sec["salinity"], 4)
    sec["pressure"] = np.round(sec["pressure"], 1)
    sec["bottom_depth"] = np.round(sec["bottom_depth"])
    sec["lat"] = np.round(sec["lat"], 4)
    sec["lon"] = np.round(sec["lon"], 4)
    sec["station"] = [str(i + 1) for i in range(n)]
    return sec


def casts(sec: dict) -> list[dict]:
    """Keyword arguments of ``ctd_text`` for every station of a section."""
    out = []
    for i, station in enumerate(sec["station"]):
        P = sec["pressure"][i]
        ok = np.isfinite(P)
        out.append(
            dict(
                station=station,
                lat=float(sec["lat"][i]),
                lon=float(sec["lon"][i]),
                depth=float(sec["bottom_depth"][i]),
                pressure=P[ok],
                temperature=sec["temperature"][i][ok],
                salinity=sec["salinity"][i][ok],
            )
        )
    return out


def bottle_rows(sec: dict, pressures=(5.0, 100.0, 250.0, 500.0, 800.0), tracers=None) -> dict:
    """Bottle rows at fixed pressures (above each station's deepest sample).

    Parameters
    ----------
    sec : dict
        Section (for station ids and cast depths).
    pressures : sequence of float
        Bottle pressures, dbar; a deepest bottle 10 dbar above each cast's end
        is added.
    tracers : dict, optional
        Parameter name to a function ``f(p, i)`` of pressure (dbar) and
        station index giving umol/kg; default oxygen and silicate linear in p.
    """
    tracers = tracers or {
        "OXYGEN": lambda p, i: 250.0 - 0.05 * p + i,
        "SILCAT": lambda p, i: 2.0 + 0.03 * p,
    }
    rows: dict[str, list] = {"STNNBR": [], "CASTNO": [], "CTDPRS": []}
    rows.update({name: [] for name in tracers})
    for i, station in enumerate(sec["station"]):
        deepest = float(np.nanmax(sec["pressure"][i]))
        for p in [q for q in pressures if q < deepest - 10.0] + [deepest - 10.0]:
            rows["STNNBR"].append(station)
            rows["CASTNO"].append("1")
            rows["CTDPRS"].append(p)
            for name, f in tracers.items():
                rows[name].append(f(p, i))
    return rows
