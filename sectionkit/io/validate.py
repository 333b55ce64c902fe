"""Checks that a section can be used as read: clear errors, and cautions.

Errors (raised) stop the load with a message naming file, station,
variable and value and saying what to do. Cautions (collected) are
findings a scientist should see but that do not stop the computation.

Thresholds (stated, not tuned):

- pressure: above MAX_PRESSURE (12000 dbar, deeper than any ocean) means Pa
  labelled dbar; below MIN_PRESSURE (-5 dbar) means a missing-value marker
  or depth with the wrong sign;
- temperature: a median in KELVIN_BAND (250 to 320) labelled degC is kelvin;
  otherwise values outside TEMPERATURE_RANGE (-3 to 40 degC) are refused;
- salinity: values above MAX_SALINITY (42, above any open sea), negative
  values, or values below DEEP_MIN_SALINITY (15) deeper than DEEP_PRESSURE
  (500 dbar, where no sea is that fresh) cannot be salinity (conductivity in
  mS/cm or S/m, or a missing-value marker);
- positions: two stations closer than SAME_POSITION (10 m) are one place;
- equator: pair mid-points within EQUATOR_BAND (2 degrees) refuse geostrophy.

Cautions: station spacing above GAP_FACTOR (3) times the median spacing,
casts ending more than SHORT_CAST (200 m) above the stated bottom, density
inversions (see :func:`sectionkit.thermo.find_inversions`), samples with
only some of pressure, salinity and temperature, all-brackish salinity.
"""

from __future__ import annotations

from collections import Counter

import numpy as np

from sectionkit.arrays import core_last
from sectionkit.compiled import kernel
from sectionkit.errors import Cautions, EquatorError, SectionDataError
from sectionkit.geometry import (
    EQUATOR_BAND,
    EQUATOR_HARD_BAND,
    along_line_direction,
    equatorial_pairs,
    great_circle_distance,
    haversine,
)
from sectionkit.io.raw import Profile, RawSection
from sectionkit.io.units import is_pascal
from sectionkit.thermo import Inversion, depth_from_pressure, pressure_from_depth

MAX_PRESSURE = 12000.0  # dbar
MIN_PRESSURE = -5.0  # dbar
KELVIN_BAND = (250.0, 320.0)  # K
TEMPERATURE_RANGE = (-3.0, 40.0)  # degC
MAX_SALINITY = 42.0
DEEP_PRESSURE = 500.0  # dbar
DEEP_MIN_SALINITY = 15.0
BRACKISH = 7.0
MAX_BOTTOM_DEPTH = 11500.0  # m
SAME_POSITION = 10.0  # m
GAP_FACTOR = 3.0
SHORT_CAST = 200.0  # m
TURN_BACK = 135.0  # degrees: a line turning back sharper than this is out of station order


def _first(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask)[0])


def _place(profile: Profile, k: int) -> str:
    """Sample ``k`` as the user finds it: the file's line (text files) or the sample index."""
    return f"line {int(profile.lines[k])}" if profile.lines is not None else f"sample {k}"


def _at(profile: Profile, k: int) -> str:
    p = profile.pressure[k]
    return _place(profile, k) + (f" ({p:g} dbar)" if np.isfinite(p) else "")


def check_position(profile: Profile) -> None:
    """Latitude and longitude present and in range."""
    for quantity, value, low, high in (
        ("latitude", profile.lat, -90.0, 90.0),
        ("longitude", profile.lon, -180.0, 360.0),
    ):
        if not np.isfinite(value):
            raise SectionDataError(
                f"{profile.where(quantity)}: {quantity} is {value}, not a position; every "
                "station needs a finite latitude and longitude"
            )
        if not low <= value <= high:
            raise SectionDataError(
                f"{profile.where(quantity)}: {quantity} {value:g} is outside {low:g} .. {high:g} "
                "degrees; fix the position (decimal degrees, north and east positive)"
            )


def check_finite(profile: Profile) -> None:
    """No infinite values (missing values must be NaN or _FillValue)."""
    for quantity in ("pressure", "salinity", "temperature"):
        values = getattr(profile, quantity)
        bad = np.isinf(values)
        if bad.any():
            k = _first(bad)
            raise SectionDataError(
                f"{profile.where(quantity)}: value {values[k]} at {_place(profile, k)} is "
                "infinite; mark missing values as NaN or with _FillValue"
            )
    if np.isinf(profile.bottom_depth):
        raise SectionDataError(
            f"{profile.where('bottom_depth')}: bottom depth is infinite; "
            "give a depth in m or leave it missing"
        )


