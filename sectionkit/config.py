"""Configuration: the TOML contract of DESIGN.md §6, loaded, validated and saved.

Every number a study reports must be reproducible from its saved
configuration, so the configuration holds every choice: grid, sections,
boxes, references and overrides, Ekman stress, density classes and the
inverse's priors. Unknown keys are errors naming the key and the closest
valid one.

Every key, with its type, unit, default and an example, is in the user guide:
docs/configuration.md. The keys the parser accepts are :data:`KEYS` (a test
checks that the guide lists each of them); old names still read are
:data:`ALIASES`.
"""

from __future__ import annotations

import difflib
import json
import sys
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import tomli_w

from sectionkit.atomic import write_text_atomic
from sectionkit.errors import ConfigError, InputFileError, SectionkitError
from sectionkit.geostrophy import TRIANGLE_RULES, ReferenceChoice
from sectionkit.io.bottle import tracer_name
from sectionkit.io.units import pressure_to_dbar, temperature_to_celsius
from sectionkit.labels import parse_pair_label, split_pair_label
from sectionkit.layers import Interface, check_interfaces
from sectionkit.solvers import SOLVERS
from sectionkit.thermo import SALINITY_KINDS, TEMPERATURE_KINDS

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

SOLVER_NAMES = tuple(SOLVERS)  # the solvers' registry names (sectionkit.solvers)
#: How each solver is named in figures, tables and the workbench.
SOLVER_DISPLAY = {"gauss-markov": "Gauss–Markov", "svd": "truncated SVD",
                  "bounded": "bounded least squares"}
CONSTRAINT_KINDS = ("mass", "salt", "heat")
EKMAN_DEPTH_RANGE = (1.0, 500.0)  # m: the Ekman layer is tens of metres (common practice)

# The TOML schema of DESIGN.md §6, in one place: table -> key -> expected TOML type.
# A type is "boolean", "number", "integer", "string", "table", "list", "list of <type>s"
# or "table of <type>s" (a table whose own keys are free, e.g. section names), and
# alternatives are joined by " or ". The contents of a key typed "table" or "list of
# tables" are checked against the entry "<table>.<key>" when there is one (an element
# of [[sections]] against "sections"). Adding a key is one line here plus its parsing.
SCHEMA: dict[str, dict[str, str]] = {
    "": {"title": "string", "grid": "table", "sections": "list of tables",
         "boxes": "list of tables", "reference": "table", "ekman": "table", "classes": "table",
         "budget": "table", "tracers": "table", "adcp": "table", "inverse": "table"},
    "grid": {"dp": "number"},
    "sections": {"name": "string", "file": "string or list of strings", "into_box": "boolean",
                 "columns": "table of strings", "bathymetry": "string",
                 "variables": "table of strings", "temperature_kind": "string",
                 "salinity_kind": "string", "pressure_units": "string",
                 "temperature_units": "string", "bottle": "string",
                 "stations": "list of strings or list of integers", "adcp": "string"},
    "boxes": {"name": "string", "enters": "list of strings", "leaves": "list of strings"},
    "reference": {"pressure": "number or string", "isopycnal": "table", "velocity": "table",
                  "bottom_triangle": "string", "overrides": "table",
                  "allow_equator": "boolean"},
    "reference.isopycnal": {"sigma": "number", "p_ref": "number"},
    "reference.velocity": {"velocity": "number", "pressure": "number", "error": "number"},
    "ekman": {"depth": "number", "stress": "table of lists"},
    "classes": {"interfaces": "list of tables", "names": "list of strings"},
    "classes.interfaces": {"sigma": "number", "p_ref": "number"},
    "budget": {"reference_salinity": "number"},
    "tracers": {"transport": "list of strings"},
    "adcp": {"pressure_range": "list of numbers", "use": "string", "error": "number"},
    "inverse": {"solver": "string", "rank": "integer", "conserve": "list of strings",
                "prior_velocity": "number", "prior_diapycnal": "number",
                "prior_ekman": "number", "noise_total": "number",
                "noise_class": "list of numbers", "noise_salt": "list of numbers",
                "noise_heat": "list of numbers", "known": "list of tables",
                "section_net": "list of tables", "bounds": "table of lists",
                "salinity": "string", "prior_correlation_km": "number",
                "noise_tracer": "table of lists"},
    "inverse.known": {"name": "string", "transport": "number", "noise": "number",
                      "class": "string", "box": "string"},
    "inverse.section_net": {"section": "string", "transport": "number", "noise": "number"},
}
# Table names that mean the same table ("old or new name" -> schema entry).
TABLE_ALIASES: dict[str, str] = {}
# Every key the parser accepts, by table (the user guide, docs/configuration.md, documents
# each one); old names accepted for a key are in ALIASES.
KEYS: dict[str, tuple[str, ...]] = {table: tuple(keys) for table, keys in SCHEMA.items()}
# old key name -> current name, per table (both accepted; the current one is written)
ALIASES: dict[str, dict[str, str]] = {
    "": {"layers": "classes"},
    "inverse": {"noise_layer": "noise_class"},
    "inverse.known": {"layer": "class"},
}
DEEPEST_COMMON = "deepest_common"  # the reference at each pair's deepest common level
# Keys of the variables table of a section: the quantity whose variable is named
# (which of two sensors to use when several carry the same standard_name).
SECTION_VARIABLES = ("temperature", "salinity", "pressure", "latitude", "longitude",
                     "bottom_depth")

