"""WHP-Exchange bottle files: tracer samples per station, and their profiles on the grid.

Bottle rows name their station (STNNBR), cast (CASTNO) and pressure
(CTDPRS); every cast of a station is pooled. Tracers are read in
micromoles per kilogram (units UMOL/KG); another label for a known tracer
is an error.

WOCE water-sample flags as sectionkit reads them (WOCE Hydrographic
Programme operations manual, flag tables; recalled from memory): 2
acceptable and 6 mean of replicates are used; 3 questionable, 7 manual
chromatographic peak and 8 irregular digital peak are used with a caution;
1 drawn but no result, 4 bad, 5 not reported and 9 not drawn are dropped.
A bottle whose own flag (BTLNBR_FLAG_W) is 4, did not trip correctly, gives
no samples at all.

**Gridding rule (stated).** At each station a tracer is interpolated in
pressure between its good bottles with the monotone piecewise cubic Hermite
interpolant (PCHIP, Fritsch and Carlson 1980: shape preserving, no
overshoot between bottles). Above the shallowest and below the deepest good
bottle the value of that bottle is extended unchanged to the surface and to
the station's last grid level (the same constant-extension rule the CTD
profiles follow); extensions longer than ``EXTENSION_NOTE`` dbar are
cautions. Replicate bottles at one pressure are averaged. A station with
fewer than two good bottles of a tracer has no profile of it (NaN), which
is an error only when that tracer's transport is asked for.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
import xarray as xr
from scipy.interpolate import PchipInterpolator

from sectionkit.errors import Cautions, ConfigError, InputFileError, SectionDataError
from sectionkit.io.exchange import (
    CONCENTRATION_UNITS,
    PRESSURE_UNITS,
    apply_flags,
    check_units,
    exchange_texts,
    parse_exchange,
    station_key,
)

#: Exchange parameter name -> (plain name, long name) of the tracers read.
TRACERS: dict[str, tuple[str, str]] = {
    "OXYGEN": ("oxygen", "dissolved oxygen"),
    "SILCAT": ("silicate", "silicate"),
    "NITRAT": ("nitrate", "nitrate"),
    "NITRIT": ("nitrite", "nitrite"),
    "PHSPHT": ("phosphate", "phosphate"),
    "TCARBN": ("dic", "dissolved inorganic carbon"),
    "ALKALI": ("alkalinity", "total alkalinity"),
}
#: WOCE bottle flags: used, used with a caution, dropped.
BOTTLE_USED = frozenset({2, 6})
BOTTLE_CAUTION = frozenset({3, 7, 8})
BOTTLE_DROPPED = frozenset({1, 4, 5, 9})
BOTTLE_FLAG_MEANING = {
    1: "drawn, no result",
    2: "acceptable",
    3: "questionable",
    4: "bad",
    5: "not reported",
    6: "mean of replicates",
    7: "manual peak",
    8: "irregular peak",
    9: "not drawn",
}
#: BTLNBR_FLAG_W values of a bottle whose samples are all left out (4: did not trip
#: correctly; WOCE bottle flags, recalled from memory).
MISTRIPPED = frozenset({4})
#: Constant extensions above the shallowest / below the deepest bottle longer than
#: this are cautions, dbar.
EXTENSION_NOTE = 100.0
GRIDDING = (
    "Bottle tracers are interpolated in pressure between good bottles with PCHIP "
    "(monotone piecewise cubic Hermite), replicates averaged; the shallowest and deepest "
    "good bottles are extended unchanged to the surface and to each station's last level."
)


def tracer_name(name: str) -> str:
    """The plain name of a tracer given by its exchange parameter name or plain name.

    Parameters
    ----------
    name : str
        ``"OXYGEN"``, ``"oxygen"``, ``"SILCAT"``, ``"silicate"``, ...

    Returns
    -------
    str
        The plain name (``"oxygen"``).
    """
    key = str(name).strip()
    for column, (plain, _) in TRACERS.items():
        if key.upper() == column or key.lower() == plain:
            return plain
    known = ", ".join(f"{plain} ({column})" for column, (plain, _) in TRACERS.items())
    raise ConfigError(f"tracer {name!r} is not known; tracers sectionkit reads: {known}")


@dataclass
class BottleStation:
    """The good bottle samples of one station.

    Attributes
    ----------
    station : str
        STNNBR as written.
    samples : dict of str -> (ndarray, ndarray)
        Plain tracer name to (pressure in dbar, concentration in umol/kg) of
        the used bottles, by increasing pressure, replicates averaged.
    flag_counts : dict of str -> dict of int -> int
        Parameter name to bottles per WOCE flag.
    """

    station: str
    samples: dict[str, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)
    flag_counts: dict[str, dict[int, int]] = field(default_factory=dict)


@dataclass
class BottleData:
    """A bottle file: tracers present and each station's samples."""

    file: str
    tracers: list[str]
    columns: dict[str, str]  # plain name -> parameter name
    stations: dict[str, BottleStation]  # by station_key

    def flag_report(self) -> list[str]:
        """Lines counting bottle flags per parameter (for ``sectionkit check``)."""
        total: dict[str, dict[int, int]] = {}
        for st in self.stations.values():
            for column, per_flag in st.flag_counts.items():
                into = total.setdefault(column, {})
                for flag, n in per_flag.items():
                    into[flag] = into.get(flag, 0) + n
        lines = [f"  bottles ({self.file}): {len(self.stations)} stations; WOCE bottle flags "
                 "(2, 6 used; 3, 7, 8 used with a caution; 1, 4, 5, 9 dropped):"]
        for column, per_flag in total.items():
            text = ", ".join(f"flag {f}: {n}" for f, n in sorted(per_flag.items()) if f >= 0)
            lines.append(f"    {column}: {text}")
        clean = 0
        for st in self.stations.values():
            flagged = {c: f for c, f in st.flag_counts.items() if set(f) - {2}}
            if not flagged:
                clean += 1
                continue
            text = "; ".join(
                f"{c} " + ", ".join(f"flag {f}: {n}" for f, n in sorted(per.items()) if f >= 0)
                for c, per in flagged.items())
            lines.append(f"    station {st.station}: {text}")
        lines.append(f"    {clean} of {len(self.stations)} stations have every bottle flagged 2")
        return lines