def check_present(profile: Profile) -> None:
    """At least one sample with pressure, salinity and temperature all present."""
    for quantity in ("pressure", "salinity", "temperature"):
        if not np.isfinite(getattr(profile, quantity)).any():
            raise SectionDataError(
                f"{profile.where(quantity)}: {quantity} is missing (NaN) at every sample; "
                "the profile is empty — drop the station or supply its data"
            )
    if not profile.complete().any():
        raise SectionDataError(
            f"{profile.where()}: no sample has pressure, salinity and temperature all present; "
            "drop the station or supply its data"
        )


def check_not_zero(profile: Profile) -> None:
    """No sample exactly 0 in both temperature and salinity (zeros in place of data).

    Water of salinity 0 is not sea water, so a sample holding exactly 0 in both
    is the zero fill of a cut-short file or of unwritten data, not a measurement.
    """
    zero = (profile.temperature == 0.0) & (profile.salinity == 0.0)
    if zero.any():
        k = _first(zero)
        raise SectionDataError(
            f"{profile.where()}: {int(zero.sum())} sample(s) from {_at(profile, k)} on are "
            "exactly 0 in both temperature and salinity, which is not data (a cut-short file, "
            "or missing values written as 0?); declare missing values as _FillValue or NaN"
        )


def check_pressure(profile: Profile) -> None:
    """Pressure in a plausible range for its units and increasing downward."""
    p = profile.pressure[np.isfinite(profile.pressure)]
    units = profile.units.get("pressure", "dbar")
    if p.max() > MAX_PRESSURE:
        k = _first(profile.pressure == p.max())
        raise SectionDataError(
            f"{profile.where('pressure')}: pressure reaches {p.max():g} dbar at "
            f"{_place(profile, k)} (labelled {units!r}), deeper than any ocean "
            f"({MAX_PRESSURE:g} dbar); values in Pa labelled dbar? fix the units attribute "
            "(sectionkit converts Pa)"
        )
    if is_pascal(units) and p.size > 1 and p.max() < 1.0:
        raise SectionDataError(
            f"{profile.where('pressure')}: pressure labelled {units!r} reaches only "
            f"{p.max() * 1e4:g} Pa ({p.max():g} dbar); the values look like dbar labelled Pa — "
            "fix the units attribute"
        )
    if p.min() < MIN_PRESSURE:
        k = _first(profile.pressure == p.min())
        raise SectionDataError(
            f"{profile.where('pressure')}: pressure {p.min():g} dbar at {_place(profile, k)} is "
            "negative; a missing-value marker (declare it as _FillValue) or depth with the "
            "wrong sign?"
        )
    steps = np.diff(p)
    if np.any(steps <= 0):
        k = _first(steps <= 0)
        index = np.flatnonzero(np.isfinite(profile.pressure))
        raise SectionDataError(
            f"{profile.where('pressure')}: pressure does not increase from {p[k]:g} to "
            f"{p[k + 1]:g} dbar at {_place(profile, int(index[k + 1]))}; profiles must increase "
            "downward — sort or drop the bad scans (upcast samples, repeated pressures)"
        )


def check_temperature(profile: Profile) -> None:
    """Temperature in degC, in the range of sea water."""
    t = profile.temperature
    finite = np.isfinite(t)
    units = profile.units.get("temperature", "degC")
    median = float(np.median(t[finite]))
    if KELVIN_BAND[0] <= median <= KELVIN_BAND[1]:
        raise SectionDataError(
            f"{profile.where('temperature')}: values {np.min(t[finite]):g} .. "
            f"{np.max(t[finite]):g} (labelled {units!r}) look like kelvin; label the units 'K' "
            "(sectionkit converts) or convert to degC"
        )
    low, high = TEMPERATURE_RANGE
    bad = finite & ((t < low) | (t > high))
    if bad.any():
        k = _first(bad)
        hint = (
            " — the values were labelled kelvin but look like degC; fix the units attribute"
            if units.strip().lower() in {"k", "kelvin"} and t[k] < -200
            else "; a missing-value marker (declare it as _FillValue) or wrong units?"
        )
        raise SectionDataError(
            f"{profile.where('temperature')}: temperature {t[k]:g} degC at {_at(profile, k)} is "
            f"outside the range of sea water ({low:g} .. {high:g} degC){hint}"
        )


