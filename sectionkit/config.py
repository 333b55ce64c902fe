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
import sys
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import tomli_w

from sectionkit.errors import ConfigError, InputFileError, SectionkitError
from sectionkit.geostrophy import TRIANGLE_RULES, ReferenceChoice
from sectionkit.io.units import pressure_to_dbar, temperature_to_celsius
from sectionkit.layers import Interface, check_interfaces
from sectionkit.thermo import SALINITY_KINDS, TEMPERATURE_KINDS

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

SOLVER_NAMES = ("gauss-markov", "svd", "bounded")
#: How each solver is named in figures, tables and the workbench.
SOLVER_DISPLAY = {"gauss-markov": "Gauss–Markov", "svd": "truncated SVD",
                  "bounded": "bounded least squares"}
CONSTRAINT_KINDS = ("mass", "salt", "heat")
DEEPEST_COMMON = "deepest_common"  # the reference at each pair's deepest common level

# Every key the parser accepts, by table: the schema the parser checks against and the
# user guide (docs/configuration.md) documents. Old names accepted for a key are in ALIASES.
KEYS: dict[str, tuple[str, ...]] = {
    "": ("title", "grid", "sections", "boxes", "reference", "ekman", "classes", "budget",
         "inverse"),
    "grid": ("dp",),
    "sections": ("name", "file", "into_box", "columns", "bathymetry", "temperature_kind",
                 "salinity_kind", "pressure_units", "temperature_units"),
    "boxes": ("name", "enters", "leaves"),
    "reference": ("pressure", "isopycnal", "velocity", "bottom_triangle", "overrides",
                  "allow_equator"),
    "reference.isopycnal": ("sigma", "p_ref"),
    "reference.velocity": ("velocity", "pressure", "error"),
    "ekman": ("depth", "stress"),
    "classes": ("interfaces", "names"),
    "classes.interfaces": ("sigma", "p_ref"),
    "budget": ("reference_salinity",),
    "inverse": ("solver", "rank", "conserve", "prior_velocity", "prior_diapycnal",
                "prior_ekman", "noise_total", "noise_class", "noise_salt", "noise_heat",
                "known", "section_net", "bounds"),
    "inverse.known": ("name", "transport", "noise", "class", "box"),
    "inverse.section_net": ("section", "transport", "noise"),
}
# old key name -> current name, per table (both accepted; the current one is written)
ALIASES: dict[str, dict[str, str]] = {
    "": {"layers": "classes"},
    "inverse": {"noise_layer": "noise_class"},
    "inverse.known": {"layer": "class"},
}


def _check_keys(table: dict, allowed: tuple[str, ...], where: str) -> None:
    for key in table:
        if key not in allowed:
            close = difflib.get_close_matches(key, allowed, n=1)
            hint = (f"; did you mean {close[0]!r}?" if close
                    else f"; valid keys: {', '.join(allowed)}")
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


