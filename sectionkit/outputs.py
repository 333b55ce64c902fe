"""The registry of reported numbers: name, dimensions, units and how they are shown.

One entry per output a study reports. ``results.nc`` (:mod:`sectionkit.dataset`)
names its variables and writes their ``units`` from here; the CSV and paper
tables take their display units from here. Two spellings of every unit:

- ``units``: a CF / UDUNITS string that unit libraries read (``1e6 m3 s-1``,
  ``1e15 W``). Never ``Sv``: to UDUNITS, cf_units and pint that is the
  sievert, a radiation dose.
- ``display``: the trade's name for the same unit in labels and tables
  (``Sv``, ``PW``; 1 Sv = 10^6 m^3 s^-1, 1 PW = 10^15 W, common practice).

The numbers themselves are the same in both spellings (a value of 2.5 is
2.5 Sv and 2.5 x 10^6 m^3 s^-1). Column-by-column meanings of the output
files are in docs/outputs.md.
"""

from __future__ import annotations

from dataclasses import dataclass

#: Display unit -> the CF / UDUNITS spelling of the same unit.
UDUNITS: dict[str, str] = {
    "Sv": "1e6 m3 s-1",
    "Sv g/kg": "1e6 m3 s-1 g kg-1",
    "PW": "1e15 W",
    "m s-1": "m s-1",
    "m/s": "m s-1",
    "dbar": "dbar",
    "km": "km",
    "km2": "km2",
    "kg m-3": "kg m-3",
    "kmol s-1": "kmol s-1",
    "kmol/s": "kmol s-1",
    "1": "1",
}

#: SI value of one display unit (the scale from SI to the reported number).
SCALE: dict[str, float] = {"Sv": 1e6, "Sv g/kg": 1e6, "PW": 1e15, "m s-1": 1.0, "m/s": 1.0,
                           "dbar": 1.0, "km": 1e3, "km2": 1e6, "kg m-3": 1.0, "kmol s-1": 1e3,
                           "kmol/s": 1e3, "1": 1.0}


def udunits(display: str) -> str:
    """The CF / UDUNITS spelling of a display unit (``"Sv"`` -> ``"1e6 m3 s-1"``).

    Parameters
    ----------
    display : str
        A unit as labels and tables print it.

    Returns
    -------
    str
    """
    try:
        return UDUNITS[display]
    except KeyError:
        raise KeyError(f"no CF spelling registered for the unit {display!r}") from None


@dataclass(frozen=True)
class OutputSpec:
    """One reported number.

    Attributes
    ----------
    name : str
        Variable name in ``results.nc`` (``<name>_initial``, ``_adjusted``,
        ``_error``).
    dims : tuple of str
        Its dimensions (``section``, ``class``, ``interface``, ``level``, ...).
    display : str
        Unit in labels and tables (``Sv``, ``PW``).
    long_name : str
        What it is, in words.
    key : str
        Name of the output in a section's linear outputs (``budget.section_outputs``);
        ``{class}``, ``{n}`` and ``{k}`` stand for the class name, the interface
        index and the level index. Empty for the kernel outputs, which are named
        as in ``budget.section_values``.
    """

    name: str
    dims: tuple[str, ...]
    display: str
    long_name: str
    key: str = ""

    @property
    def units(self) -> str:
        """CF / UDUNITS units attribute."""
        return udunits(self.display)

    @property
    def scale(self) -> float:
        """SI value of one unit of the reported number."""
        return SCALE[self.display]

    def keys(self, classes: list[str], n_interface: int, n_level: int) -> list[str]:
        """Names of this output's values in a section's linear outputs, in dimension order.

        Parameters
        ----------
        classes : list of str
            Class names, light to dense.
        n_interface : int
            Number of class interfaces.
        n_level : int
            Number of pressure levels.
        """
        if "class" in self.dims:
            return [self.key.format(**{"class": c}) for c in classes]
        if "interface" in self.dims:
            return [self.key.format(n=n) for n in range(n_interface)]
        if "level" in self.dims:
            return [self.key.format(k=k) for k in range(n_level)]
        return [self.key]


SIGN = "positive to the left of increasing station order (the section's own frame)"