def _pool(p: np.ndarray, c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Samples by increasing pressure, replicates at one pressure averaged."""
    ok = np.isfinite(p) & np.isfinite(c)
    levels, inverse = np.unique(p[ok], return_inverse=True)
    sums = np.bincount(inverse, weights=c[ok], minlength=levels.size)
    counts = np.bincount(inverse, minlength=levels.size)
    return levels, sums / np.maximum(counts, 1)


def read_bottle(path: str | os.PathLike, cautions: Cautions | None = None) -> BottleData:
    """Read a WHP-Exchange bottle file (or a zip holding one).

    Parameters
    ----------
    path : str or path-like
        The bottle file.
    cautions : Cautions, optional
        Collects questionable bottles used and bad bottles dropped.

    Returns
    -------
    BottleData
        Good samples per station of every tracer in :data:`TRACERS` found.
    """
    cautions = Cautions() if cautions is None else cautions
    texts = exchange_texts(path)
    tables = [parse_exchange(text, label) for label, text in texts]
    tables = [t for t in tables if t.kind == "BOTTLE"]
    if not tables:
        raise InputFileError(f"file {os.fspath(path)}: is not a WHP-Exchange bottle file (its "
                             "first line must start with 'BOTTLE,')")
    table = tables[0]
    for column in ("STNNBR", "CTDPRS"):
        if column not in table.text and column not in table.numbers:
            raise InputFileError(f"file {table.file}: no column {column}; a bottle file needs "
                                 "STNNBR, CASTNO and CTDPRS")
    if "CTDPRS" in table.numbers:
        check_units(table, "CTDPRS", PRESSURE_UNITS)
    columns = {plain: c for c, (plain, _) in TRACERS.items() if c in table.numbers}
    if not columns:
        raise InputFileError(
            f"file {table.file}: holds none of the tracers {', '.join(TRACERS)}; columns "
            f"present: {', '.join(table.columns)}"
        )
    for plain, column in columns.items():
        if table.unit_key(column) not in CONCENTRATION_UNITS:
            raise SectionDataError(
                f"file {table.file}, variable {column}: units {table.units[column]!r} are not "
                f"understood; sectionkit reads {plain} in UMOL/KG (convert other units first)"
            )
    pressure = table.numbers["CTDPRS"]
    stations = table.text.get("STNNBR", np.array([], dtype=str))
    values = {}
    for plain, column in columns.items():
        values[plain], _ = apply_flags(table, column, BOTTLE_USED, BOTTLE_CAUTION,
                                       BOTTLE_DROPPED, "bottle")
    # the bottle's own flag: one that did not close correctly spoils every sample from it
    bottle_flag = table.numbers.get("BTLNBR_FLAG_W")
    if bottle_flag is not None:
        mistrip = np.isin(bottle_flag, list(MISTRIPPED))
        for plain in values:
            values[plain][mistrip] = np.nan
        if mistrip.any():
            where = ", ".join(f"station {stations[r]} line {table.lines[r]}"
                              for r in np.flatnonzero(mistrip)[:5])
            cautions.add("bottle-mistrip",
                         f"file {table.file}: {int(mistrip.sum())} bottle(s) flagged 4 in "
                         f"BTLNBR_FLAG_W (did not trip correctly) were left out ({where})",
                         file=table.file)
    out: dict[str, BottleStation] = {}
    for sid in dict.fromkeys(stations.tolist()):
        rows = stations == sid
        st = BottleStation(station=sid)
        for plain, column in columns.items():
            st.samples[plain] = _pool(pressure[rows], values[plain][rows])
            flags = table.numbers.get(f"{column}_FLAG_W")
            if flags is not None:
                f = flags[rows]
                f = np.where(np.isfinite(f), f, -1).astype(int)
                st.flag_counts[column] = {
                    int(a): int(b) for a, b in zip(*np.unique(f, return_counts=True), strict=True)
                }
            for flag, n in sorted(st.flag_counts.get(column, {}).items()):
                meaning = BOTTLE_FLAG_MEANING.get(flag, "")
                if flag in BOTTLE_CAUTION:
                    cautions.add("questionable-flag",
                                 f"station {sid} (file {table.file}): {n} {column} bottle(s) "
                                 f"flagged {flag} ({meaning}) were used",
                                 file=table.file, station=sid, variable=column)
                elif flag in (4, 5):
                    cautions.add("flagged-dropped",
                                 f"station {sid} (file {table.file}): {n} {column} bottle(s) "
                                 f"flagged {flag} ({meaning}) were dropped",
                                 file=table.file, station=sid, variable=column)
        out[station_key(sid)] = st
    return BottleData(file=table.file, tracers=list(columns), columns=columns, stations=out)


def tracer_profile(
    p: np.ndarray, c: np.ndarray, grid: np.ndarray, last: int
) -> tuple[np.ndarray, float, float]:
    """One station's tracer on the grid by the stated rule (PCHIP, constant ends).

    Parameters
    ----------
    p : ndarray (bottle,)
        Pressure of the good bottles, dbar, increasing.
    c : ndarray (bottle,)
        Concentration there, umol/kg.
    grid : ndarray (level,)
        Grid pressure, dbar.
    last : int
        Index of the station's last grid level.

    Returns
    -------
    values : ndarray (level,)
        umol/kg on the grid to ``last``, NaN below (NaN everywhere with
        fewer than two bottles).
    surface_extension, bottom_extension : float
        dbar covered by the constant extensions.
    """
    out = np.full(grid.size, np.nan)
    if p.size < 2:
        return out, float("nan"), float("nan")
    levels = grid[: last + 1]
    inside = np.clip(levels, p[0], p[-1])  # constant beyond the end bottles
    out[: last + 1] = PchipInterpolator(p, c, extrapolate=False)(inside)
    return out, float(p[0]), max(0.0, float(levels[-1] - p[-1]))


def grid_tracers(ds: xr.Dataset, bottles: BottleData, cautions: Cautions) -> xr.Dataset:
    """Add every bottle tracer of a section to its canonical Dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        Canonical gridded section (docs/CONTRACTS-INTERNAL.md).
    bottles : BottleData
        The section's bottle samples.
    cautions : Cautions
        Collects stations without bottles and long constant extensions.

    Returns
    -------
    xarray.Dataset
        ``ds`` with one (station, pressure) variable per tracer, named by its
        plain name, umol/kg, attribute ``role = "tracer"``; NaN below each
        station's last level and where a station has fewer than two good
        bottles.
    """
    grid = ds["pressure"].values
    finite = np.isfinite(ds["SA"].values)
    stations = [str(s) for s in ds["station"].values]
    missing = [s for s in stations if station_key(s) not in bottles.stations]
    if missing:
        cautions.add("no-bottles",
                     f"section {ds.attrs.get('section', '')}: stations {', '.join(missing)} have "
                     f"no bottles in {bottles.file}; their tracer transports cannot be computed",
                     file=bottles.file)
    out = ds.copy()
    for plain in bottles.tracers:
        column = bottles.columns[plain]
        values = np.full(finite.shape, np.nan)
        long_ends = []
        for i, sid in enumerate(stations):
            st = bottles.stations.get(station_key(sid))
            if st is None:
                continue
            last = int(np.flatnonzero(finite[i])[-1])
            p, c = st.samples[plain]
            values[i], top, bottom = tracer_profile(p, c, grid, last)
            if p.size < 2:
                cautions.add("too-few-bottles",
                             f"station {sid} (file {bottles.file}), variable {column}: "
                             f"{p.size} good bottle(s); no {plain} profile at this station",
                             file=bottles.file, station=sid, variable=column)
            elif max(top, bottom) > EXTENSION_NOTE:
                long_ends.append(f"{sid} ({top:g} dbar above, {bottom:g} dbar below)")
        if long_ends:
            cautions.add("bottle-extension",
                         f"{column} ({bottles.file}): the end bottles were extended unchanged "
                         f"over more than {EXTENSION_NOTE:g} dbar at stations "
                         + ", ".join(long_ends), file=bottles.file, variable=column)
        out[plain] = (("station", "pressure"), values, {
            "units": "umol/kg",
            "long_name": TRACERS[column][1],
            "exchange_name": column,
            "role": "tracer",
        })
    out.attrs["bottle"] = bottles.file
    out.attrs["gridding"] = f"{ds.attrs.get('gridding', '')} {GRIDDING}".strip()
    return out


def tracer_variables(ds: xr.Dataset) -> list[str]:
    """Names of the tracer variables of a canonical section."""
    return [str(n) for n, v in ds.data_vars.items() if v.attrs.get("role") == "tracer"]