_TYPE_NAMES = {"boolean": "a boolean (true or false)", "number": "a number",
               "integer": "a whole number", "string": "a string", "table": "a table",
               "list": "a list"}


def did_you_mean(value: Any, choices: Any) -> str:
    """``"; did you mean 'x'?"`` for the closest of ``choices``, never the value itself."""
    text = str(value)
    options = [str(c) for c in choices if str(c) != text]
    close = difflib.get_close_matches(text, options, n=1)
    return f"; did you mean {close[0]!r}?" if close else ""


def _is(value: Any, kind: str) -> bool:
    """Whether a parsed TOML value is of one schema type (one alternative, no " or ")."""
    for outer, python in (("list of ", list), ("table of ", dict)):
        if kind.startswith(outer):
            if not isinstance(value, python):
                return False
            inner = kind[len(outer):].removesuffix("s")
            return all(_is(v, inner) for v in (value if python is list else value.values()))
    if kind == "boolean":
        return isinstance(value, bool)
    if kind == "number":
        return isinstance(value, int | float) and not isinstance(value, bool)
    if kind == "integer":
        return isinstance(value, int) and not isinstance(value, bool)
    if kind == "string":
        return isinstance(value, str)
    if kind == "table":
        return isinstance(value, dict)
    if kind == "list":
        return isinstance(value, list)
    raise ValueError(f"unknown schema type {kind!r}")  # a bug in SCHEMA, not in the input


def _expected(spec: str) -> str:
    parts = []
    for kind in spec.split(" or "):
        for outer in ("list of ", "table of "):
            if kind.startswith(outer):
                parts.append(f"a {kind}")
                break
        else:
            parts.append(_TYPE_NAMES[kind])
    return " or ".join(parts)


def describe_value(value: Any) -> str:
    """A parsed TOML value as a user would recognise it: ``the string "false"``."""
    if isinstance(value, bool):
        return f"the boolean {str(value).lower()}"
    if isinstance(value, int | float):
        return f"the number {value!r}"
    if isinstance(value, str):
        return f"the string {json.dumps(value, ensure_ascii=False)}"
    if isinstance(value, dict):
        return "a table" + (f" (keys {', '.join(map(str, list(value)[:4]))})" if value else "")
    if isinstance(value, list):
        text = repr(value)
        return f"the list {text if len(text) <= 40 else text[:37] + '...'}"
    return f"a {type(value).__name__} ({value!s})"


def _label(path: tuple[str, ...]) -> str:
    """Where a key is, as written in the file: ``[[sections]] #1 into_box``."""
    return " ".join(path) if path else "the configuration"


def _first_wrong(value: Any, spec: str) -> tuple[str, Any] | None:
    """The first element of a list or table that breaks a compound type (suffix, value)."""
    for kind in spec.split(" or "):
        for outer, python in (("list of ", list), ("table of ", dict)):
            if kind.startswith(outer) and isinstance(value, python):
                inner = kind[len(outer):].removesuffix("s")
                items = enumerate(value) if python is list else value.items()
                for k, v in items:
                    if not _is(v, inner):
                        return (f"[{k}]" if python is list else f" {k}"), v
    return None


def check_types(data: dict[str, Any], table: str = "", path: tuple[str, ...] = ()) -> None:
    """Check every key of a parsed TOML tree against :data:`SCHEMA`.

    Unknown keys and values of the wrong TOML type are a :class:`ConfigError`
    of one line naming the key, the expected type and what was found.

    Parameters
    ----------
    data : dict
        A parsed TOML table.
    table : str
        Its entry in :data:`SCHEMA` ("" for the whole file).
    path : tuple of str
        How the table is written in the file (for messages).
    """
    table = TABLE_ALIASES.get(table, table)
    schema = SCHEMA[table]
    aliases = ALIASES.get(table, {})  # old names are checked as what the user wrote
    _check_keys(data, tuple(schema) + tuple(aliases),
                _label(path) if path else "the configuration")
    for key, value in data.items():
        spec = schema[aliases.get(key, key)]
        where = path + (key,) if path else (key,)
        if not any(_is(value, kind) for kind in spec.split(" or ")):
            wrong = _first_wrong(value, spec)
            if wrong is not None:
                suffix, item = wrong
                inner = spec.split(" or ")[-1].split(" of ", 1)[1].removesuffix("s")
                raise ConfigError(f"{_label(where)}{suffix}: expected {_expected(inner)}, "
                                  f"found {describe_value(item)}")
            raise ConfigError(f"{_label(where)}: expected {_expected(spec)}, "
                              f"found {describe_value(value)}")
        name = aliases.get(key, key)
        child = f"{table}.{name}" if table else name
        child = TABLE_ALIASES.get(child, child)
        if child not in SCHEMA:
            continue
        if isinstance(value, dict):
            check_types(value, child, (f"[{key}]",) if not path else where)
        elif isinstance(value, list):
            for n, item in enumerate(value):
                label = (f"[[{key}]] #{n + 1}",) if not path else path + (f"{key} #{n + 1}",)
                check_types(item, child, label)


def _check_keys(table: dict, allowed: tuple[str, ...], where: str) -> None:
    for key in table:
        if key not in allowed:
            hint = did_you_mean(key, allowed) or f"; valid keys: {', '.join(allowed)}"
            raise ConfigError(f"unknown key {key!r} in {where}{hint}")


