"""Monte Carlo ensembles of a study, serially or on a dask.distributed cluster.

Each member perturbs what a study depends on and runs the whole chain
(operators, references, budgets and the configured inverse through
:class:`~sectionkit.study.Study`):

- **CTD sensor errors** (:class:`Perturbation`): Gaussian draws with the
  stated accuracies taken as one standard deviation — temperature 0.002 degC
  (added to Conservative Temperature; dCT/dt is within a few per cent of 1),
  salinity 0.002 g/kg (added to Absolute Salinity) and pressure 1 dbar. By
  default (``mode="station"``) each station gets one offset per sensor, held
  over the whole cast: a calibration bias, the error that survives vertical
  integration. ``mode="level"`` draws temperature and salinity independently
  at every station and level instead (white noise). Pressure is always one
  offset per station: the cast's values are moved to ``p + dp`` (linear
  interpolation on the grid, end values held), the sea floor stays where the
  echo sounder put it.
- **Reference choice**: the global reference pressure drawn uniformly within
  ``reference_range`` (dbar); per-pair overrides are kept.
- **Priors**: every prior standard deviation of the inverse (velocity,
  diapycnal, Ekman) multiplied by one factor drawn log-uniformly within
  ``prior_factor``.
- **Constraint noise** (``constraints``): ``"noise"`` adds a draw of the
  inverse's own noise model ``n ~ N(0, diag(noise^2))`` to the imbalance
  ``y``; ``"twin"`` replaces ``y`` by ``E x_t + n`` with a true state
  ``x_t ~ N(0, diag(prior^2))`` (a twin experiment whose truth is recorded
  as ``*_truth``). Both leave the sections untouched.

Random numbers: member ``m`` uses the ``m``-th child of
``numpy.random.SeedSequence(seed).spawn(members)``, split again into one
stream per kind of perturbation, so a member's draws depend on neither the
ensemble size, the other options nor where it runs: a cluster run equals
the serial run.

The summary gives mean, standard deviation and the 2.5/50/97.5 percentiles
of every output across members, next to the linear posterior error of the
unperturbed study (:meth:`sectionkit.study.Results.error`).
"""

from __future__ import annotations

import copy
import csv
import dataclasses
import os
import shutil
import sys
import tempfile
import time
import warnings
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from sectionkit.arrays import core_last
from sectionkit.compiled import kernel
from sectionkit.config import Config, load_config
from sectionkit.errors import ConfigError
from sectionkit.outputs import REGISTRY, udunits
from sectionkit.study import Results, Study
from sectionkit.thermo import valid_from_surface

__all__ = [
    "CLASS_OUTPUTS",
    "SCALAR_OUTPUTS",
    "STATISTICS",
    "Perturbation",
    "ensemble_main",
    "local_cluster",
    "members_equal",
    "perturb_section",
    "resolve_with_data",
    "run_ensemble",
    "member_batch_size",
    "run_member",
    "run_members",
    "shift_profiles",
    "summary_rows",
    "unperturbed",
    "write_ensemble",
]

#: Per-class outputs recorded per member: ensemble variable -> registry name
#: (:data:`sectionkit.outputs.REGISTRY`, which holds the unit).
CLASS_OUTPUTS = {"volume": "class_volume_transport", "mass": "class_mass_transport",
                 "heat_class": "class_heat_transport"}
#: Per-section outputs recorded per member: ensemble variable -> registry name.
SCALAR_OUTPUTS = {
    "net": "net_volume_transport",
    "net_mass": "net_mass_transport",
    "heat": "heat_transport",
    "freshwater": "freshwater_transport",
    "overturning": "overturning_depth",
    "overturning_density": "overturning_density",
}
STATISTICS = ("mean", "std", "p2.5", "p50", "p97.5")
PERCENTILES = (2.5, 50.0, 97.5)
SENSOR_MODES = ("station", "level")
CONSTRAINT_MODES = ("none", "noise", "twin")