#: Every per-section output of a study, in the order results.nc holds them.
SECTION_OUTPUTS: tuple[OutputSpec, ...] = (
    OutputSpec("class_volume_transport", ("section", "class"), "Sv",
               "volume transport of the density class", "volume:{class}"),
    OutputSpec("class_mass_transport", ("section", "class"), "Sv",
               "mass transport of the density class divided by rho0 = 1025 kg m-3",
               "mass:{class}"),
    OutputSpec("class_salt_transport", ("section", "class"), "Sv g/kg",
               "salt transport of the density class (rho SA v / rho0)", "salt:{class}"),
    OutputSpec("class_heat_transport", ("section", "class"), "PW",
               "potential enthalpy transport of the density class (rho c_p0 CT v)",
               "heat:{class}"),
    OutputSpec("net_volume_transport", ("section",), "Sv", "net volume transport", "net"),
    OutputSpec("net_mass_transport", ("section",), "Sv",
               "net mass transport divided by rho0 = 1025 kg m-3", "net_mass"),
    OutputSpec("heat_transport", ("section",), "PW",
               "net potential enthalpy transport (a heat transport only where the net mass "
               "transport is ~0; otherwise a temperature transport relative to 0 degC)", "heat"),
    OutputSpec("freshwater_transport", ("section",), "Sv",
               "freshwater transport relative to the reference salinity", "freshwater"),
    OutputSpec("overturning_depth", ("section",), "Sv",
               "depth-space overturning: signed extreme of the volume transport accumulated "
               "from the surface, the net transport removed as a uniform velocity",
               "overturning"),
    OutputSpec("overturning_density", ("section",), "Sv",
               "density-space overturning: signed extreme of the volume transport accumulated "
               "from the lightest class, the net transport removed as a uniform velocity",
               "overturning_density"),
    OutputSpec("streamfunction_density", ("section", "interface"), "Sv",
               "volume transport of the classes lighter than each interface, the net "
               "transport removed as a uniform velocity", "psi_density:{n}"),
    OutputSpec("streamfunction_depth", ("section", "level"), "Sv",
               "volume transport accumulated from the surface through each level (down to "
               "level_end_pressure), the net transport removed as a uniform velocity",
               "psi_depth:{k}"),
)

#: Every output of the xarray layer's kernel (:func:`sectionkit.xr.budget_kernel`), one
#: section with any leading dimensions; ``key`` is the name in ``budget.section_values``.
KERNEL_OUTPUTS: tuple[OutputSpec, ...] = (
    OutputSpec("volume_transport", ("class",), "Sv", "volume transport by density class"),
    OutputSpec("mass_transport", ("class",), "Sv",
               "mass transport by density class divided by rho0 = 1025 kg m-3"),
    OutputSpec("salt_transport", ("class",), "Sv g/kg",
               "salt transport by density class (rho SA v / rho0)"),
    OutputSpec("heat_transport", ("class",), "PW",
               "potential enthalpy transport by density class (rho c_p0 CT v)"),
    OutputSpec("pair_volume_transport", ("pair", "class"), "Sv",
               "volume transport of each station pair by density class"),
    OutputSpec("net", (), "Sv", "net volume transport"),
    OutputSpec("net_mass", (), "Sv", "net mass transport divided by rho0"),
    OutputSpec("heat", (), "PW",
               "net potential enthalpy transport (a heat transport only when net_mass is ~0)"),
    OutputSpec("freshwater", (), "Sv", "freshwater transport relative to the reference salinity"),
    OutputSpec("overturning", (), "Sv",
               "depth-space overturning: signed extremum of the cumulative transport from the "
               "surface, net transport removed as a uniform velocity"),
    OutputSpec("overturning_pressure", (), "dbar",
               "pressure where the integral of the depth-space overturning ends"),
    OutputSpec("overturning_density", (), "Sv",
               "density-space overturning: signed extremum of the cumulative class transport "
               "from the light side, net transport removed as a uniform velocity"),
    OutputSpec("psi_depth", ("pressure",), "Sv",
               "cumulative volume transport from the surface through each level (ending half "
               "way to the next level), net transport removed as a uniform velocity"),
    OutputSpec("psi_density", ("interface",), "Sv",
               "cumulative volume transport of the classes lighter than each interface, net "
               "transport removed as a uniform velocity"),
    OutputSpec("reference_pressure", ("pair",), "dbar", "reference pressure actually used"),
)


#: Outputs by name.
REGISTRY: dict[str, OutputSpec] = {spec.name: spec for spec in SECTION_OUTPUTS}
