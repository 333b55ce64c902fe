"""A study: the configuration, its sections, and every result it implies.

``Study`` runs the pipeline of DESIGN.md §2 once (read, TEOS-10, dynamic
height, class operator) and keeps the pieces that make later changes cheap:
references, Ekman stress and inverse settings only touch the linear
operators. Both the command line and the workbench work through it.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import gsw
import numpy as np
import pandas as pd
import xarray as xr

from sectionkit.budget import UnknownLayout, make_layout
from sectionkit.config import Config, check_pair_labels
from sectionkit.direct import DirectReference, direct_reference
from sectionkit.errors import Cautions, InputFileError
from sectionkit.geometry import along_line_distance, great_circle_distance
from sectionkit.io import load_section
from sectionkit.io.adcp import read_velocity_profiles
from sectionkit.io.validate import check_gridded_levels, check_pair_latitudes
from sectionkit.operator import SectionOperator, build_operator
from sectionkit.state import BudgetState, ReferenceState, Results
from sectionkit.tracers import TracerOperator, build_tracer_operator

__all__ = ["NET_MASS_HEAT_TOLERANCE", "ReferenceState", "Results", "Study"]

NET_MASS_HEAT_TOLERANCE = 0.1  # Sv: above it, heat is reported as a temperature transport


Loader = Callable[..., tuple[xr.Dataset, Cautions]]


@dataclass
class Study:
    """The sections of a configuration turned into linear operators.

    Parameters
    ----------
    config : Config
        The study's configuration.
    sections : dict of str -> xr.Dataset, optional
        Already loaded canonical sections by name; read from the
        configuration's files when None.
    """

    config: Config
    sections: dict[str, xr.Dataset] = field(default_factory=dict)
    operators: dict[str, SectionOperator] = field(default_factory=dict)
    load_cautions: Cautions = field(default_factory=Cautions)
    tracer_operators: dict[str, TracerOperator] = field(default_factory=dict)
    direct: dict[str, DirectReference] = field(default_factory=dict)
    #: Direct velocity profiles read once per file (a rebuild reuses them).
    _velocity_profiles: dict = field(default_factory=dict, init=False, repr=False)

    @classmethod
    def from_config(
        cls,
        config: Config,
        sections: dict[str, xr.Dataset] | None = None,
        progress: Callable[[str], None] | None = None,
    ) -> Study:
        """Load every section and build its operator.

        Parameters
        ----------
        config : Config
            The study's configuration.
        sections : dict of str -> xr.Dataset, optional
            Pre-loaded canonical sections.
        progress : callable, optional
            Called with a short message before each slow step.
        """
        study = cls(config=config)
        for spec in config.sections:
            if sections is not None and spec.name in sections:
                # sections read from files were checked by load_section; these were not
                ds = sections[spec.name]
                check_pair_latitudes(spec.name, [str(s) for s in ds["station"].values],
                                     ds["lon"].values, ds["lat"].values, config.allow_equator,
                                     study.load_cautions)
                check_gridded_levels(ds)
                study.sections[spec.name] = ds
                continue
            if progress:
                progress(f"reading section {spec.name}")
            paths = [str(p) for p in config.section_paths(spec)]
            ds, cautions = load_section(
                paths[0] if len(paths) == 1 else paths,
                name=spec.name,
                dp=config.dp,
                allow_equator=config.allow_equator,
                **spec.csv_options(),
                order=spec.stations,
                bottle=None if not spec.bottle else str(config.base_dir / spec.bottle),
                variables=spec.variables or None,
            )
            study.sections[spec.name] = ds
            study.load_cautions.extend(cautions)
        check_pair_labels(config, {name: ds.sizes["station"] - 1
                                   for name, ds in study.sections.items()})
        study.rebuild_operators(progress)
        return study

    def rebuild_operators(self, progress: Callable[[str], None] | None = None) -> None:
        """(Re)compute every section operator (after a change of classes or triangle rule).

        Dynamic height is computed only for a section whose data the existing
        operator was not built from; otherwise its relative velocity is reused.
        """
        cfg = self.config
        for spec in cfg.sections:
            ds = self.sections[spec.name]
            previous = self.operators.get(spec.name)
            if previous is not None and previous.source_section is not ds:
                previous = None  # new data: dynamic height again
            if progress:
                progress(("classes of " if previous else "dynamic height and classes of ")
                         + spec.name)
            if ds.attrs.get("section") != spec.name:
                ds = ds.assign_attrs(section=spec.name)
                self.sections[spec.name] = ds
            self.operators[spec.name] = build_operator(
                ds,
                cfg.interfaces,
                cfg.layer_names,
                bottom_triangle=cfg.bottom_triangle,
                ekman_depth=cfg.ekman_depth,
                bathymetry=_bathymetry(cfg, spec, ds),
                relative_velocity_of_pairs=None if previous is None else previous.relative_velocity,
                salinity=cfg.salt_salinity,
            )
            present = [t for t in cfg.tracers if t in ds]
            if present:
                self.tracer_operators[spec.name] = build_tracer_operator(
                    self.operators[spec.name], ds, present
                )
            else:
                self.tracer_operators.pop(spec.name, None)
            if spec.adcp and cfg.adcp is not None:
                path = cfg.base_dir / spec.adcp
                if path not in self._velocity_profiles:  # read once, not at every rebuild
                    self._velocity_profiles[path] = read_velocity_profiles(path)
                profiles = self._velocity_profiles[path]
                self.direct[spec.name] = direct_reference(
                    self.operators[spec.name], profiles, cfg.adcp.pressure_range,
                    cfg.adcp.error, self.load_cautions,
                )

    # ------------------------------------------------------------ references
    def references(self, cautions: Cautions | None = None) -> dict[str, ReferenceState]:
        """Resolve every pair's reference: pressure used and velocity offset."""
        out = {}
        for name, op in self.operators.items():
            choices = [self.config.reference_for(label) for label in op.pair_labels]
            p_used, offset = op.resolve_references(choices, cautions)
            kinds = [c.kind for c in choices]
            have = self._known_direct(name, cautions)
            if have is not None:
                # the pair's reference is the direct velocity averaged over the range
                direct = self.direct[name]
                offset = np.where(have, direct.velocity, offset)
                p_used = np.where(have, direct.pressure, p_used)
                kinds = ["velocity" if h else k for h, k in zip(have, kinds, strict=True)]
            out[name] = ReferenceState(kinds, p_used, offset)
        return out

    def _known_direct(self, name: str, cautions: Cautions | None) -> np.ndarray | None:
        """Pairs of section ``name`` whose reference is their direct velocity (``use = "known"``).

        A direct velocity is the reference of every pair that has one, except
        pairs with an explicit ``[reference] overrides`` entry: what the user
        wrote for one pair wins, and a caution names those pairs. None when
        the section has no direct velocities used as known references.
        """
        direct = self.direct.get(name)
        if direct is None or self.config.adcp is None or self.config.adcp.use != "known":
            return None
        labels = self.operators[name].pair_labels
        measured = np.isfinite(direct.velocity)
        explicit = np.array([label in self.config.overrides for label in labels], dtype=bool)
        kept = [label for label, m, e in zip(labels, measured, explicit, strict=True) if m and e]
        if kept and cautions is not None:
            cautions.add(
                "direct-velocity-overridden",
                f"section {name}: pair{'s' if len(kept) > 1 else ''} {', '.join(kept)} "
                "keep their explicit [reference] overrides although a direct velocity is "
                "available ([adcp] use = \"known\"); remove the override to reference "
                f"{'them' if len(kept) > 1 else 'it'} to the direct velocity",
            )
        return measured & ~explicit

    def ekman(self) -> dict[str, np.ndarray]:
        """Ekman volume transport per pair of every section, m^3 s^-1."""
        out = {}
        for name, op in self.operators.items():
            tau = self.config.ekman_stress.get(name, (0.0, 0.0))
            out[name] = op.ekman_volume(*tau)
        return out

    def layout(self) -> UnknownLayout:
        """Unknowns of the configured inverse (only pairs when there is none)."""
        inv = self.config.inverse
        boxes = []
        ekman_sections = []
        if inv is not None:
            if inv.prior_diapycnal > 0 and self.config.interfaces:
                boxes = [b.name for b in self.config.effective_boxes()]
            if inv.prior_ekman > 0:
                # in section order, not the stress table's (a provenance rerun sorts it)
                ekman_sections = [s for s in self.config.section_names()
                                  if tuple(self.config.ekman_stress.get(s, (0.0, 0.0)))
                                  != (0.0, 0.0)]
        return make_layout(self.operators, boxes, len(self.config.interfaces), ekman_sections)

    def velocity_prior(self, layout: UnknownLayout | None = None) -> dict[str, np.ndarray]:
        """Prior standard deviation of each pair's adjustment by section, m s^-1.

        Pairs referenced to a known velocity use its stated error (when > 0);
        pairs with a direct velocity use the error of its range mean, except,
        under ``[adcp] use = "known"``, pairs whose explicit override was kept.
        """
        inv = self.config.inverse
        out = {}
        for name, op in self.operators.items():
            direct = self.direct.get(name)
            known = self._known_direct(name, None)
            prior = []
            for k, label in enumerate(op.pair_labels):
                ref = self.config.reference_for(label)
                overridden = known is not None and label in self.config.overrides
                if direct is not None and np.isfinite(direct.error[k]) and not overridden:
                    prior.append(direct.error[k])
                elif ref.kind == "velocity" and ref.velocity_error > 0:
                    prior.append(ref.velocity_error)
                else:
                    prior.append(inv.prior_velocity)
            out[name] = np.asarray(prior, dtype=float)
        return out

    # ------------------------------------------------------------ results
    def solve(self, inverse: bool = True) -> Results:
        """Compute every budget, and the inverse when configured.

        Parameters
        ----------
        inverse : bool
            Run the configured inverse (ignored when there is none).
        """
        cfg = self.config
        cautions = Cautions()
        cautions.extend(self.load_cautions)
        state = BudgetState.prepare(self, cautions, inverse=inverse)
        result = state.solve()
        results = state.results(result, cautions)
        outputs = results.outputs
        for name in outputs:
            net_mass = float(results.select("net_mass_transport", name).adjusted[0])
            if abs(net_mass) > NET_MASS_HEAT_TOLERANCE:
                cautions.add(
                    "temperature-transport",
                    f"section {name}: net mass transport is {net_mass:+.2f} Sv, so heat_pw is a "
                    "temperature transport relative to 0 degC, not a heat transport",
                )
        for name, op in self.operators.items():
            below = op.track_below_stations
            if below:
                listed = ", ".join(f"{name}:{j} (track {pt:.0f} dbar, deeper station "
                                   f"{pb:.0f} dbar)" for j, (pt, pb) in below.items())
                cautions.add(
                    "bathymetry-below-stations",
                    f"the bathymetry track lies below both stations of pair(s) {listed}; that "
                    "water is included with the deeper station's properties and the bottom "
                    "triangle's velocity rule",
                )
        for name in outputs:
            selected = results.select("net_volume_transport", name)
            net, err = float(selected.adjusted[0]), float(selected.error[0])
            limit = err if np.isfinite(err) else NET_MASS_HEAT_TOLERANCE
            if abs(net) > limit:
                cautions.add(
                    "overturning-net",
                    f"section {name}: net transport {net:+.2f} Sv exceeds "
                    + (f"its error ({err:.2f} Sv)" if np.isfinite(err)
                       else f"{NET_MASS_HEAT_TOLERANCE} Sv (no inverse, no error)")
                    + "; the overturning is computed after removing it as a uniform velocity "
                    "over the section, which may not be where the net flow is",
                )
        if self.direct and cfg.adcp.use == "prior" and (cfg.inverse is None or not inverse):
            cautions.add(
                "direct-velocity-unused",
                "direct velocities are prior means of the inverse ([adcp] use = \"prior\"), "
                "but no inverse was run, so they change nothing; use = \"known\" makes them "
                "the pairs' references",
            )
        cautions.add(
            "reference-dependence",
            "transports depend on the reference choices and priors; geostrophy excludes "
            "ageostrophic flow other than the stated Ekman transport",
        )
        return results


def _bathymetry(cfg: Config, spec, ds: xr.Dataset) -> list | None:
    """Per-pair bottom pressures sampled along a bathymetry track, or None."""
    if not spec.bathymetry:
        return None
    path = cfg.base_dir / spec.bathymetry
    try:
        track = pd.read_csv(path)
    except (OSError, ValueError) as exc:
        raise InputFileError(f"bathymetry file {path} cannot be read: {exc}") from None
    for col in ("distance_km", "depth_m"):
        if col not in track:
            raise InputFileError(f"bathymetry file {path} has no column {col!r}; expected "
                                 "distance_km (along the line from the first station) and depth_m")
    dist = along_line_distance(great_circle_distance(ds["lon"].values, ds["lat"].values)) / 1e3
    lat = ds["lat"].values
    out = []
    for j in range(dist.size - 1):
        s = np.linspace(dist[j], dist[j + 1], 64)
        depth = np.interp(s, track["distance_km"].values, track["depth_m"].values)
        out.append(gsw.p_from_z(-depth, 0.5 * (lat[j] + lat[j + 1])))
    return out