def _current_names(table: dict, schema: str, where: str) -> dict:
    """``table`` with old key names (:data:`ALIASES`) replaced by the current ones.

    Giving a key under both names is an error, so nothing is silently dropped.
    """
    aliases = ALIASES.get(schema, {})
    if not isinstance(table, dict) or not any(k in table for k in aliases):
        return table
    out = dict(table)
    for old, new in aliases.items():
        if old in out:
            if new in out:
                raise ConfigError(f"{where} gives both {new!r} and its old name {old!r}; "
                                  f"keep {new!r}")
            out[new] = out.pop(old)
    return out


def _with_current_names(data: dict) -> dict:
    """The parsed TOML tree with every old key name (:data:`ALIASES`) made current."""
    data = _current_names(data, "", "the configuration")
    inv = data.get("inverse")
    if isinstance(inv, dict):
        inv = _current_names(inv, "inverse", "[inverse]")
        known = inv.get("known")
        if isinstance(known, list):
            inv["known"] = [_current_names(kt, "inverse.known", f"[inverse] known #{n + 1}")
                            for n, kt in enumerate(known)]
        data["inverse"] = inv
    return data


def _number(value: Any, where: str, *, positive: bool = False, nonneg: bool = False) -> float:
    if value is None:
        raise ConfigError(f"{where} is missing: give a number")
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ConfigError(f"{where}: expected a number, found {describe_value(value)}")
    value = float(value)
    if value != value or value in (float("inf"), float("-inf")):
        raise ConfigError(f"{where} = {value!r} must be finite")
    if positive and value <= 0:
        raise ConfigError(f"{where} = {value:g} must be positive")
    if nonneg and value < 0:
        raise ConfigError(f"{where} = {value:g} must not be negative")
    return value


@dataclass
class SectionSpec:
    """One hydrographic line: its file(s) and whether positive flow enters the box."""

    name: str
    file: str | list[str]
    into_box: bool = True
    columns: dict[str, str] = field(default_factory=dict)
    bathymetry: str | None = None
    variables: dict[str, str] = field(default_factory=dict)  # quantity -> NetCDF variable
    temperature_kind: str = "in-situ"
    salinity_kind: str = "practical"
    pressure_units: str = "dbar"
    temperature_units: str = "degC"
    bottle: str | None = None  # WHP-Exchange bottle file (tracers)
    stations: list[str] | None = None  # station order and subset (by station id)
    adcp: str | None = None  # direct velocity profiles (LADCP / shipboard ADCP)

    def csv_options(self) -> dict[str, Any]:
        """The CSV layout options of this section, as keyword arguments of the readers."""
        return {"columns": self.columns or None, "temperature_kind": self.temperature_kind,
                "salinity_kind": self.salinity_kind, "pressure_units": self.pressure_units,
                "temperature_units": self.temperature_units}


ADCP_USES = ("prior", "known")


@dataclass
class AdcpSpec:
    """How direct velocity profiles reference the pairs (``[adcp]``).

    ``pressure_range`` (dbar) is the averaging range; ``use`` is ``"prior"``
    (prior mean and standard deviation of each pair's adjustment in the
    inverse) or ``"known"`` (a known reference velocity per pair);
    ``error`` (m s^-1) is the stated error of a range-mean direct velocity.
    """

    pressure_range: tuple[float, float] = (0.0, 0.0)
    use: str = "prior"
    error: float = 0.02


@dataclass
class BoxSpec:
    """A box bounded by sections; positive transport of ``enters`` enters it."""

    name: str
    enters: list[str] = field(default_factory=list)
    leaves: list[str] = field(default_factory=list)

    @property
    def sections(self) -> list[str]:
        """Every section bounding the box: those entering, then those leaving."""
        return self.enters + self.leaves

    def sign(self, section: str) -> float:
        """+1 for a section whose positive transport enters the box, -1 for one leaving it.

        Raises
        ------
        ConfigError
            The section does not bound this box.
        """
        if section in self.enters:
            return 1.0
        if section in self.leaves:
            return -1.0
        raise ConfigError(f"section {section!r} does not bound box {self.name!r} "
                          f"(sections: {', '.join(self.sections)})")


@dataclass
class KnownTransport:
    """A transport entering a box elsewhere (a strait), Sv, with its noise."""

    name: str
    transport: float
    noise: float
    layer: str
    box: str | None = None


@dataclass
class SectionNet:
    """A constraint on the net transport across one section (e.g. a closed basin), Sv."""

    section: str
    transport: float
    noise: float


@dataclass
class InverseSpec:
    """Settings of the box inverse (DESIGN.md §5)."""

    solver: str = "gauss-markov"
    rank: int = 0
    conserve: list[str] = field(default_factory=lambda: ["mass", "salt"])
    prior_velocity: float = 0.02
    prior_diapycnal: float = 1.0
    prior_ekman: float = 0.3
    noise_total: float = 0.5
    noise_layer: list[float] = field(default_factory=list)
    noise_salt: list[float] = field(default_factory=list)
    noise_heat: list[float] = field(default_factory=list)
    known: list[KnownTransport] = field(default_factory=list)
    section_net: list[SectionNet] = field(default_factory=list)
    bounds: dict[str, list[float]] = field(default_factory=dict)
    salinity: str = "preformed"
    prior_correlation_km: float = 0.0
    noise_tracer: dict[str, list[float]] = field(default_factory=dict)  # per tracer, per class