def check_salinity(profile: Profile, cautions: Cautions) -> None:
    """Salinity values that can be salinity (not conductivity, not markers)."""
    s, p = profile.salinity, profile.pressure
    finite = np.isfinite(s)
    if np.any(s[finite] > MAX_SALINITY):
        k = _first(finite & (s > MAX_SALINITY))
        raise SectionDataError(
            f"{profile.where('salinity')}: value {s[k]:g} at {_at(profile, k)} cannot be "
            f"salinity (no sea exceeds {MAX_SALINITY:g}); conductivity in mS/cm or a "
            "missing-value marker? convert conductivity with gsw.SP_from_C, declare markers "
            "as _FillValue"
        )
    if np.any(s[finite] < 0):
        k = _first(finite & (s < 0))
        raise SectionDataError(
            f"{profile.where('salinity')}: value {s[k]:g} at {_at(profile, k)} is negative; a "
            "missing-value marker? declare it as _FillValue"
        )
    deep = finite & np.isfinite(p) & (p > DEEP_PRESSURE) & (s < DEEP_MIN_SALINITY)
    if deep.any():
        k = _first(deep)
        raise SectionDataError(
            f"{profile.where('salinity')}: value {s[k]:g} at {_at(profile, k)} cannot be "
            f"salinity (no sea is fresher than {DEEP_MIN_SALINITY:g} below "
            f"{DEEP_PRESSURE:g} dbar); conductivity in S/m, or a mass fraction? convert to "
            "Practical Salinity (PSS-78) or Absolute Salinity in g/kg"
        )
    if np.max(s[finite]) < BRACKISH:
        cautions.add(
            "salinity-low",
            f"{profile.where('salinity')}: every value is below {BRACKISH:g} "
            f"({np.min(s[finite]):g} .. {np.max(s[finite]):g}); brackish water, or conductivity "
            "in S/m? check the variable",
            file=profile.file,
            station=profile.station,
            variable=profile.names.get("salinity"),
        )


def check_incomplete(profile: Profile, cautions: Cautions) -> None:
    """Caution for samples that have only some of pressure, salinity and temperature."""
    # levels with pressure but neither salinity nor temperature are just
    # below the end of a cast in a shared-pressure file: not incomplete
    measured = np.isfinite(profile.salinity) | np.isfinite(profile.temperature)
    partial = int(np.count_nonzero(measured & ~profile.complete()))
    if partial:
        cautions.add(
            "incomplete-samples",
            f"{profile.where()}: {partial} sample(s) lack pressure, salinity or temperature and "
            "were left out before gridding",
            file=profile.file,
            station=profile.station,
        )


def check_profile(profile: Profile, cautions: Cautions) -> None:
    """Every per-station check, in the order that gives the clearest message.

    Parameters
    ----------
    profile : Profile
        One station as read (dbar, degC).
    cautions : Cautions
        Collects non-fatal findings.
    """
    check_position(profile)
    check_finite(profile)
    check_present(profile)
    check_not_zero(profile)
    check_pressure(profile)
    check_temperature(profile)
    check_salinity(profile, cautions)
    check_incomplete(profile, cautions)


# ---------------------------------------------------------------------------
# Bottom
# ---------------------------------------------------------------------------