@dataclass(frozen=True)
class Perturbation:
    """What every ensemble member perturbs; standard deviations.

    Parameters
    ----------
    temperature : float
        Temperature sensor accuracy, degC (default 0.002).
    salinity : float
        Salinity accuracy, g/kg (default 0.002).
    pressure : float
        Pressure sensor accuracy, dbar (default 1).
    mode : {"station", "level"}
        ``station``: one temperature and salinity offset per station
        (calibration bias, default); ``level``: independent at every
        station and level. Pressure is one offset per station in both.
    reference_range : (float, float), optional
        Range of the global reference pressure, dbar, drawn uniformly (the
        configuration's global reference must be a pressure).
    prior_factor : (float, float), optional
        Range of a log-uniform factor applied to every prior standard
        deviation of the inverse, dimensionless.
    constraints : {"none", "noise", "twin"}
        Perturbation of the inverse's data (see the module documentation).
    """

    temperature: float = 0.002
    salinity: float = 0.002
    pressure: float = 1.0
    mode: str = "station"
    reference_range: tuple[float, float] | None = None
    prior_factor: tuple[float, float] | None = None
    constraints: str = "none"

    def __post_init__(self) -> None:
        for name in ("temperature", "salinity", "pressure"):
            value = getattr(self, name)
            if not np.isfinite(value) or value < 0:
                raise ConfigError(f"perturbation {name} = {value!r} must be a standard "
                                  "deviation >= 0")
        if self.mode not in SENSOR_MODES:
            raise ConfigError(f"perturbation mode = {self.mode!r} is not one of "
                              f"{', '.join(SENSOR_MODES)}")
        if self.constraints not in CONSTRAINT_MODES:
            raise ConfigError(f"perturbation constraints = {self.constraints!r} is not one of "
                              f"{', '.join(CONSTRAINT_MODES)}")
        for name in ("reference_range", "prior_factor"):
            rng = getattr(self, name)
            if rng is not None and (len(rng) != 2 or not rng[0] <= rng[1]):
                raise ConfigError(f"perturbation {name} = {rng!r} must be (low, high), low <= high")
        if self.prior_factor is not None and self.prior_factor[0] <= 0:
            raise ConfigError(f"perturbation prior_factor = {self.prior_factor!r} must be > 0")

    @property
    def sensors(self) -> bool:
        """True when CTD measurements are perturbed (operators are rebuilt per member)."""
        return self.temperature > 0 or self.salinity > 0 or self.pressure > 0

    def describe(self) -> dict[str, str | float]:
        """Settings as netCDF/CSV-friendly attributes."""
        return {
            "temperature_sd_degC": self.temperature,
            "salinity_sd_g_kg": self.salinity,
            "pressure_sd_dbar": self.pressure,
            "sensor_mode": self.mode,
            "reference_range_dbar": "none" if self.reference_range is None
            else f"{self.reference_range[0]:g}..{self.reference_range[1]:g}",
            "prior_factor_range": "none" if self.prior_factor is None
            else f"{self.prior_factor[0]:g}..{self.prior_factor[1]:g}",
            "constraint_noise": self.constraints,
        }


NO_PERTURBATION = Perturbation(temperature=0.0, salinity=0.0, pressure=0.0)


# ------------------------------------------------------------------ perturbing data
def shift_profiles(values: np.ndarray, pressure: np.ndarray, shift: np.ndarray) -> np.ndarray:
    """Move every profile down by ``shift``: new(p) = old(p - shift).

    Parameters
    ----------
    values : ndarray (station, level)
        Profiles on the grid, any unit; NaN below the bottom.
    pressure : ndarray (level,)
        Grid, dbar.
    shift : ndarray (station,)
        Pressure error of each cast, dbar (the sensor reads ``p + shift``).

    Returns
    -------
    ndarray (station, level)
        Shifted profiles, same unit; the end values are held beyond the data,
        and the NaN mask (the sea floor) is unchanged.
    """
    values = np.asarray(values, dtype=float)
    pressure = np.asarray(pressure, dtype=float)
    shift = np.asarray(shift, dtype=float)
    fast = _even_profiles(values, pressure)
    if fast is not None:
        out = np.empty(values.shape)
        _shift_kernel(values, fast[1], shift / fast[0], np.zeros((values.shape[0], 1)), out)
        return out
    out = np.array(values, copy=True)
    ok = np.isfinite(out)
    count = ok.sum(axis=-1)
    for s in range(values.shape[0]):
        ok_s = ok[s]
        if count[s] < 2 or shift[s] == 0.0:
            continue
        out[s, ok_s] = np.interp(pressure[ok_s] - shift[s], pressure[ok_s], values[s, ok_s])
    return out


def _even_profiles(values: np.ndarray, pressure: np.ndarray) -> tuple[float, np.ndarray] | None:
    """Grid step (dbar) and valid-level count of each cast when the grid is even and every
    cast is valid from the surface down (NaN only below its bottom); None otherwise."""
    step = np.diff(pressure)
    if not (values.ndim == 2 and values.shape[-1] == pressure.size and step.size
            and np.all(step > 0) and np.all(np.abs(step - step[0]) <= 1e-12 * step[0])):
        return None
    count, whole = valid_from_surface(values)
    return (float(step[0]), count) if whole else None