BUDGET_SALINITIES = ("preformed", "absolute")


@dataclass
class Config:
    """A whole study, as saved in TOML."""

    title: str = "sectionkit study"
    dp: float = 2.0
    sections: list[SectionSpec] = field(default_factory=list)
    boxes: list[BoxSpec] = field(default_factory=list)
    reference: ReferenceChoice = field(default_factory=lambda: ReferenceChoice("pressure", 3000.0))
    bottom_triangle: str = "constant"
    overrides: dict[str, ReferenceChoice] = field(default_factory=dict)
    allow_equator: bool = False
    ekman_depth: float = 50.0
    ekman_stress: dict[str, tuple[float, float]] = field(default_factory=dict)
    interfaces: list[Interface] = field(default_factory=list)
    layer_names: list[str] = field(default_factory=list)
    reference_salinity: float | None = None
    tracers: list[str] = field(default_factory=list)  # plain names of [tracers] transport
    adcp: AdcpSpec | None = None
    inverse: InverseSpec | None = None
    base_dir: Path = field(default_factory=Path.cwd)

    # ------------------------------------------------------------------ paths
    def section_paths(self, spec: SectionSpec) -> list[Path]:
        """Absolute paths of a section's file(s), relative ones taken from the config's folder."""
        files = [spec.file] if isinstance(spec.file, str) else list(spec.file)
        return [(self.base_dir / f) if not Path(f).is_absolute() else Path(f) for f in files]

    @property
    def salt_salinity(self) -> str:
        """Salinity of salt transports and budgets: ``[inverse] salinity`` or "preformed"."""
        return self.inverse.salinity if self.inverse is not None else "preformed"

    @property
    def class_names(self) -> list[str]:
        """Names of the density classes, lightest first (``[classes] names``)."""
        return self.layer_names

    def section_names(self) -> list[str]:
        """Names of the sections, in configuration order."""
        return [s.name for s in self.sections]

    def effective_boxes(self) -> list[BoxSpec]:
        """The boxes; without ``[[boxes]]`` one box holds every section by ``into_box``."""
        if self.boxes:
            return self.boxes
        return [
            BoxSpec(
                name="box",
                enters=[s.name for s in self.sections if s.into_box],
                leaves=[s.name for s in self.sections if not s.into_box],
            )
        ]

    def reference_for(self, label: str) -> ReferenceChoice:
        """The reference of pair ``"<section>:<k>"`` (override or global default)."""
        return self.overrides.get(label, self.reference)

    # ------------------------------------------------------------------ save
    def to_dict(self) -> dict[str, Any]:
        """The configuration as a TOML-ready dictionary (DESIGN.md §6 keys)."""
        out: dict[str, Any] = {"title": self.title, "grid": {"dp": self.dp}}
        sections = []
        for s in self.sections:
            d: dict[str, Any] = {"name": s.name, "file": s.file, "into_box": s.into_box}
            if s.columns:
                d["columns"] = dict(s.columns)
            if s.bathymetry:
                d["bathymetry"] = s.bathymetry
            if s.variables:
                d["variables"] = dict(s.variables)
            for key, default in (("temperature_kind", "in-situ"), ("salinity_kind", "practical"),
                                 ("pressure_units", "dbar"), ("temperature_units", "degC")):
                if getattr(s, key) != default:
                    d[key] = getattr(s, key)
            if s.bottle:
                d["bottle"] = s.bottle
            if s.stations is not None:
                d["stations"] = list(s.stations)
            if s.adcp:
                d["adcp"] = s.adcp
            sections.append(d)
        out["sections"] = sections
        if self.boxes:
            out["boxes"] = [asdict(b) for b in self.boxes]
        ref: dict[str, Any] = _reference_to_toml(self.reference, top=True)
        ref["bottom_triangle"] = self.bottom_triangle
        if self.overrides:
            ref["overrides"] = {k: _reference_to_toml(v) for k, v in self.overrides.items()}
        if self.allow_equator:
            ref["allow_equator"] = True
        out["reference"] = ref
        ek: dict[str, Any] = {"depth": self.ekman_depth}
        if self.ekman_stress:
            ek["stress"] = {k: [float(v[0]), float(v[1])] for k, v in self.ekman_stress.items()}
        out["ekman"] = ek
        layers: dict[str, Any] = {
            "interfaces": [{"sigma": i.sigma, "p_ref": i.p_ref} for i in self.interfaces]
        }
        if self.layer_names:
            layers["names"] = list(self.layer_names)
        out["classes"] = layers
        if self.reference_salinity is not None:
            out["budget"] = {"reference_salinity": self.reference_salinity}
        if self.tracers:
            out["tracers"] = {"transport": list(self.tracers)}
        if self.adcp is not None:
            out["adcp"] = {"pressure_range": list(self.adcp.pressure_range),
                           "use": self.adcp.use, "error": self.adcp.error}
        if self.inverse is not None:
            inv = asdict(self.inverse)
            inv["known"] = [
                {k: v for k, v in asdict(kt).items() if v is not None} for kt in self.inverse.known
            ]
            inv["known"] = [{("class" if k == "layer" else k): v for k, v in kt.items()}
                            for kt in inv["known"]]
            inv["noise_class"] = inv.pop("noise_layer")
            for key in ("noise_class", "noise_salt", "noise_heat", "bounds", "noise_tracer"):
                if not inv[key]:
                    del inv[key]
            if not inv["known"]:
                del inv["known"]
            if not inv["section_net"]:
                del inv["section_net"]
            out["inverse"] = inv
        return out

    def to_toml(self) -> str:
        """The configuration as TOML text."""
        return tomli_w.dumps(self.to_dict())

    def save(self, path: str | Path) -> Path:
        """Write the configuration atomically (temporary file, then rename).

        Parameters
        ----------
        path : str or Path
            Destination .toml file.
        """
        return write_text_atomic(path, self.to_toml())  # TOML is UTF-8 by definition


