"""The demo's exchange-format line: CTD zip, bottle tracers and LADCP profiles (all invented).

One line of the invented demo cruise is also written the way a data centre
delivers a real one: its CTD casts as a zip of WHP-Exchange files (stations
numbered 1, 2, ...), a bottle file with invented dissolved oxygen and
silicate, and lowered-ADCP velocity profiles at every station. A few
samples carry the WOCE flags a real cruise has (a bad temperature spike,
a questionable stretch, a bad bottle, a bottle not drawn), so the flag
handling shows in the demo report.

The LADCP velocity at a station is the demo truth's absolute velocity
(geostrophic velocity plus the true reference velocity) of its one or two
pairs, averaged, rotated from the section normal into east and north with an
invented along-line current added, plus a station-constant ageostrophic
offset (tides, inertial motion) and sample noise. Nothing here is a real
ocean, cruise or instrument.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from sectionkit.atomic import write_text_atomic
from sectionkit.config import AdcpSpec, Config
from sectionkit.io.exchange_write import write_bottle, write_ctd_zip

#: Bottle pressures of the invented rosette, dbar (a deepest bottle 10 dbar above each
#: cast's end is added).
BOTTLE_PRESSURES = (5.0, 25.0, 50.0, 75.0, 100.0, 150.0, 200.0, 300.0, 400.0, 500.0, 600.0,
                    750.0, 900.0, 1100.0, 1300.0, 1500.0, 1750.0, 2000.0, 2500.0, 3000.0,
                    3500.0, 4000.0, 4500.0, 5000.0)
#: LADCP sample spacing, dbar.
LADCP_STEP = 20.0
#: Noise of one LADCP sample, of the station-constant ageostrophic offset, m s^-1.
LADCP_NOISE = (0.03, 0.01)
#: [adcp] settings written into demo.toml: averaging range (dbar), use, error (m s^-1).
ADCP_RANGE = (500.0, 2500.0)
ADCP_ERROR = 0.02
EXPOCODE = "QM07DEMO"
#: Decimals of the demo's CTD temperature, salinity and position: enough to hold the
#: float32 values of the NetCDF file, so both files give the same section (the truth is
#: computed once, from the NetCDF values).
CTD_DECIMALS = {"CTDTMP": 7, "CTDSAL": 7, "position": 8}


def oxygen(p: np.ndarray, ct: np.ndarray) -> np.ndarray:
    """Invented dissolved oxygen, umol/kg: a mid-depth minimum over well-ventilated deep water."""
    return 245.0 - 150.0 * np.exp(-(((p - 800.0) / 450.0) ** 2)) - 2.0 * (ct - 4.0) * np.exp(
        -p / 400.0
    )


def silicate(p: np.ndarray, ct: np.ndarray) -> np.ndarray:
    """Invented silicate, umol/kg: near zero at the surface, rising through the deep water."""
    return 1.0 + 115.0 * (1.0 - np.exp(-p / 2200.0)) + 2.5 * np.clip(3.0 - ct, 0.0, None)


def _casts(name: str, station_numbers: list[str], lon, lat, depth, p, t, s):
    casts = []
    for i, number in enumerate(station_numbers):
        ok = np.isfinite(t[i])
        casts.append(dict(station=number, lat=float(lat[i]), lon=float(lon[i]),
                          depth=float(depth[i]), pressure=p[ok], temperature=t[i][ok],
                          salinity=s[i][ok], expocode=EXPOCODE, sect_id=name.upper(),
                          decimals=CTD_DECIMALS))
    # a bad scan (temperature spike, flag 4) between two good ones, and a questionable
    # stretch (flag 3), as on real casts; dropping the bad scan leaves the good samples as
    # they were, so the truth of the NetCDF file holds for this file too
    c = casts[len(casts) // 3]
    k = min(400, c["pressure"].size // 2)
    c["pressure"] = np.insert(c["pressure"], k + 1, 0.5 * (c["pressure"][k] + c["pressure"][k + 1]))
    c["temperature"] = np.insert(c["temperature"], k + 1, c["temperature"][k] + 4.0)
    c["salinity"] = np.insert(c["salinity"], k + 1, c["salinity"][k])
    flags = np.full(c["pressure"].size, 2)
    flags[k + 1] = 4
    c["flags"] = {"CTDTMP": flags}
    c = casts[2 * len(casts) // 3]
    k = min(400, c["pressure"].size // 2)
    flags = np.full(c["pressure"].size, 2)
    flags[k : k + 10] = 3
    c["flags"] = {"CTDTMP": flags}
    return casts


def _bottles(station_numbers, p, ct, rng) -> tuple[dict, dict]:
    rows: dict[str, list] = {"STNNBR": [], "CASTNO": [], "SAMPNO": [], "CTDPRS": [],
                             "OXYGEN": [], "SILCAT": []}
    for i, number in enumerate(station_numbers):
        ok = np.isfinite(ct[i])
        deepest = float(p[ok][-1])
        levels = [q for q in BOTTLE_PRESSURES if q < deepest - 20.0] + [deepest - 10.0]
        c = np.interp(levels, p[ok], ct[i][ok])
        for n, (q, ct_q) in enumerate(zip(levels, c, strict=True)):
            rows["STNNBR"].append(number)
            rows["CASTNO"].append("1")
            rows["SAMPNO"].append(str(len(levels) - n))
            rows["CTDPRS"].append(q)
            rows["OXYGEN"].append(float(oxygen(q, ct_q) + rng.normal(0.0, 1.0)))
            rows["SILCAT"].append(float(max(silicate(q, ct_q) + rng.normal(0.0, 0.3), 0.0)))
    n = len(rows["STNNBR"])
    flags = {"OXYGEN": [2] * n, "SILCAT": [2] * n}
    bad, missing, doubtful = n // 4, n // 2, 3 * n // 4
    rows["OXYGEN"][bad] += 90.0  # a bottle that leaked: flagged bad
    flags["OXYGEN"][bad] = 4
    rows["SILCAT"][missing] = float("nan")  # not drawn
    flags["SILCAT"][missing] = 9
    flags["SILCAT"][doubtful] = 3
    return rows, flags


def _ladcp(station_numbers, p, v_abs, te, tn, rng) -> list[str]:
    """CSV lines of LADCP profiles (station, pressure, u, v)."""
    n_st = len(station_numbers)
    lines = ["# invented lowered-ADCP profiles (sectionkit demo; no real instrument)",
             "station,pressure,u,v"]
    for i, number in enumerate(station_numbers):
        adjacent = [j for j in (i - 1, i) if 0 <= j < n_st - 1]
        stack = np.stack([v_abs[j] for j in adjacent])
        count = np.isfinite(stack).sum(axis=0)
        vn = np.where(count > 0, np.nansum(stack, axis=0) / np.maximum(count, 1), np.nan)
        e = np.mean([te[j] for j in adjacent])
        nn = np.mean([tn[j] for j in adjacent])
        norm = np.hypot(e, nn)
        e, nn = e / norm, nn / norm
        ok = np.isfinite(vn)
        levels = np.arange(LADCP_STEP / 2, p[ok][-1], LADCP_STEP)
        normal = np.interp(levels, p[ok], vn[ok])
        along = 0.03 * np.sin(2.0 * np.pi * (i / 9.0)) * np.exp(-levels / 1500.0)
        offset = rng.normal(0.0, LADCP_NOISE[1])
        normal = normal + offset + rng.normal(0.0, LADCP_NOISE[0], levels.size)
        # normal to the left of the line: (-t_north, t_east)
        u = -nn * normal + e * along
        v = e * normal + nn * along
        lines += [f"{number},{q:.1f},{a:.4f},{b:.4f}" for q, a, b in zip(levels, u, v,
                                                                         strict=True)]
    return lines


def write_exchange_line(
    folder: str | Path,
    name: str,
    observed: Mapping[str, np.ndarray],
    absolute_velocity: np.ndarray,
    along_east: np.ndarray,
    along_north: np.ndarray,
    seed: int,
) -> dict[str, str]:
    """Write one demo line as exchange CTD zip, bottle file and LADCP CSV.

    Parameters
    ----------
    folder : path
        Output folder.
    name : str
        Line name.
    observed : mapping
        The line as stored: ``lon``, ``lat`` (station,) degrees; ``bottom_depth``
        (station,) m; ``pressure`` (level,) dbar; ``temperature`` (in situ,
        degC), ``salinity`` (practical) and ``ct`` (Conservative Temperature,
        degC), each (station, level) with NaN below the cast.
    absolute_velocity : ndarray (pair, level)
        True absolute velocity of each pair, m s^-1, positive to the left.
    along_east, along_north : ndarray (pair,)
        Unit vector along the line.
    seed : int
        Seed of the invented noise.

    Returns
    -------
    dict of str -> str
        File names: ``ctd``, ``bottle``, ``adcp``.
    """
    folder = Path(folder)
    rng = np.random.default_rng([seed, 15])
    n = len(observed["lon"])
    numbers = [str(k + 1) for k in range(n)]
    p = np.asarray(observed["pressure"], float)
    t = np.asarray(observed["temperature"], float)
    s = np.asarray(observed["salinity"], float)
    files = {"ctd": f"{name}_ct1.zip", "bottle": f"{name}_hy1.csv", "adcp": f"{name}_ladcp.csv"}
    write_ctd_zip(folder / files["ctd"], _casts(name, numbers, observed["lon"], observed["lat"],
                                                observed["bottom_depth"], p, t, s))
    rows, flags = _bottles(numbers, p, np.asarray(observed["ct"], float), rng)
    write_bottle(folder / files["bottle"], rows, flags=flags, expocode=EXPOCODE,
                 sect_id=name.upper())
    lines = _ladcp(numbers, p, absolute_velocity, along_east, along_north, rng)
    write_text_atomic(folder / files["adcp"], "\n".join(lines) + "\n")
    return files


def exchange_config(config: Config, name: str, files: Mapping[str, str]) -> Config:
    """The demo configuration with line ``name`` read from its exchange files, tracers and LADCP.

    Parameters
    ----------
    config : Config
        The demo configuration (not changed).
    name : str
        The exchange line.
    files : mapping
        As returned by :func:`write_exchange_line`.

    Returns
    -------
    Config
        A copy whose line ``name`` reads the CTD zip, the bottle file and the LADCP
        profiles, with ``[tracers]`` oxygen and silicate and ``[adcp]`` settings.
    """
    out = copy.deepcopy(config)
    spec = next(s for s in out.sections if s.name == name)
    spec.file, spec.bottle, spec.adcp = files["ctd"], files["bottle"], files["adcp"]
    out.tracers = ["oxygen", "silicate"]  # umol/kg bottle tracers -> kmol s^-1
    out.adcp = AdcpSpec(pressure_range=(float(ADCP_RANGE[0]), float(ADCP_RANGE[1])),
                        use="prior", error=float(ADCP_ERROR))
    return out


def add_exchange_line(folder: str | Path, name: str, obs, truth, config: Config,
                      seed: int) -> tuple[Config, dict[str, str]]:
    """Write the exchange files of demo line ``name`` and point demo.toml at them.

    Parameters
    ----------
    folder : path
        The demo's (temporary) output folder.
    name : str
        Line name.
    obs : sectionkit.demo._Observed
        The line as stored in its CF-NetCDF file.
    truth : sectionkit.demo.DemoTruth
        The demo truth (operators, reference offsets, true reference velocities).
    config : Config
        The demo configuration.
    seed : int
        The scenario's seed.

    Returns
    -------
    config : Config
        The configuration using the exchange files, ``[tracers]`` and ``[adcp]``.
    files : dict of str -> str
        ``ctd``, ``bottle`` and ``adcp`` file names written into ``folder``.
    """
    op = truth.operators[name]
    observed = {
        "lon": obs.lon, "lat": obs.lat, "bottom_depth": obs.bottom_depth,
        "pressure": obs.pressure, "temperature": obs.temperature, "salinity": obs.salinity,
        "ct": truth.sections[name]["CT"].values,
    }
    v_abs = op.absolute_velocity(truth.offset[name], truth.b_true[name])
    files = write_exchange_line(folder, name, observed, v_abs, op.pairs["along_east"].values,
                                op.pairs["along_north"].values, seed)
    return exchange_config(config, name, files), files
