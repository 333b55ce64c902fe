"""Measured profiles as read from files, before validation and gridding."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from sectionkit.errors import Cautions, where


@dataclass
class Profile:
    """One station's measured profile, in dbar and degC, exactly as sampled.

    Parameters
    ----------
    station : str or None
        Station id (from ``cf_role = profile_id`` or the CSV station column);
        None until the section numbers it by position.
    file : str
        The file the profile was read from.
    lat : float
        Latitude, degrees_north.
    lon : float
        Longitude, degrees_east.
    pressure : ndarray (sample,)
        Sea pressure, dbar; NaN where missing.
    salinity : ndarray (sample,)
        Practical Salinity (PSS-78) or Absolute Salinity (g/kg), per
        ``salinity_kind``; NaN where missing.
    temperature : ndarray (sample,)
        Temperature, degC (ITS-90), of kind ``temperature_kind``; NaN where missing.
    bottom_depth : float
        Depth of the sea floor, m, positive down; NaN when not given.
    salinity_kind : {"practical", "absolute"}
        What ``salinity`` is.
    temperature_kind : {"in-situ", "potential", "conservative"}
        What ``temperature`` is.
    names : dict
        Quantity (``"pressure"``, ``"salinity"``, ...) to the variable or
        column name it was read from, for messages.
    units : dict
        Quantity to the units as labelled in the file (before conversion).
    lines : ndarray (sample,), optional
        The file's own line number of each sample (text files), for messages.
    flag_counts : dict
        Exchange files: variable (CTDTMP, ...) to the number of samples per
        WOCE flag, as read (before dropping); empty for other files.
    cast : str
        Exchange files: the CASTNO header; empty for other files.
    """

    station: str | None
    file: str
    lat: float
    lon: float
    pressure: np.ndarray
    salinity: np.ndarray
    temperature: np.ndarray
    bottom_depth: float = float("nan")
    salinity_kind: str = "practical"
    temperature_kind: str = "in-situ"
    names: dict[str, str] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    lines: np.ndarray | None = None
    flag_counts: dict[str, dict[int, int]] = field(default_factory=dict)
    cast: str = ""

    def where(self, quantity: str | None = None) -> str:
        """Location text for messages, e.g. ``station 7 (file north.nc), variable TEMP``."""
        variable = None
        if quantity is not None:
            variable = self.names.get(quantity, quantity)
            if variable != quantity:
                variable = f"{variable} ({quantity})"
        return where(self.file, self.station, variable)

    def complete(self) -> np.ndarray:
        """Mask of the samples whose pressure, salinity and temperature are all finite."""
        return (
            np.isfinite(self.pressure) & np.isfinite(self.salinity) & np.isfinite(self.temperature)
        )


@dataclass
class RawSection:
    """The profiles of one section, in station order, and what reading them found."""

    name: str
    sources: list[str]
    profiles: list[Profile]
    cautions: Cautions = field(default_factory=Cautions)

    @property
    def stations(self) -> list[str]:
        """Station ids in order."""
        return [str(p.station) for p in self.profiles]

    @property
    def lat(self) -> np.ndarray:
        """Station latitudes, degrees_north."""
        return np.array([p.lat for p in self.profiles], dtype=float)

    @property
    def lon(self) -> np.ndarray:
        """Station longitudes, degrees_east."""
        return np.array([p.lon for p in self.profiles], dtype=float)

    def number_stations(self) -> None:
        """Give stations without an id their 1-based position as id."""
        for i, profile in enumerate(self.profiles):
            if profile.station is None or str(profile.station).strip() == "":
                profile.station = str(i + 1)