def _number(value: Any, where: str, *, positive: bool = False, nonneg: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ConfigError(f"{where} = {value!r} must be a number")
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
    temperature_kind: str = "in-situ"
    salinity_kind: str = "practical"
    pressure_units: str = "dbar"
    temperature_units: str = "degC"

    def csv_options(self) -> dict[str, Any]:
        """The CSV layout options of this section, as keyword arguments of the readers."""
        return {"columns": self.columns or None, "temperature_kind": self.temperature_kind,
                "salinity_kind": self.salinity_kind, "pressure_units": self.pressure_units,
                "temperature_units": self.temperature_units}


@dataclass
class BoxSpec:
    """A box bounded by sections; positive transport of ``enters`` enters it."""

    name: str
    enters: list[str] = field(default_factory=list)
    leaves: list[str] = field(default_factory=list)


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
    inverse: InverseSpec | None = None
    base_dir: Path = field(default_factory=Path.cwd)

    # ------------------------------------------------------------------ paths
    def section_paths(self, spec: SectionSpec) -> list[Path]:
        """Absolute paths of a section's file(s), relative ones taken from the config's folder."""
        files = [spec.file] if isinstance(spec.file, str) else list(spec.file)
        return [(self.base_dir / f) if not Path(f).is_absolute() else Path(f) for f in files]

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
            for key, default in (("temperature_kind", "in-situ"), ("salinity_kind", "practical"),
                                 ("pressure_units", "dbar"), ("temperature_units", "degC")):
                if getattr(s, key) != default:
                    d[key] = getattr(s, key)
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
        if self.inverse is not None:
            inv = asdict(self.inverse)
            inv["known"] = [
                {k: v for k, v in asdict(kt).items() if v is not None} for kt in self.inverse.known
            ]
            inv["known"] = [{("class" if k == "layer" else k): v for k, v in kt.items()}
                            for kt in inv["known"]]
            inv["noise_class"] = inv.pop("noise_layer")
            for key in ("noise_class", "noise_salt", "noise_heat", "bounds"):
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
        path = Path(path)
        tmp = path.with_name(f".{path.name}.tmp")
        tmp.write_text(self.to_toml())
        tmp.replace(path)
        return path


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


TOP_KEYS = KEYS[""]


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
    data = _current_names(data, "", "the configuration")
    _check_keys(data, KEYS[""], "the configuration")
    cfg = Config(base_dir=Path(base_dir) if base_dir else Path.cwd())
    cfg.title = str(data.get("title", cfg.title))

    grid = data.get("grid", {})
    _check_keys(grid, KEYS["grid"], "[grid]")
    cfg.dp = _number(grid.get("dp", 2.0), "[grid] dp", positive=True)

    sections = data.get("sections", [])
    if not sections:
        raise ConfigError("the configuration has no [[sections]]; add at least one line")
    for n, sec in enumerate(sections):
        where = f"[[sections]] #{n + 1}"
        _check_keys(sec, KEYS["sections"], where)
        for key in ("name", "file"):
            if key not in sec:
                raise ConfigError(f"{where} is missing {key!r}")
        name = str(sec["name"])
        if ":" in name or not name:
            raise ConfigError(f"{where}: section name {name!r} must be non-empty without ':'")
        if name in cfg.section_names():
            raise ConfigError(f"{where}: section name {name!r} is used twice")
        cfg.sections.append(
            SectionSpec(
                name=name,
                file=sec["file"],
                into_box=bool(sec.get("into_box", True)),
                columns=dict(sec.get("columns", {})),
                bathymetry=sec.get("bathymetry"),
                **_csv_layout(sec, where),
            )
        )
    names = cfg.section_names()

    for n, box in enumerate(data.get("boxes", [])):
        where = f"[[boxes]] #{n + 1}"
        _check_keys(box, KEYS["boxes"], where)
        spec = BoxSpec(str(box.get("name", f"box{n + 1}")), list(box.get("enters", [])),
                       list(box.get("leaves", [])))
        for s in spec.enters + spec.leaves:
            if s not in names:
                close = difflib.get_close_matches(s, names, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                raise ConfigError(f"{where} ({spec.name}) names section {s!r}, which does not "
                                  f"exist (sections: {', '.join(names)}){hint}")
        if not spec.enters and not spec.leaves:
            raise ConfigError(f"{where} ({spec.name}) has no sections")
        cfg.boxes.append(spec)

    ref = data.get("reference", {})
    _check_keys(ref, KEYS["reference"], "[reference]")
    kinds = [k for k in ("pressure", "isopycnal", "velocity") if k in ref]
    if len(kinds) > 1:
        raise ConfigError(f"[reference] sets both {kinds[0]!r} and {kinds[1]!r}; choose one")
    if kinds:
        cfg.reference = parse_reference(ref[kinds[0]], f"[reference] {kinds[0]}")
    cfg.bottom_triangle = str(ref.get("bottom_triangle", "constant"))
    if cfg.bottom_triangle not in TRIANGLE_RULES:
        close = difflib.get_close_matches(cfg.bottom_triangle, TRIANGLE_RULES, n=1)
        raise ConfigError(f"[reference] bottom_triangle = {cfg.bottom_triangle!r} is not one of "
                          f"{', '.join(TRIANGLE_RULES)}" + (f"; did you mean {close[0]!r}?"
                                                            if close else ""))
    for label, value in ref.get("overrides", {}).items():
        _check_pair_label(label, names, "[reference] overrides")
        cfg.overrides[label] = parse_reference(value, f"[reference] overrides {label!r}")
    cfg.allow_equator = bool(ref.get("allow_equator", False))

    ek = data.get("ekman", {})
    _check_keys(ek, KEYS["ekman"], "[ekman]")
    cfg.ekman_depth = _number(ek.get("depth", 50.0), "[ekman] depth", positive=True)
    for sec_name, stress in ek.get("stress", {}).items():
        if sec_name not in names:
            close = difflib.get_close_matches(sec_name, names, n=1)
            raise ConfigError(f"[ekman] stress names section {sec_name!r}, which does not exist"
                              + (f"; did you mean {close[0]!r}?" if close else ""))
        if not isinstance(stress, list) or len(stress) != 2:
            raise ConfigError(f"[ekman] stress {sec_name!r} must be [east, north] in N m^-2")
        cfg.ekman_stress[sec_name] = (
            _number(stress[0], f"[ekman] stress {sec_name}[0]"),
            _number(stress[1], f"[ekman] stress {sec_name}[1]"),
        )

    layers = data.get("classes", {})
    _check_keys(layers, KEYS["classes"], "[classes]")
    for n, face in enumerate(layers.get("interfaces", [])):
        if not isinstance(face, dict):
            raise ConfigError(f"[classes] interface {n}: use {{ sigma = ..., p_ref = ... }}")
        _check_keys(face, KEYS["classes.interfaces"], f"[classes] interface {n}")
        cfg.interfaces.append(Interface(
            _number(face.get("sigma"), f"[classes] interface {n} sigma"),
            _number(face.get("p_ref", 0.0), f"[classes] interface {n} p_ref", nonneg=True),
        ))
    cfg.layer_names = check_interfaces(cfg.interfaces, layers.get("names"))

    budget = data.get("budget", {})
    _check_keys(budget, KEYS["budget"], "[budget]")
    if "reference_salinity" in budget:
        cfg.reference_salinity = _number(budget["reference_salinity"],
                                         "[budget] reference_salinity", positive=True)

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


def _check_pair_label(label: str, names: list[str], where: str) -> None:
    sec, _, idx = label.partition(":")
    if sec not in names or not idx.isdigit():
        close = difflib.get_close_matches(sec, names, n=1)
        raise ConfigError(f'{where}: {label!r} must be "<section>:<pair index>" with a known '
                          f"section ({', '.join(names)})"
                          + (f"; did you mean '{close[0]}:{idx}'?" if close and idx else ""))


def _parse_inverse(inv: dict[str, Any], cfg: Config) -> InverseSpec:
    inv = _current_names(inv, "inverse", "[inverse]")
    _check_keys(inv, KEYS["inverse"], "[inverse]")
    spec = InverseSpec()
    spec.solver = str(inv.get("solver", spec.solver))
    if spec.solver not in SOLVER_NAMES:
        close = difflib.get_close_matches(spec.solver, SOLVER_NAMES, n=1)
        raise ConfigError(f"[inverse] solver = {spec.solver!r} is not one of "
                          f"{', '.join(SOLVER_NAMES)}"
                          + (f"; did you mean {close[0]!r}?" if close else ""))
    rank = inv.get("rank", 0)
    if isinstance(rank, bool) or not isinstance(rank, int) or rank < 0:
        raise ConfigError(f"[inverse] rank = {rank!r} must be a whole number >= 0")
    spec.rank = rank
    spec.conserve = list(inv.get("conserve", spec.conserve))
    for c in spec.conserve:
        if c not in CONSTRAINT_KINDS:
            close = difflib.get_close_matches(c, CONSTRAINT_KINDS, n=1)
            raise ConfigError(f"[inverse] conserve: {c!r} is not one of "
                              f"{', '.join(CONSTRAINT_KINDS)}"
                              + (f"; did you mean {close[0]!r}?" if close else ""))
    spec.prior_velocity = _number(inv.get("prior_velocity", spec.prior_velocity),
                                  "[inverse] prior_velocity", positive=True)
    spec.prior_diapycnal = _number(inv.get("prior_diapycnal", spec.prior_diapycnal),
                                   "[inverse] prior_diapycnal", nonneg=True)
    spec.prior_ekman = _number(inv.get("prior_ekman", spec.prior_ekman),
                               "[inverse] prior_ekman", nonneg=True)
    spec.noise_total = _number(inv.get("noise_total", spec.noise_total),
                               "[inverse] noise_total", positive=True)
    n_class = len(cfg.layer_names)
    for key, attr in (("noise_class", "noise_layer"), ("noise_salt", "noise_salt"),
                      ("noise_heat", "noise_heat")):
        values = inv.get(key, [])
        if values and len(values) != n_class:
            raise ConfigError(f"[inverse] {key} has {len(values)} entries; give one per class "
                              f"({n_class}: {', '.join(cfg.layer_names)})")
        setattr(spec, attr, [_number(v, f"[inverse] {key}[{i}]", positive=True)
                             for i, v in enumerate(values)])
    if not spec.noise_layer:
        spec.noise_layer = [1.0] * n_class
    box_names = [b.name for b in cfg.effective_boxes()]
    for n, kt in enumerate(inv.get("known", [])):
        where = f"[inverse] known #{n + 1}"
        kt = _current_names(kt, "inverse.known", where)
        _check_keys(kt, KEYS["inverse.known"], where)
        layer = str(kt.get("class", ""))
        if layer not in cfg.layer_names:
            close = difflib.get_close_matches(layer, cfg.layer_names, n=1)
            raise ConfigError(f"{where}: class {layer!r} does not exist (classes: "
                              f"{', '.join(cfg.layer_names)})"
                              + (f"; did you mean {close[0]!r}?" if close else ""))
        box = kt.get("box")
        if box is None and len(box_names) > 1:
            raise ConfigError(f"{where}: name the box it enters (boxes: {', '.join(box_names)})")
        if box is not None and box not in box_names:
            close = difflib.get_close_matches(str(box), box_names, n=1)
            raise ConfigError(f"{where}: box {box!r} does not exist (boxes: "
                              f"{', '.join(box_names)})"
                              + (f"; did you mean {close[0]!r}?" if close else ""))
        spec.known.append(KnownTransport(
            name=str(kt.get("name", f"known{n + 1}")),
            transport=_number(kt.get("transport"), f"{where} transport"),
            noise=_number(kt.get("noise"), f"{where} noise", positive=True),
            layer=layer,
            box=box if box is not None else box_names[0],
        ))
    for n, net in enumerate(inv.get("section_net", [])):
        where = f"[inverse] section_net #{n + 1}"
        _check_keys(net, KEYS["inverse.section_net"], where)
        name = str(net.get("section", ""))
        if name not in cfg.section_names():
            close = difflib.get_close_matches(name, cfg.section_names(), n=1)
            raise ConfigError(f"{where}: section {name!r} does not exist"
                              + (f"; did you mean {close[0]!r}?" if close else ""))
        spec.section_net.append(SectionNet(
            section=name,
            transport=_number(net.get("transport"), f"{where} transport"),
            noise=_number(net.get("noise"), f"{where} noise", positive=True),
        ))
    for label, pair in inv.get("bounds", {}).items():
        _check_pair_label(label, cfg.section_names(), "[inverse] bounds")
        if not isinstance(pair, list) or len(pair) != 2:
            raise ConfigError(f"[inverse] bounds {label!r} must be [lower, upper] in m s^-1")
        lo, hi = (_number(v, f"[inverse] bounds {label}") for v in pair)
        if lo > hi:
            raise ConfigError(f"[inverse] bounds {label!r}: lower {lo:g} > upper {hi:g}")
        spec.bounds[label] = [lo, hi]
    return spec


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML configuration file.

    Parameters
    ----------
    path : str or Path
        The .toml file; relative section files are taken from its folder.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"configuration file {path} does not exist")
    try:
        data = tomllib.loads(path.read_text())
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"configuration file {path} is not valid TOML: {exc}") from None
    return parse_config(data, base_dir=path.resolve().parent)