def _reference_to_toml(ref: ReferenceChoice, top: bool = False) -> Any:
    if ref.kind == "bottom":
        return {"pressure": DEEPEST_COMMON} if top else DEEPEST_COMMON
    if ref.kind == "pressure":
        return {"pressure": ref.pressure} if top else ref.pressure
    if ref.kind == "isopycnal":
        iso = {"sigma": ref.sigma, "p_ref": ref.sigma_p_ref}
        return {"isopycnal": iso} if top else iso
    vel = {"velocity": ref.velocity, "pressure": ref.pressure, "error": ref.velocity_error}
    return {"velocity": vel} if top else vel


def parse_reference(value: Any, where: str) -> ReferenceChoice:
    """A reference from its TOML form: number, ``"deepest_common"``, isopycnal or velocity table.

    ``"bottom"`` is the old name of ``"deepest_common"`` and still accepted.
    See docs/configuration.md, section ``[reference]``.
    """
    if isinstance(value, str):
        if value in (DEEPEST_COMMON, "bottom"):
            return ReferenceChoice("bottom")
        raise ConfigError(f'{where} = {value!r}: use a pressure in dbar, "{DEEPEST_COMMON}", '
                          "{ sigma = ..., p_ref = ... } or { velocity = ..., pressure = ... }")
    if isinstance(value, dict):
        if "sigma" in value:
            _check_keys(value, KEYS["reference.isopycnal"], where)
            return ReferenceChoice(
                "isopycnal",
                sigma=_number(value["sigma"], f"{where}.sigma"),
                sigma_p_ref=_number(value.get("p_ref", 0.0), f"{where}.p_ref", nonneg=True),
            )
        if "velocity" in value:
            _check_keys(value, KEYS["reference.velocity"], where)
            if "pressure" not in value:
                raise ConfigError(
                    f"{where}: a known velocity needs the pressure it was measured at"
                )
            return ReferenceChoice(
                "velocity",
                pressure=_number(value["pressure"], f"{where}.pressure", nonneg=True),
                velocity=_number(value["velocity"], f"{where}.velocity"),
                velocity_error=_number(value.get("error", 0.0), f"{where}.error", nonneg=True),
            )
        raise ConfigError(f"{where}: a table reference needs 'sigma' (isopycnal) or 'velocity'")
    return ReferenceChoice("pressure", pressure=_number(value, where, nonneg=True))