def resolve_bottom(
    profile: Profile, tolerance: float, cautions: Cautions
) -> tuple[float, float, float]:
    """The station's bottom pressure and depth, checked against its deepest sample.

    Parameters
    ----------
    profile : Profile
        One checked station.
    tolerance : float
        How far the stated bottom may lie above the deepest sample, m.
    cautions : Cautions
        Collects short casts and bottoms moved down to the deepest sample.

    Returns
    -------
    bottom_pressure : float
        Sea-floor pressure, dbar (the deepest sample when no depth is given).
    bottom_depth : float
        Sea-floor depth, m, positive down.
    deepest : float
        Pressure of the deepest complete sample, dbar.
    """
    deepest = float(profile.pressure[profile.complete()][-1])
    deepest_depth = float(depth_from_pressure(deepest, profile.lat))
    depth = profile.bottom_depth
    if not np.isfinite(depth):
        return deepest, deepest_depth, deepest
    if depth < 0 or depth > MAX_BOTTOM_DEPTH:
        raise SectionDataError(
            f"{profile.where('bottom_depth')}: bottom depth {depth:g} m is outside 0 .. "
            f"{MAX_BOTTOM_DEPTH:g} m; depth is positive down, in metres — fix the value or "
            "leave it missing"
        )
    above = deepest_depth - depth
    if above > tolerance:
        raise SectionDataError(
            f"{profile.where('bottom_depth')}: bottom depth {depth:g} m is {above:.1f} m "
            f"shallower than the deepest sample ({deepest:g} dbar = {deepest_depth:.1f} m); "
            f"more than {tolerance:g} m is not sounding error — fix the bottom depth or the "
            "pressure"
        )
    if above > 0:
        cautions.add(
            "bottom-moved",
            f"{profile.where('bottom_depth')}: bottom depth {depth:g} m is {above:.1f} m above "
            f"the deepest sample; the bottom is taken at the deepest sample ({deepest:g} dbar)",
            file=profile.file,
            station=profile.station,
        )
        return deepest, deepest_depth, deepest
    if -above > SHORT_CAST:
        cautions.add(
            "short-cast",
            f"{profile.where()}: the deepest sample ({deepest:g} dbar, {deepest_depth:.0f} m) is "
            f"{-above:.0f} m above the stated bottom ({depth:.0f} m); properties are extended "
            "unchanged over that depth, so near-bottom transports rest on that assumption",
            file=profile.file,
            station=profile.station,
        )
    return float(pressure_from_depth(depth, profile.lat)), float(depth), deepest


# ---------------------------------------------------------------------------
# Section checks
# ---------------------------------------------------------------------------


def _label(raw: RawSection, i: int) -> str:
    p = raw.profiles[i]
    return f"{p.station} ({p.file})"


def check_stations(raw: RawSection) -> None:
    """At least two stations, each id once."""
    n = len(raw.profiles)
    if n < 2:
        raise SectionDataError(
            f"{raw.name} ({', '.join(raw.sources)}): {n} station(s) found; a section needs at "
            "least two stations to form a pair"
        )
    counts = Counter(raw.stations)
    repeated = [s for s, c in counts.items() if c > 1]
    if repeated:
        s = repeated[0]
        files = sorted({p.file for p in raw.profiles if p.station == s})
        raise SectionDataError(
            f"station {s} appears {counts[s]} times (files {', '.join(files)}); give every "
            "cast its own station id"
        )


def check_same_positions(raw: RawSection) -> None:
    """No two stations at the same position."""
    lon, lat = raw.lon, raw.lat
    d = haversine(lon[:, None], lat[:, None], lon[None, :], lat[None, :])
    d[np.tril_indices(len(lon))] = np.inf
    if np.any(d < SAME_POSITION):
        i, j = (int(v) for v in np.argwhere(d < SAME_POSITION)[0])
        raise SectionDataError(
            f"stations {_label(raw, i)} and {_label(raw, j)} are at the same position "
            f"(lat {lat[i]:g}, lon {lon[i]:g}; {d[i, j]:.1f} m apart); geostrophy needs distinct "
            "positions — average repeated casts into one station or drop one"
        )


