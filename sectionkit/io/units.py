"""Unit labels found in section files, and the conversions sectionkit applies."""

from __future__ import annotations

import numpy as np

from sectionkit.errors import SectionDataError

# factor to dbar
_PRESSURE = {
    "dbar": 1.0,
    "dbars": 1.0,
    "decibar": 1.0,
    "decibars": 1.0,
    "db": 1.0,
    "pa": 1.0e-4,
    "pascal": 1.0e-4,
    "pascals": 1.0e-4,
    "hpa": 1.0e-2,
    "mbar": 1.0e-2,
    "millibar": 1.0e-2,
    "kpa": 0.1,
    "bar": 10.0,
    "bars": 10.0,
    "mpa": 100.0,
}
_CELSIUS = {
    "degc",
    "deg_c",
    "deg c",
    "degree_c",
    "degrees_c",
    "degree c",
    "degrees c",
    "celsius",
    "degree_celsius",
    "degrees_celsius",
    "degree celsius",
    "degrees celsius",
    "c",
    "°c",
    "deg.c",
}
_KELVIN = {"k", "kelvin", "degk", "deg_k", "degree_kelvin", "degrees_kelvin", "kelvins"}
_PRACTICAL = {
    "",
    "1",
    "psu",
    "pss-78",
    "pss78",
    "pss",
    "0.001",
    "1e-3",
    "dimensionless",
    "unitless",
    "none",
    "ppt",
    "‰",
    "practical salinity unit",
}
_ABSOLUTE = {"g/kg", "g kg-1", "g kg^-1", "g kg**-1", "g.kg-1", "gram/kilogram"}
_CONDUCTIVITY = {"s/m", "s m-1", "ms/cm", "ms cm-1", "ms/m", "us/cm", "siemens/meter"}
# factor to m
_LENGTH = {"m": 1.0, "meter": 1.0, "meters": 1.0, "metre": 1.0, "metres": 1.0, "km": 1000.0}


def _key(units: str | None) -> str:
    return " ".join(str(units if units is not None else "").strip().lower().split())


def pressure_to_dbar(values: np.ndarray, units: str | None, where: str) -> np.ndarray:
    """Convert pressure to dbar from its labelled units.

    Parameters
    ----------
    values : ndarray
        Pressure in the labelled units.
    units : str or None
        The units label (dbar, decibar, Pa, hPa, kPa, bar, MPa).
    where : str
        Location text for the error message.

    Returns
    -------
    ndarray
        Sea pressure, dbar.
    """
    key = _key(units)
    if key not in _PRESSURE:
        raise SectionDataError(
            f"{where}: pressure units {units!r} are not understood; "
            "label pressure in dbar (or Pa, hPa, kPa, bar)"
        )
    return np.asarray(values, dtype=float) * _PRESSURE[key]


def temperature_to_celsius(values: np.ndarray, units: str | None, where: str) -> np.ndarray:
    """Convert temperature to degC from its labelled units (degC or K).

    Parameters
    ----------
    values : ndarray
        Temperature in the labelled units.
    units : str or None
        The units label.
    where : str
        Location text for the error message.

    Returns
    -------
    ndarray
        Temperature, degC.
    """
    key = _key(units)
    if key in _CELSIUS:
        return np.asarray(values, dtype=float)
    if key in _KELVIN:
        return np.asarray(values, dtype=float) - 273.15
    raise SectionDataError(
        f"{where}: temperature units {units!r} are not understood; label temperature degC or K"
    )


def check_salinity_units(units: str | None, where: str) -> None:
    """Refuse units that salinity cannot have (conductivity, unknown labels).

    Parameters
    ----------
    units : str or None
        The units label of the salinity variable (1, PSU, g/kg, ...).
    where : str
        Location text for the error message.
    """
    key = _key(units)
    if key in _CONDUCTIVITY:
        raise SectionDataError(
            f"{where}: units {units!r} are conductivity units, not salinity; convert "
            "conductivity to Practical Salinity first (e.g. gsw.SP_from_C)"
        )
    if key not in _PRACTICAL and key not in _ABSOLUTE:
        raise SectionDataError(
            f"{where}: salinity units {units!r} are not understood; label practical salinity "
            "'1' (or PSU) and Absolute Salinity 'g/kg'"
        )


def length_to_m(values: np.ndarray, units: str | None, where: str) -> np.ndarray:
    """Convert a depth to metres from its labelled units.

    Parameters
    ----------
    values : ndarray
        Depth in the labelled units.
    units : str or None
        The units label (m, km).
    where : str
        Location text for the error message.

    Returns
    -------
    ndarray
        Depth, m.
    """
    key = _key(units)
    if key not in _LENGTH:
        raise SectionDataError(
            f"{where}: depth units {units!r} are not understood; label bottom depth in m"
        )
    return np.asarray(values, dtype=float) * _LENGTH[key]


def is_pressure_units(units: str | None) -> bool:
    """Whether a units label is a pressure unit sectionkit converts."""
    return _key(units) in _PRESSURE


def is_pascal(units: str | None) -> bool:
    """Whether a pressure units label is pascal."""
    return _key(units) in {"pa", "pascal", "pascals"}