def parse_config(data: dict[str, Any], base_dir: Path | None = None) -> Config:
    """Build and validate a :class:`Config` from a TOML dictionary.

    The format (every key, type, unit, default) is documented in
    docs/configuration.md.

    Parameters
    ----------
    data : dict
        Parsed TOML.
    base_dir : Path, optional
        Folder that relative file names are taken from.
    """
    check_types(data)
    data = _with_current_names(data)
    cfg = Config(base_dir=Path(base_dir) if base_dir else Path.cwd())
    cfg.title = data.get("title", cfg.title)

    grid = data.get("grid", {})
    cfg.dp = _number(grid.get("dp", 2.0), "[grid] dp", positive=True)

    sections = data.get("sections", [])
    if not sections:
        raise ConfigError("the configuration has no [[sections]]; add at least one line")
    for n, sec in enumerate(sections):
        where = f"[[sections]] #{n + 1}"
        for key in ("name", "file"):
            if key not in sec:
                raise ConfigError(f"{where} is missing {key!r}")
        name = sec["name"]
        if ":" in name or not name:
            raise ConfigError(f"{where}: section name {name!r} must be non-empty without ':'")
        if name in cfg.section_names():
            raise ConfigError(f"{where}: section name {name!r} is used twice")
        if isinstance(sec["file"], list) and not sec["file"]:
            raise ConfigError(f"{where} ({name}): file = [] lists no files")
        variables = dict(sec.get("variables", {}))
        for key in variables:
            if key not in SECTION_VARIABLES:
                raise ConfigError(f"unknown key {key!r} in {where} variables"
                                  + (did_you_mean(key, SECTION_VARIABLES)
                                     or f"; valid keys: {', '.join(SECTION_VARIABLES)}"))
        cfg.sections.append(
            SectionSpec(
                name=name,
                file=sec["file"],
                into_box=sec.get("into_box", True),
                columns=dict(sec.get("columns", {})),
                bathymetry=sec.get("bathymetry"),
                variables=variables,
                **_csv_layout(sec, where),
                bottle=_optional_text(sec.get("bottle"), f"{where} bottle"),
                stations=_station_list(sec.get("stations"), f"{where} stations"),
                adcp=_optional_text(sec.get("adcp"), f"{where} adcp"),
            )
        )
    names = cfg.section_names()

    for n, box in enumerate(data.get("boxes", [])):
        where = f"[[boxes]] #{n + 1}"
        spec = BoxSpec(box.get("name", f"box{n + 1}"), list(box.get("enters", [])),
                       list(box.get("leaves", [])))
        if spec.name in [b.name for b in cfg.boxes]:
            raise ConfigError(f"{where}: box name {spec.name!r} is used twice; give each box "
                              "its own name")
        for s in spec.enters + spec.leaves:
            if s not in names:
                raise ConfigError(f"{where} ({spec.name}) names section {s!r}, which does not "
                                  f"exist (sections: {', '.join(names)}){did_you_mean(s, names)}")
        for side in ("enters", "leaves"):
            listed = getattr(spec, side)
            twice = sorted({s for s in listed if listed.count(s) > 1})
            if twice:
                raise ConfigError(f"{where} ({spec.name}) lists section {twice[0]!r} twice in "
                                  f"{side}; it would be counted twice")
        both = [s for s in spec.enters if s in spec.leaves]
        if both:
            raise ConfigError(f"{where} ({spec.name}) lists section {both[0]!r} in both enters "
                              "and leaves; a section bounds a box on one side only")
        if not spec.enters and not spec.leaves:
            raise ConfigError(f"{where} ({spec.name}) has no sections")
        cfg.boxes.append(spec)

    ref = data.get("reference", {})
    kinds = [k for k in ("pressure", "isopycnal", "velocity") if k in ref]
    if len(kinds) > 1:
        raise ConfigError(f"[reference] sets both {kinds[0]!r} and {kinds[1]!r}; choose one")
    if kinds:
        cfg.reference = parse_reference(ref[kinds[0]], f"[reference] {kinds[0]}")
    cfg.bottom_triangle = ref.get("bottom_triangle", "constant")
    if cfg.bottom_triangle not in TRIANGLE_RULES:
        raise ConfigError(f"[reference] bottom_triangle = {cfg.bottom_triangle!r} is not one of "
                          f"{', '.join(TRIANGLE_RULES)}"
                          + did_you_mean(cfg.bottom_triangle, TRIANGLE_RULES))
    for label, value in ref.get("overrides", {}).items():
        _check_pair_label(label, names, "[reference] overrides")
        cfg.overrides[label] = parse_reference(value, f"[reference] overrides {label!r}")
    cfg.allow_equator = ref.get("allow_equator", False)

    ek = data.get("ekman", {})
    cfg.ekman_depth = _number(ek.get("depth", 50.0), "[ekman] depth")
    lo, hi = EKMAN_DEPTH_RANGE
    if not lo <= cfg.ekman_depth <= hi:
        raise ConfigError(f"[ekman] depth = {cfg.ekman_depth:g} m is outside {lo:g}-{hi:g} m; "
                          "the Ekman layer is the top tens of metres (default 50)")
    for sec_name, stress in ek.get("stress", {}).items():
        if sec_name not in names:
            raise ConfigError(f"[ekman] stress names section {sec_name!r}, which does not exist"
                              + did_you_mean(sec_name, names))
        if len(stress) != 2:
            raise ConfigError(f"[ekman] stress {sec_name!r} must be [east, north] in N m^-2, "
                              f"found {describe_value(stress)}")
        cfg.ekman_stress[sec_name] = (
            _number(stress[0], f"[ekman] stress {sec_name}[0]"),
            _number(stress[1], f"[ekman] stress {sec_name}[1]"),
        )

    layers = data.get("classes", {})
    for n, face in enumerate(layers.get("interfaces", [])):
        cfg.interfaces.append(Interface(
            _number(face.get("sigma"), f"[classes] interface {n} sigma"),
            _number(face.get("p_ref", 0.0), f"[classes] interface {n} p_ref", nonneg=True),
        ))
    cfg.layer_names = check_interfaces(cfg.interfaces, layers.get("names"))

    budget = data.get("budget", {})
    if "reference_salinity" in budget:
        cfg.reference_salinity = _number(budget["reference_salinity"],
                                         "[budget] reference_salinity", positive=True)

    tracers = data.get("tracers", {})
    _check_keys(tracers, ("transport",), "[tracers]")
    transport = tracers.get("transport", [])
    if not isinstance(transport, list):
        raise ConfigError("[tracers] transport must be a list of tracer names, e.g. "
                          '["oxygen", "silicate"]')
    for name in transport:
        plain = tracer_name(name)
        if plain not in cfg.tracers:
            cfg.tracers.append(plain)
    if cfg.tracers and not any(s.bottle for s in cfg.sections):
        raise ConfigError("[tracers] transport names tracers but no [[sections]] has a bottle "
                          "file; add bottle = \"<file>\" to the sections that have one")

    if "adcp" in data or any(s.adcp for s in cfg.sections):
        cfg.adcp = _parse_adcp(data.get("adcp"))

    if "inverse" in data:
        cfg.inverse = _parse_inverse(data["inverse"], cfg)
    return cfg


def _csv_layout(sec: dict[str, Any], where: str) -> dict[str, Any]:
    """The CSV layout keys of one ``[[sections]]`` table (what the columns hold)."""
    out: dict[str, Any] = {}
    for key, allowed in (("temperature_kind", TEMPERATURE_KINDS),
                         ("salinity_kind", SALINITY_KINDS)):
        if key not in sec:
            continue
        value = sec[key]
        if value not in allowed:
            close = difflib.get_close_matches(str(value), allowed, n=1)
            raise ConfigError(f"{where}: {key} = {value!r} is not one of {', '.join(allowed)}"
                              + (f"; did you mean {close[0]!r}?" if close else ""))
        out[key] = value
    for key, convert in (("pressure_units", pressure_to_dbar),
                         ("temperature_units", temperature_to_celsius)):
        if key in sec:
            try:  # the readers' own unit tables decide what is understood
                convert(np.zeros(1), str(sec[key]), f"{where} {key}")
            except SectionkitError as exc:
                raise ConfigError(str(exc)) from None
            out[key] = str(sec[key])
    return out