@kernel
def _shift_kernel(values, count, steps, noise, out):
    """Linear interpolation of each cast at k - steps (grid steps), held at its ends, plus
    ``noise`` (one value per cast, or one per level); NaN below the cast's bottom kept."""
    n_row, n_lev = values.shape
    per_level = noise.shape[1] > 1
    for r in range(n_row):
        n = count[r]
        moved = n >= 2 and steps[r] != 0.0
        for k in range(n_lev):
            if k >= n:
                out[r, k] = values[r, k]
                continue
            v = values[r, k]
            if moved:
                u = min(max(k - steps[r], 0.0), n - 1.0)
                j = min(int(np.floor(u)), n - 2)
                w = u - j
                v0 = values[r, j]
                v = (values[r, j + 1] - v0) * w + v0
            out[r, k] = v + noise[r, k if per_level else 0]


def perturb_section(
    section: xr.Dataset, rng: np.random.Generator, perturb: Perturbation
) -> xr.Dataset:
    """One draw of the CTD sensor errors applied to a canonical section.

    Parameters
    ----------
    section : xr.Dataset
        Canonical section (``SA`` g/kg, ``CT`` degC on station, pressure).
    rng : numpy.random.Generator
        Source of the draws (consumed in a fixed order: pressure,
        temperature, salinity).
    perturb : Perturbation
        Standard deviations and mode.

    Returns
    -------
    xr.Dataset
        A copy with perturbed ``SA`` and ``CT``.
    """
    sa = core_last(section["SA"], "station", "pressure")
    ct = core_last(section["CT"], "station", "pressure")
    p = section["pressure"].values.astype(float)
    n_station = sa.shape[0]
    shape = (n_station, 1) if perturb.mode == "station" else sa.shape
    dp = rng.normal(0.0, 1.0, n_station) * perturb.pressure
    dt = rng.normal(0.0, 1.0, shape) * perturb.temperature
    ds = rng.normal(0.0, 1.0, shape) * perturb.salinity
    fast = _even_profiles(sa, p)
    fast_ct = _even_profiles(ct, p) if fast is not None else None
    if fast is not None and fast_ct is not None and np.array_equal(fast[1], fast_ct[1]):
        # one pass per variable: the shifted cast plus its noise
        steps = dp / fast[0]
        sa_new, ct_new = np.empty(sa.shape), np.empty(ct.shape)
        _shift_kernel(np.ascontiguousarray(sa), fast[1], steps, np.atleast_2d(ds), sa_new)
        _shift_kernel(np.ascontiguousarray(ct), fast[1], steps, np.atleast_2d(dt), ct_new)
    else:
        if perturb.pressure > 0:
            sa = shift_profiles(sa, p, dp)
            ct = shift_profiles(ct, p, dp)
        sa_new, ct_new = sa + ds, ct + dt
    out = section.copy()
    for name, value in (("SA", sa_new), ("CT", ct_new)):
        if section[name].dims == ("station", "pressure"):
            out[name].variable.values = value  # the copy's own variable: no re-alignment
        else:
            out[name] = (("station", "pressure"), value, section[name].attrs)
    return out


# ------------------------------------------------------------------ one member
def resolve_with_data(study: Study, results: Results, target: np.ndarray) -> Results:
    """Solve the study's inverse again with a different imbalance ``y``.

    Parameters
    ----------
    study : Study
        The study that produced ``results`` (kept for callers; the state is in ``results``).
    results : Results
        A solved state (with an inverse).
    target : ndarray (row,)
        The new ``y`` of ``E x + n = y``, row units.

    Returns
    -------
    Results
        References, Ekman and layout of ``results``; a new inverse and outputs.
    """
    return results.with_data(target)


def _record(study: Study, results: Results, truth: np.ndarray | None) -> dict[str, np.ndarray]:
    """Outputs of one solved state as arrays (section[, layer])."""
    sections = list(study.operators)
    out: dict[str, np.ndarray] = {}
    x = results.estimate
    wanted = CLASS_OUTPUTS | SCALAR_OUTPUTS
    by_section = [results.select_many(list(wanted.values()), s) for s in sections]
    for name, output in wanted.items():
        chosen = [selected[output] for selected in by_section]
        scalar = name in SCALAR_OUTPUTS  # one value per section, not per class
        for suffix, values in (("", [c.adjusted for c in chosen]),
                               ("_initial", [c.initial for c in chosen]),
                               ("_error", [c.error for c in chosen]),
                               ("_truth", None if truth is None else
                                [c.initial + c.gradient @ truth for c in chosen])):
            if values is not None:
                stacked = np.array(values)
                out[name + suffix] = stacked[:, 0] if scalar else stacked
    out["estimate"] = np.asarray(x, dtype=float)
    return out