def check_pair_latitudes(
    name: str,
    stations: list[str],
    lon: np.ndarray,
    lat: np.ndarray,
    allow_equator: bool,
    cautions: Cautions,
) -> None:
    """Refuse (or caution) pairs whose mid-point is within EQUATOR_BAND of the equator.

    Parameters
    ----------
    name : str
        Section name.
    stations : list of str
        Station ids, in order.
    lon, lat : ndarray (station,)
        Station positions, degrees_east and degrees_north.
    allow_equator : bool
        Keep such pairs with a caution instead of raising EquatorError.
    cautions : Cautions
        Collects the caution.
    """
    near, lat_m = equatorial_pairs(lon, lat)
    if near.size == 0:
        return

    def described(pairs):
        return [
            f"{name}:{k} (stations {stations[k]}-{stations[k + 1]}, mid-point "
            f"{abs(lat_m[k]):.2f} {'S' if lat_m[k] < 0 else 'N'})"
            for k in pairs
        ]

    names = described(near)
    on_equator, _ = equatorial_pairs(lon, lat, EQUATOR_HARD_BAND)
    if allow_equator and on_equator.size:
        raise EquatorError(
            f"pairs {', '.join(described(on_equator))} lie within {EQUATOR_HARD_BAND:g} "
            "degrees of the equator, where f is too small for geostrophy (v = dPsi / (f L)) "
            "or Ekman transport (tau / (rho f)) even with allow_equator = true; drop one "
            "station of each such pair"
        )
    text = (
        f"pairs {', '.join(names)} lie within {EQUATOR_BAND:g} degrees of the equator, where "
        "geostrophy (v = dPsi / (f L)) is not defined"
    )
    if not allow_equator:
        raise EquatorError(
            f"{text}; drop those stations, or set allow_equator = true under [reference] "
            "(allow_equator=True) to keep them"
        )
    cautions.add("equator", f"{text}; kept because allow_equator is set")


def check_equator(raw: RawSection, allow_equator: bool, cautions: Cautions) -> None:
    """:func:`check_pair_latitudes` for a section as read."""
    check_pair_latitudes(raw.name, raw.stations, raw.lon, raw.lat, allow_equator, cautions)


def check_spacing(raw: RawSection, cautions: Cautions) -> np.ndarray:
    """Caution for station gaps wider than GAP_FACTOR times the median spacing.

    Returns
    -------
    ndarray (pair,)
        Station spacing, m.
    """
    spacing = great_circle_distance(raw.lon, raw.lat)
    if spacing.size >= 2:
        median = float(np.median(spacing))
        ids = raw.stations
        for k in np.flatnonzero(spacing > GAP_FACTOR * median):
            cautions.add(
                "station-gap",
                f"pair {raw.name}:{k} (stations {ids[k]}-{ids[k + 1]}) is "
                f"{spacing[k] / 1e3:.1f} km wide, more than {GAP_FACTOR:g} times the median "
                f"spacing ({median / 1e3:.1f} km); transport there is poorly resolved",
                station=ids[k],
            )
    return spacing


def check_station_order(raw: RawSection, cautions: Cautions) -> None:
    """Caution for stations out of geographic order along the line (a zigzag).

    The line from station k to k + 1 and on to k + 2 turning back by more
    than TURN_BACK degrees means station k + 1 lies beyond its neighbours:
    pairs then overlap and their transports count the same water twice or
    with opposite signs.
    """
    t_east, t_north = along_line_direction(raw.lon, raw.lat)
    if t_east.size < 2:
        return
    turn = t_east[:-1] * t_east[1:] + t_north[:-1] * t_north[1:]
    back = np.flatnonzero(turn < np.cos(np.radians(TURN_BACK)))
    if back.size:
        ids = raw.stations
        names = ", ".join(f"{ids[k]}-{ids[k + 1]}-{ids[k + 2]}" for k in back)
        cautions.add(
            "station-order",
            f"section {raw.name}: the line turns back at stations {names} (by more than "
            f"{TURN_BACK:g} degrees); stations look out of geographic order, so pairs overlap "
            "and count water twice or with opposite signs — order the stations along the line",
            station=ids[int(back[0]) + 1],
        )


def check_not_surface_only(raw: RawSection, dp: float) -> None:
    """Refuse a grid step larger than the profiles, or stations sampled only at the surface.

    Parameters
    ----------
    raw : RawSection
        Checked profiles (dbar).
    dp : float
        Grid step, dbar.
    """
    deepest = np.array([float(p.pressure[p.complete()].max()) for p in raw.profiles])
    if np.all(deepest < dp):
        raise SectionDataError(
            f"{raw.name} ({', '.join(raw.sources)}): the grid step dp = {dp:g} dbar is larger "
            f"than the profiles (deepest sample {deepest.max():g} dbar), so every station has "
            "data only at the surface level; use a step of a few dbar (e.g. dp = 2.0)"
        )
    shallow = np.flatnonzero(deepest < dp)
    if shallow.size:
        profile = raw.profiles[int(shallow[0])]
        others = "" if shallow.size == 1 else (
            " (also stations " + ", ".join(raw.stations[k] for k in shallow[1:]) + ")")
        raise SectionDataError(
            f"{profile.where()}: its deepest sample is at {deepest[shallow[0]]:g} dbar, so on "
            f"the {dp:g} dbar grid it has data only at the surface{others}; geostrophic shear "
            "needs a profile — drop the station or supply its data"
        )