def _parse_adcp(table: Any) -> AdcpSpec:
    if table is None:
        raise ConfigError("a section names an adcp file but there is no [adcp] table; add "
                          '[adcp] with pressure_range = [top, bottom] (dbar), use = "prior" or '
                          '"known", and error (m s^-1)')
    if not isinstance(table, dict):
        raise ConfigError("[adcp] must be a table")
    _check_keys(table, ("pressure_range", "use", "error"), "[adcp]")
    pr = table.get("pressure_range")
    if not isinstance(pr, list) or len(pr) != 2:
        raise ConfigError("[adcp] pressure_range must be [top, bottom] in dbar, e.g. "
                          "[500.0, 1500.0]")
    top = _number(pr[0], "[adcp] pressure_range[0]", nonneg=True)
    bottom = _number(pr[1], "[adcp] pressure_range[1]", nonneg=True)
    if bottom <= top:
        raise ConfigError(f"[adcp] pressure_range = [{top:g}, {bottom:g}]: the bottom must lie "
                          "deeper than the top")
    use = table.get("use", "prior")
    if use not in ADCP_USES:
        raise ConfigError(f"[adcp] use = {use!r} must be one of {', '.join(ADCP_USES)}")
    return AdcpSpec((top, bottom), str(use),
                    _number(table.get("error", 0.02), "[adcp] error", positive=True))


def _optional_text(value: Any, where: str) -> str | None:
    if value is None:
        return None
    if not isinstance(value, str) or not value:
        raise ConfigError(f"{where} = {value!r} must be a file name (text)")
    return value


def _station_list(value: Any, where: str) -> list[str] | None:
    if value is None:
        return None
    if not isinstance(value, list) or not value:
        raise ConfigError(f"{where} = {value!r} must be a list of station ids, e.g. "
                          '["1", "2", "3"] or [1, 2, 3]')
    out = []
    for item in value:
        if isinstance(item, bool) or not isinstance(item, str | int):
            raise ConfigError(f"{where}: {item!r} is not a station id (text or whole number)")
        out.append(str(item))
    return out


def _check_pair_label(label: str, names: list[str], where: str) -> None:
    sec, k = split_pair_label(label)
    idx = "" if k is None else str(k)
    if sec not in names or k is None:
        hint = did_you_mean(sec, names)
        if sec in names:
            hint = ""  # the section is right: the index is what is wrong
        elif hint and idx.isdigit():
            hint = hint.replace("?", "").removesuffix("'") + f":{idx}'?"
        raise ConfigError(f'{where}: {label!r} must be "<section>:<pair index>" with a known '
                          f"section ({', '.join(names)}) and a pair index 0, 1, 2, ...{hint}")


def check_pair_labels(config: Config, pairs: dict[str, int]) -> None:
    """Refuse overrides and bounds naming pairs the loaded sections do not have.

    Parameters
    ----------
    config : Config
        The configuration.
    pairs : dict of str -> int
        Number of station pairs of each loaded section.
    """
    labels = [("[reference] overrides", label) for label in config.overrides]
    if config.inverse is not None:
        labels += [("[inverse] bounds", label) for label in config.inverse.bounds]
    for where, label in labels:
        if split_pair_label(label)[0] in pairs:
            parse_pair_label(label, pairs, where)