def run_member(study: Study, seed: np.random.SeedSequence, perturb: Perturbation
               ) -> dict[str, np.ndarray]:
    """Run one ensemble member.

    Parameters
    ----------
    study : Study
        The unperturbed study (configuration, canonical sections, operators).
    seed : numpy.random.SeedSequence
        The member's own seed sequence.
    perturb : Perturbation
        What to perturb.

    Returns
    -------
    dict of str -> ndarray
        Adjusted outputs (``volume`` ... by section[, layer]), their
        ``*_initial`` and linear posterior ``*_error`` values, ``*_truth``
        for twin members, ``estimate`` (unknowns) and the drawn
        ``reference_pressure`` (dbar) and ``prior_factor``.
    """
    s_ref, s_prior, s_sensor, s_data = seed.spawn(4)
    # only the reference and the inverse's priors change: copy those, share the rest
    config = copy.copy(study.config)
    if config.inverse is not None:
        config.inverse = copy.copy(config.inverse)
    ref_p = np.nan
    if perturb.reference_range is not None:
        ref_p = float(np.random.default_rng(s_ref).uniform(*perturb.reference_range))
        config.reference = dataclasses.replace(config.reference, pressure=ref_p)
    factor = 1.0
    if perturb.prior_factor is not None and config.inverse is not None:
        lo, hi = np.log(perturb.prior_factor[0]), np.log(perturb.prior_factor[1])
        factor = float(np.exp(np.random.default_rng(s_prior).uniform(lo, hi)))
        config.inverse.prior_velocity *= factor
        config.inverse.prior_diapycnal *= factor
        config.inverse.prior_ekman *= factor
    if perturb.sensors:
        rng = np.random.default_rng(s_sensor)
        sections = {spec.name: perturb_section(study.sections[spec.name], rng, perturb)
                    for spec in config.sections}
        member = Study.from_config(config, sections=sections)
    else:
        # the same operators, tracers and direct velocities (none depends on what is perturbed)
        member = Study(config=config, sections=study.sections, operators=study.operators,
                       load_cautions=study.load_cautions,
                       tracer_operators=study.tracer_operators, direct=study.direct)
    results = member.solve()
    truth = None
    if perturb.constraints != "none" and results.inverse is not None:
        rng = np.random.default_rng(s_data)
        system = results.inverse.system
        noise = rng.standard_normal(system.noise.size) * system.noise
        if perturb.constraints == "twin":
            if system.prior_covariance is None:
                truth = rng.standard_normal(system.prior.size) * system.prior
            else:  # correlated pair priors: a draw from the full prior covariance
                active = system.prior > 0
                truth = np.zeros(system.prior.size)
                factor = np.linalg.cholesky(system.prior_covariance[np.ix_(active, active)])
                truth[active] = factor @ rng.standard_normal(int(active.sum()))
            target = system.matrix @ truth + noise
        else:
            target = system.target + noise
        results = resolve_with_data(member, results, target)
    out = _record(member, results, truth)
    out["reference_pressure"] = np.asarray(ref_p)
    out["prior_factor"] = np.asarray(factor)
    return out


# ------------------------------------------------------------------ the ensemble
def _text_progress(total: int) -> Callable[[int], None]:
    """A text progress bar on stderr (redrawn in place on a terminal, else every 10 %)."""
    start = time.perf_counter()
    tty = sys.stderr.isatty()
    shown = {-1}

    def show(done: int) -> None:
        width = 30
        fill = int(width * done / max(total, 1))
        elapsed = time.perf_counter() - start
        text = f"  members [{'#' * fill}{'.' * (width - fill)}] {done}/{total} {elapsed:6.1f} s"
        if tty:
            sys.stderr.write("\r" + text + ("\n" if done >= total else ""))
        else:
            decile = 10 * done // max(total, 1)
            if decile in shown:
                return
            shown.add(decile)
            sys.stderr.write(text + "\n")
        sys.stderr.flush()

    return show


def unperturbed(study: Study) -> dict[str, Any]:
    """The unperturbed study's outputs (the ensemble's reference run).

    Parameters
    ----------
    study : Study
        The study; its operators are built here when it has none.

    Returns
    -------
    dict
        ``record`` (as a member's outputs), ``unknowns`` (labels of the
        inverse's unknowns) and ``sections`` (names, in order).
    """
    built = study if study.operators else Study.from_config(study.config,
                                                            sections=study.sections)
    base = built.solve()
    return {"record": _record(built, base, None), "unknowns": list(base.layout.labels),
            "sections": list(built.operators)}