def check_gridded_levels(ds, file: str | None = None) -> None:
    """Refuse stations or pairs of a gridded section with data only at the surface level.

    Parameters
    ----------
    ds : xarray.Dataset
        Canonical gridded section (SA, CT on station x pressure).
    file : str, optional
        Its source, for messages.
    """
    sa = np.ascontiguousarray(core_last(ds.variables["SA"], "station", "pressure"), dtype=float)
    ct = np.ascontiguousarray(core_last(ds.variables["CT"], "station", "pressure"), dtype=float)
    sa = sa.reshape(-1, *sa.shape[-2:])
    ct = ct.reshape(sa.shape)
    levels = np.empty(sa.shape[:-1], dtype=np.int64)
    common = np.empty((sa.shape[0], sa.shape[1] - 1), dtype=np.int64)
    _finite_level_counts(sa, ct, levels, common)
    levels = levels.min(axis=0)  # the fewest over any leading dimensions
    common = common.min(axis=0)
    name = ds.attrs.get("section", "section")
    source = f" ({file})" if file else ""
    if np.any(levels < 2) or np.any(common < 2):
        stations = [str(s) for s in ds["station"].values]
    if np.any(levels < 2):
        k = int(np.flatnonzero(levels < 2)[0])
        raise SectionDataError(
            f"station {stations[k]} of section {name}{source}: has data at "
            f"{int(levels[k])} grid level(s) only; geostrophic shear needs a profile — drop "
            "the station or use a smaller grid step dp"
        )
    if np.any(common < 2):
        k = int(np.flatnonzero(common < 2)[0])
        raise SectionDataError(
            f"pair {name}:{k} (stations {stations[k]}-{stations[k + 1]}){source}: its deepest "
            "common level is the surface, so there is no shear to reference; drop one of the "
            "stations or check their profiles"
        )


@kernel
def _finite_level_counts(sa, ct, levels, common):
    """Levels where both SA and CT are finite: per station, and common to each pair.

    Each value is read once: the mask of the previous station is kept for its pair.
    """
    n_lead, n_st, n_lev = sa.shape
    previous = np.zeros(n_lev, dtype=np.bool_)
    current = np.zeros(n_lev, dtype=np.bool_)
    for r in range(n_lead):
        for j in range(n_st):
            n = 0
            both = 0
            for k in range(n_lev):
                ok = np.isfinite(sa[r, j, k]) and np.isfinite(ct[r, j, k])
                current[k] = ok
                n += ok
                both += ok and previous[k]
            levels[r, j] = n
            if j > 0:
                common[r, j - 1] = both
            previous, current = current, previous


def inversion_cautions(
    raw: RawSection, inversions: list[Inversion], span: float, threshold: float, cautions: Cautions
) -> None:
    """Turn found density inversions into cautions naming station and pressure."""
    for inv in inversions:
        profile = raw.profiles[inv.station_index]
        cautions.add(
            "density-inversion",
            f"{profile.where()}: density inversion of {inv.excess:.3f} kg/m3 between "
            f"{inv.p_top:g} and {inv.p_bottom:g} dbar (parcels {span:g} dbar apart compared at "
            f"their mid pressure; threshold {threshold:g} kg/m3); check for spikes or "
            "salinity-temperature sensor lag",
            file=profile.file,
            station=profile.station,
        )


def validate_section(raw: RawSection, *, allow_equator: bool = False) -> Cautions:
    """Check a section as read; raise on what cannot be used, collect cautions.

    Parameters
    ----------
    raw : RawSection
        The profiles as read (dbar, degC), stations numbered.
    allow_equator : bool
        Keep pairs near the equator (with a caution) instead of refusing them.

    Returns
    -------
    Cautions
        Findings of the reading and of these checks.
    """
    cautions = Cautions()
    cautions.extend(raw.cautions)
    check_stations(raw)
    for profile in raw.profiles:
        check_profile(profile, cautions)
    check_same_positions(raw)
    check_equator(raw, allow_equator, cautions)
    check_spacing(raw, cautions)
    check_station_order(raw, cautions)
    return cautions