def _parse_inverse(inv: dict[str, Any], cfg: Config) -> InverseSpec:
    spec = InverseSpec()
    spec.solver = inv.get("solver", spec.solver)
    if spec.solver not in SOLVER_NAMES:
        raise ConfigError(f"[inverse] solver = {spec.solver!r} is not one of "
                          f"{', '.join(SOLVER_NAMES)}" + did_you_mean(spec.solver, SOLVER_NAMES))
    rank = inv.get("rank", 0)
    if rank < 0:
        raise ConfigError(f"[inverse] rank = {rank!r} must be a whole number >= 0")
    spec.rank = rank
    spec.conserve = list(inv.get("conserve", spec.conserve))
    for n, c in enumerate(spec.conserve):
        if c not in CONSTRAINT_KINDS and _is_tracer(c):
            spec.conserve[n] = c = tracer_name(c)
            if c not in cfg.tracers:
                raise ConfigError(f"[inverse] conserve: tracer {c!r} must also be listed in "
                                  "[tracers] transport")
            continue
        if c not in CONSTRAINT_KINDS:
            raise ConfigError(f"[inverse] conserve: {c!r} is not one of "
                              f"{', '.join(CONSTRAINT_KINDS)}" + did_you_mean(c, CONSTRAINT_KINDS))
    twice = sorted({c for c in spec.conserve if spec.conserve.count(c) > 1})
    if twice:
        raise ConfigError(f"[inverse] conserve lists {twice[0]!r} twice")
    spec.prior_velocity = _number(inv.get("prior_velocity", spec.prior_velocity),
                                  "[inverse] prior_velocity", positive=True)
    spec.prior_diapycnal = _number(inv.get("prior_diapycnal", spec.prior_diapycnal),
                                   "[inverse] prior_diapycnal", nonneg=True)
    spec.prior_ekman = _number(inv.get("prior_ekman", spec.prior_ekman),
                               "[inverse] prior_ekman", nonneg=True)
    spec.noise_total = _number(inv.get("noise_total", spec.noise_total),
                               "[inverse] noise_total", positive=True)
    spec.salinity = inv.get("salinity", spec.salinity)
    if spec.salinity not in BUDGET_SALINITIES:
        close = difflib.get_close_matches(str(spec.salinity), BUDGET_SALINITIES, n=1)
        raise ConfigError(f"[inverse] salinity = {spec.salinity!r} is not one of "
                          f"{', '.join(BUDGET_SALINITIES)} (the salinity of the salt budgets)"
                          + (f"; did you mean {close[0]!r}?" if close else ""))
    spec.prior_correlation_km = _number(inv.get("prior_correlation_km", 0.0),
                                        "[inverse] prior_correlation_km", nonneg=True)
    n_class = len(cfg.layer_names)
    for key, attr in (("noise_class", "noise_layer"), ("noise_salt", "noise_salt"),
                      ("noise_heat", "noise_heat")):
        values = inv.get(key, [])
        if values and len(values) != n_class:
            raise ConfigError(f"[inverse] {key} has {len(values)} entries; give one per class "
                              f"({n_class}: {', '.join(cfg.layer_names)})")
        # noise_salt / noise_heat: 0 for a class keeps the automatic noise of that class
        setattr(spec, attr, [_number(v, f"[inverse] {key}[{i}]", positive=attr == "noise_layer",
                                     nonneg=attr != "noise_layer")
                             for i, v in enumerate(values)])
    if not spec.noise_layer:
        spec.noise_layer = [1.0] * n_class
    noise_tracer = inv.get("noise_tracer", {})
    if not isinstance(noise_tracer, dict):
        raise ConfigError("[inverse] noise_tracer must be a table, e.g. "
                          "{ silicate = [2.0, 1.0, 1.0] } (kmol s^-1 per class)")
    for name, values in noise_tracer.items():
        plain = tracer_name(name)
        if not isinstance(values, list) or len(values) != n_class:
            raise ConfigError(f"[inverse] noise_tracer {name!r}: give one noise per class "
                              f"({n_class}: {', '.join(cfg.layer_names)}), kmol s^-1")
        spec.noise_tracer[plain] = [_number(v, f"[inverse] noise_tracer {name}[{i}]",
                                            positive=True) for i, v in enumerate(values)]
    box_names = [b.name for b in cfg.effective_boxes()]
    for n, kt in enumerate(inv.get("known", [])):
        where = f"[inverse] known #{n + 1}"
        layer = kt.get("class", "")
        if layer not in cfg.layer_names:
            raise ConfigError(f"{where}: class {layer!r} does not exist (classes: "
                              f"{', '.join(cfg.layer_names)})"
                              + did_you_mean(layer, cfg.layer_names))
        box = kt.get("box")
        if box is None and len(box_names) > 1:
            raise ConfigError(f"{where}: name the box it enters (boxes: {', '.join(box_names)})")
        if box is not None and box not in box_names:
            raise ConfigError(f"{where}: box {box!r} does not exist (boxes: "
                              f"{', '.join(box_names)})" + did_you_mean(box, box_names))
        spec.known.append(KnownTransport(
            name=kt.get("name", f"known{n + 1}"),
            transport=_number(kt.get("transport"), f"{where} transport"),
            noise=_number(kt.get("noise"), f"{where} noise", positive=True),
            layer=layer,
            box=box if box is not None else box_names[0],
        ))
    for n, net in enumerate(inv.get("section_net", [])):
        where = f"[inverse] section_net #{n + 1}"
        name = net.get("section", "")
        if name not in cfg.section_names():
            raise ConfigError(f"{where}: section {name!r} does not exist"
                              + did_you_mean(name, cfg.section_names()))
        spec.section_net.append(SectionNet(
            section=name,
            transport=_number(net.get("transport"), f"{where} transport"),
            noise=_number(net.get("noise"), f"{where} noise", positive=True),
        ))
    for label, pair in inv.get("bounds", {}).items():
        _check_pair_label(label, cfg.section_names(), "[inverse] bounds")
        if len(pair) != 2:
            raise ConfigError(f"[inverse] bounds {label!r} must be [lower, upper] in m s^-1")
        lo, hi = (_number(v, f"[inverse] bounds {label}") for v in pair)
        if lo > hi:
            raise ConfigError(f"[inverse] bounds {label!r}: lower {lo:g} > upper {hi:g}")
        spec.bounds[label] = [lo, hi]
    return spec


def _is_tracer(name: str) -> bool:
    try:
        tracer_name(name)
    except ConfigError:
        return False
    return True


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML configuration file.

    Parameters
    ----------
    path : str or Path
        The .toml file; relative section files are taken from its folder.
    """
    path = Path(path)
    if path.is_dir():
        raise InputFileError(f"configuration path {path} is a folder; give the .toml file "
                             "inside it")
    if not path.is_file():
        raise InputFileError(f"configuration file {path} does not exist")
    try:
        # utf-8-sig: a byte-order mark some editors write at the start is skipped
        data = tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"configuration file {path} is not valid TOML: {exc}") from None
    return parse_config(data, base_dir=path.resolve().parent)