def _run_members(
    study: Study,
    seeds: Sequence[np.random.SeedSequence],
    perturb: Perturbation,
    client: Any | None,
    progress: Callable[[int], None] | None,
) -> tuple[list[dict[str, np.ndarray]], dict[str, Any]]:
    """Every member and the unperturbed run, serially or as tasks on the client's cluster."""
    n = len(seeds)
    if progress:
        progress(0)
    if client is None:
        base = unperturbed(study)
        results = []
        for m, seq in enumerate(seeds):
            results.append(run_member(study, seq, perturb))
            if progress:
                progress(m + 1)
        return results, base
    from distributed import as_completed

    # members that rebuild their operators need only the configuration and the sections
    needed = Study(config=study.config, sections=study.sections) if perturb.sensors else study
    shared = client.scatter(needed, broadcast=True, hash=False)
    token = f"{os.getpid()}-{time.time_ns()}"
    # several members per task: fewer round trips to the scheduler, same numbers
    size = member_batch_size(n, len(client.scheduler_info().get("workers", {})) or 1)
    starts = list(range(0, n, size))
    batches = [list(seeds[a : a + size]) for a in starts]
    # the unperturbed run first, so that it does not end the ensemble on one worker alone
    base_future = client.submit(unperturbed, shared, key=f"sectionkit-base-{token}",
                                pure=False)
    futures = client.map(run_members, [shared] * len(batches), batches,
                         [perturb] * len(batches),
                         key=[f"sectionkit-members-{token}-{a}" for a in starts], pure=False)
    first = {f.key: a for a, f in zip(starts, futures, strict=True)}
    results: list[dict[str, np.ndarray] | None] = [None] * n
    done = 0
    try:
        for future in as_completed(futures):
            records = future.result()
            a = first[future.key]
            results[a : a + len(records)] = records
            done += len(records)
            if progress:
                progress(done)
        base = base_future.result()
    except BaseException:
        client.cancel([*futures, base_future])
        raise
    return [r for r in results if r is not None], base


def member_batch_size(members: int, workers: int) -> int:
    """Members per dask task: at least four tasks per worker, at most 16 members each.

    Coarse tasks: every task costs the scheduler and the client processor time
    on the machine the workers share (on two cores, about a tenth of one core
    at 30 members per second with tasks of 2-6 members), while four tasks per
    worker still keep the workers busy to the end.

    Parameters
    ----------
    members : int
        Ensemble size.
    workers : int
        Number of workers.

    Returns
    -------
    int
        Members per task, >= 1.
    """
    return max(1, min(16, members // (4 * max(workers, 1))))


def run_members(study: Study, seeds: Sequence[np.random.SeedSequence], perturb: Perturbation
                ) -> list[dict[str, np.ndarray]]:
    """Run several ensemble members in turn (one dask task); see :func:`run_member`.

    Parameters
    ----------
    study : Study
        The unperturbed study.
    seeds : sequence of numpy.random.SeedSequence
        One seed sequence per member.
    perturb : Perturbation
        What to perturb.

    Returns
    -------
    list of dict
        One record per member, in the order of ``seeds``.
    """
    return [run_member(study, seq, perturb) for seq in seeds]


def _stack(records: list[dict[str, np.ndarray]]) -> dict[str, np.ndarray]:
    return {k: np.stack([r[k] for r in records]) for k in records[0]}


def run_ensemble(
    config_or_path: Config | str | os.PathLike,
    members: int,
    seed: int = 0,
    client: Any | None = None,
    perturb: Perturbation | None = None,
    *,
    sections: dict[str, xr.Dataset] | None = None,
    progress: bool | Callable[[int], None] = False,
) -> xr.Dataset:
    """Run a Monte Carlo ensemble of a study and summarise it.

    Parameters
    ----------
    config_or_path : Config or path
        The study's configuration (or its TOML file).
    members : int
        Number of members.
    seed : int
        Base seed; member ``m`` uses ``SeedSequence(seed).spawn(members)[m]``.
    client : dask.distributed.Client, optional
        Runs the members on its cluster; serial in this process when None.
        Both give identical numbers.
    perturb : Perturbation, optional
        What to perturb (default: CTD sensor errors only, per station).
    sections : dict of str -> xr.Dataset, optional
        Canonical sections already in memory (read from the configuration's
        files when None).
    progress : bool or callable
        True for a text bar on stderr, or a callable given the number of
        finished members.

    Returns
    -------
    xr.Dataset
        Dimensions ``member``, ``section``, ``class``, ``statistic``,
        ``unknown``. Per member: every output of :data:`CLASS_OUTPUTS`
        (member, section, class) and :data:`SCALAR_OUTPUTS` (member,
        section), adjusted, with ``*_initial`` and the member's linear
        posterior ``*_error`` (and ``*_truth`` in twin mode); ``estimate``
        (member, unknown); drawn ``reference_pressure`` and ``prior_factor``.
        From the unperturbed study: ``*_base`` and ``*_base_error`` (linear
        posterior standard deviation, NaN without an inverse). Across
        members: ``*_summary`` (statistic, ...) with mean, std (ddof = 1)
        and the 2.5/50/97.5 percentiles of the adjusted outputs, and
        ``*_spread_ratio`` = ensemble std / base linear error.
    """
    if members < 1:
        raise ConfigError(f"members = {members!r}: an ensemble needs at least one member")
    perturb = Perturbation() if perturb is None else perturb
    config = config_or_path if isinstance(config_or_path, Config) else load_config(
        config_or_path)
    if perturb.reference_range is not None and config.reference.kind != "pressure":
        raise ConfigError(
            f"a reference_range perturbation draws the global reference pressure, but the "
            f"configuration's global reference is {config.reference.describe()!r}; set "
            "[reference] pressure or drop reference_range")
    if perturb.constraints != "none" and config.inverse is None:
        raise ConfigError(f"constraints = {perturb.constraints!r} perturbs the inverse's data, "
                          "but the configuration has no [inverse]")
    seeds = np.random.SeedSequence(seed).spawn(members)
    show = _text_progress(members) if progress is True else (progress or None)
    if sections is None or not perturb.sensors or client is None:
        study = Study.from_config(config, sections=sections)  # reads the files when needed
    else:
        study = Study(config=config, sections=dict(sections))  # operators built on the cluster
    records, base = _run_members(study, seeds, perturb, client, show)
    return _assemble(config, base, _stack(records), perturb, seed)


def _assemble(
    config: Config,
    base: dict[str, Any],
    stacked: dict[str, np.ndarray],
    perturb: Perturbation,
    seed: int,
) -> xr.Dataset:
    layers = config.layer_names or ["class_0"]
    sections = base["sections"]
    base_rec = base["record"]
    n_member = stacked["net"].shape[0]
    data: dict[str, Any] = {}
    outputs: list[tuple[str, tuple[str, ...], str]] = (
        [(n, ("section", "class"), REGISTRY[r].display) for n, r in CLASS_OUTPUTS.items()]
        + [(n, ("section",), REGISTRY[r].display) for n, r in SCALAR_OUTPUTS.items()]
    )
    for name, dims, display in outputs:
        # CF / UDUNITS units that unit libraries read ("Sv" is the sievert to them)
        units = {"units": udunits(display), "display_units": display}
        for suffix, what in (("", "adjusted"), ("_initial", "initial"),
                             ("_error", "linear posterior standard deviation"),
                             ("_truth", "twin truth")):
            if name + suffix in stacked:
                data[name + suffix] = (("member", *dims), stacked[name + suffix],
                                       {**units, "long_name": f"{name}, {what}"})
        data[f"{name}_base"] = (dims, base_rec[name],
                                {**units, "long_name": f"{name} of the unperturbed study"})
        data[f"{name}_base_error"] = (dims, base_rec[f"{name}_error"], {
            **units, "long_name": f"{name}: linear posterior standard deviation "
            "of the unperturbed study"})
        values = stacked[name]
        with np.errstate(invalid="ignore"):
            std = values.std(axis=0, ddof=1) if n_member > 1 else np.full(values.shape[1:],
                                                                          np.nan)
            summary = np.stack([values.mean(axis=0), std,
                                *np.percentile(values, PERCENTILES, axis=0)])
            ratio = std / base_rec[f"{name}_error"]
        data[f"{name}_summary"] = (("statistic", *dims), summary,
                                   {**units, "long_name": f"{name} across members"})
        data[f"{name}_spread_ratio"] = (dims, ratio, {
            "units": "1", "long_name": f"{name}: ensemble std / linear posterior error"})
    data["estimate"] = (("member", "unknown"), stacked["estimate"],
                        {"long_name": "adjusted unknowns (m s-1, Sv, 1 by kind)"})
    data["reference_pressure"] = ("member", stacked["reference_pressure"],
                                  {"units": "dbar", "long_name": "drawn global reference "
                                   "pressure (NaN: configured)"})
    data["prior_factor"] = ("member", stacked["prior_factor"],
                            {"units": "1", "long_name": "factor applied to the prior standard "
                             "deviations"})
    ds = xr.Dataset(
        data,
        coords={
            "member": np.arange(n_member),
            "section": sections,
            "class": layers,
            "statistic": list(STATISTICS),
            "unknown": base["unknowns"],
        },
        attrs={
            "title": config.title,
            "members": n_member,
            "seed": int(seed),
            "seeding": "member m uses numpy SeedSequence(seed).spawn(members)[m]",
            "sign_convention": "positive to the left of increasing station order",
            **{f"perturb_{k}": v for k, v in perturb.describe().items()},
        },
    )
    return ds


# ------------------------------------------------------------------ outputs
SUMMARY_COLUMNS = ("section", "output", "class", "units", "base", "linear_error", "mean", "std",
                   "p2_5", "p50", "p97_5", "std_over_linear_error", "members")


def summary_rows(ds: xr.Dataset) -> list[dict[str, Any]]:
    """One row per section, output (and class) of an ensemble Dataset.

    Parameters
    ----------
    ds : xr.Dataset
        Result of :func:`run_ensemble`.

    Returns
    -------
    list of dict
        Keys :data:`SUMMARY_COLUMNS`; values in the output's units.
    """
    rows = []
    n_member = int(ds.sizes["member"])

    def row(section: str, name: str, layer: str, sel: dict) -> dict[str, Any]:
        s = ds[f"{name}_summary"].sel(sel)
        return {
            "section": section, "output": name, "class": layer,
            "units": ds[name].attrs.get("display_units", ds[name].attrs["units"]),
            "base": float(ds[f"{name}_base"].sel(sel)),
            "linear_error": float(ds[f"{name}_base_error"].sel(sel)),
            "mean": float(s.sel(statistic="mean")), "std": float(s.sel(statistic="std")),
            "p2_5": float(s.sel(statistic="p2.5")), "p50": float(s.sel(statistic="p50")),
            "p97_5": float(s.sel(statistic="p97.5")),
            "std_over_linear_error": float(ds[f"{name}_spread_ratio"].sel(sel)),
            "members": n_member,
        }

    for section in ds["section"].values:
        for name in CLASS_OUTPUTS:
            for layer in ds["class"].values:
                rows.append(row(str(section), name, str(layer),
                                {"section": section, "class": layer}))
        for name in SCALAR_OUTPUTS:
            rows.append(row(str(section), name, "", {"section": section}))
    return rows


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return "" if not np.isfinite(value) else f"{value:.10g}"
    return str(value)


def write_ensemble(ds: xr.Dataset, out_dir: str | os.PathLike) -> list[Path]:
    """Write ``ensemble_summary.csv`` and ``ensemble.nc`` into ``out_dir`` atomically.

    Both files are written into a temporary folder next to ``out_dir`` and
    only then moved in (the folder renamed when ``out_dir`` does not exist,
    else each file replaced), so a failure leaves no partial files.

    Parameters
    ----------
    ds : xr.Dataset
        Result of :func:`run_ensemble`.
    out_dir : path
        Destination folder.

    Returns
    -------
    list of Path
        The files written.
    """
    out = Path(out_dir)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.tmp-", dir=out.parent))
    names = ("ensemble_summary.csv", "ensemble.nc")
    try:
        with open(tmp / names[0], "w", newline="") as fh:
            writer = csv.DictWriter(fh, fieldnames=SUMMARY_COLUMNS)
            writer.writeheader()
            for r in summary_rows(ds):
                writer.writerow({k: _fmt(v) for k, v in r.items()})
        ds.to_netcdf(tmp / names[1])
        if not out.exists():
            tmp.rename(out)
        else:
            for name in names:
                os.replace(tmp / name, out / name)
            shutil.rmtree(tmp, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return [out / n for n in names]


def _perturbation_from_args(args: Any) -> Perturbation:
    """Optional perturbation settings on the CLI namespace (defaults otherwise)."""
    default = Perturbation()
    kwargs = {}
    for name in ("temperature", "salinity", "pressure", "mode", "reference_range",
                 "prior_factor", "constraints"):
        value = getattr(args, name, None)
        if value is not None:
            kwargs[name] = tuple(value) if isinstance(value, list) else value
    return dataclasses.replace(default, **kwargs)


def local_cluster(workers: int, *, keep_malloc_trim: bool = False) -> Any:
    """A dask.distributed LocalCluster of single-threaded worker processes for ensembles.

    dask.distributed starts workers with ``MALLOC_TRIM_THRESHOLD_=65536``
    (``distributed.nanny.pre-spawn-environ``) to hand freed memory back to
    the system early. Setting it also switches off glibc's adaptive mmap
    threshold, so every temporary array above 128 kB of the operator build
    (there are many, several MB each) gets fresh pages and page-faults them
    in again: members ran 2-3 times slower on the workers than in the
    client process. Clusters made here keep glibc's default unless
    ``keep_malloc_trim``; the one-thread BLAS settings stay.

    dask's own monitoring (the event-loop tick every 20 ms, system monitor
    every 0.5 s, the workers' statistical profiler sampling every task every
    10 ms) took about 18 % of one core of an idle 2-worker cluster on a
    2-core machine: processor time the members then lack. Clusters made here
    tick every second, poll the system every 2 s and do not profile
    (:data:`QUIET_CLUSTER`); there is no dashboard to show those anyway.

    Parameters
    ----------
    workers : int
        Number of worker processes (one thread each).
    keep_malloc_trim : bool
        Keep dask's ``MALLOC_TRIM_THRESHOLD_`` setting.

    Returns
    -------
    distributed.LocalCluster
        Started, without a dashboard; close it when done.
    """
    import dask
    from distributed import LocalCluster

    def start() -> Any:
        with warnings.catch_warnings():
            # without a dashboard the scheduler still serves /health on the default port and
            # warns when another cluster holds it; it then takes a free port
            warnings.filterwarnings("ignore", message="Port .* is already in use")
            return LocalCluster(n_workers=max(int(workers), 1), threads_per_worker=1,
                                processes=True, dashboard_address=None)

    with dask.config.set(QUIET_CLUSTER):
        if keep_malloc_trim:
            return start()
        return _without_malloc_trim(start)


#: dask settings of the clusters of :func:`local_cluster` (see there).
QUIET_CLUSTER = {
    "distributed.admin.tick.interval": "1s",
    "distributed.admin.system-monitor.interval": "2s",
    "distributed.worker.profile.enabled": False,
}


def _without_malloc_trim(start: Callable[[], Any]) -> Any:
    """Start a cluster with glibc's default malloc trimming on its workers (see local_cluster)."""
    import dask

    # None unsets a pre-spawn variable; a value left in this process's environment by an
    # earlier cluster (dask writes it here before spawning) is removed while workers start
    inherited = os.environ.pop("MALLOC_TRIM_THRESHOLD_", None)
    try:
        with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_":
                              None}):
            return start()
    finally:
        if inherited is not None:
            os.environ["MALLOC_TRIM_THRESHOLD_"] = inherited


def ensemble_main(args: Any) -> int:
    """The ``sectionkit ensemble`` command.

    Parameters
    ----------
    args : argparse.Namespace
        ``config``, ``members``, ``out``, ``scheduler`` (address of an
        existing scheduler or None), ``workers`` (local worker processes),
        ``seed`` and ``serial`` (no dask).

    Returns
    -------
    int
        Exit status (0).
    """
    config = load_config(args.config)
    perturb = _perturbation_from_args(args)
    cluster = client = None
    if not args.serial:
        from distributed import Client

        if args.scheduler:
            client = Client(args.scheduler)
        else:
            cluster = local_cluster(args.workers)
            client = Client(cluster)
    where = "serially" if client is None else (
        f"on {len(client.scheduler_info().get('workers', {}))} dask worker(s)")
    print(f"{config.title}: {args.members} members {where}, seed {args.seed}", file=sys.stderr)
    try:
        ds = run_ensemble(config, args.members, seed=args.seed, client=client, perturb=perturb,
                          progress=True)
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    written = write_ensemble(ds, args.out)
    print(f"{config.title}: wrote {', '.join(p.name for p in written)} to {args.out}")
    for section in ds["section"].values:
        parts = []
        for name in ("net", "heat", "overturning"):
            s = ds[f"{name}_summary"].sel(section=section)
            parts.append(f"{name} {float(s.sel(statistic='mean')):+.3f} "
                         f"± {float(s.sel(statistic='std')):.3f} "
                         f"{ds[name].attrs.get('display_units', ds[name].attrs['units'])}")
        print(f"  {section}: " + ", ".join(parts))
    return 0


def members_equal(a: xr.Dataset, b: xr.Dataset, names: Iterable[str] | None = None) -> float:
    """Largest relative difference between the per-member outputs of two ensembles.

    Parameters
    ----------
    a, b : xr.Dataset
        Results of :func:`run_ensemble`.
    names : iterable of str, optional
        Variables to compare (default: every variable with a member dimension).

    Returns
    -------
    float
        max |a - b| / max(|a|, tiny) over all compared values, dimensionless.
    """
    names = list(names) if names is not None else [v for v in a.data_vars
                                                   if "member" in a[v].dims]
    worst = 0.0
    for name in names:
        x, y = a[name].values, b[name].values
        both_nan = np.isnan(x) & np.isnan(y)
        scale = max(float(np.nanmax(np.abs(x))) if np.isfinite(x).any() else 0.0, 1e-300)
        diff = np.where(both_nan, 0.0, np.abs(x - y))
        worst = max(worst, float(np.nanmax(diff)) / scale if diff.size else 0.0)
        if np.any(np.isnan(x) != np.isnan(y)):
            return float("inf")
    return worst

