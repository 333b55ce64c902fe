"""Benchmarks of the section pipeline, reference updates, ensembles and model-output memory.

Each function measures one goal and returns a :class:`Measurement`; the
project runner ``benchmarks/run.py`` prints them one line per goal.

- :func:`pipeline_vs_floor` — the whole chain of one long line (200
  stations, 1 dbar grid, 6000 dbar: TEOS-10 dynamic height, references,
  class operator, budgets and a mass-conserving inverse) against the floor
  of gsw.geo_strf_dyn_height alone on the same profiles. Goal <= 3x.
- :func:`reference_update` — a changed global reference turned into new
  class transports (``Study.references`` + ``SectionOperator.transports``)
  against recomputing the operators. Goal <= 1/100.
- :func:`ensemble_scaling` — ensemble members per second on a
  dask.distributed LocalCluster with 2 worker processes against 1. Goal >=
  1.7x.
- :func:`model_output_memory` — peak memory of a 1000-record model-output
  section computed in chunks along time, against the same with 100
  records, each in a fresh subprocess. Goal: growth <= 1.25x (bounded).
- :func:`profile_pipeline` — cProfile of the long-line pipeline, the top
  functions by own time.
- :func:`class_chain_parts` — processor time of each step of the
  density-class chain (deciding densities, class levels, class integrals,
  Ekman class shares) on the long line's own inputs, against the floor.
- :func:`equation_of_state_parts` — processor time of sectionkit's 75-term
  specific volume kernel against gsw.specvol and gsw.rho on the long line's
  grid points, and of the specific-volume pass on the 1 dbar line and on a
  2 dbar grid refined to 1 dbar, against the floor.

Everything runs on invented data (the test helpers in ``tests/_synthetic.py``).
"""

from __future__ import annotations

import cProfile
import io
import json
import os
import pstats
import statistics
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def _ensure_importable() -> None:
    """Let the script run from a source checkout without installing the package.

    The invented sections of the tests (``tests/_synthetic.py``) are the benchmarks' input too.
    """
    try:
        import sectionkit  # noqa: F401
    except ImportError:
        sys.path.insert(0, str(ROOT))
    if str(ROOT / "tests") not in sys.path:
        sys.path.insert(0, str(ROOT / "tests"))


@dataclass
class Measurement:
    """One measured goal.

    Attributes
    ----------
    name : str
        What was measured.
    value : float
        The measurement, in ``unit``.
    goal : float
        The goal, in ``unit``.
    kind : {"<=", ">="}
        Whether the value must be at most or at least the goal.
    unit : str
        ``"x"`` for ratios, ``"s"``, ``"MB"``.
    details : dict
        Supporting numbers for the record (seconds, sizes).
    """

    name: str
    value: float
    goal: float
    kind: str = "<="
    unit: str = "x"
    details: dict[str, Any] = field(default_factory=dict)

    @property
    def met(self) -> bool:
        """True when the goal is met."""
        return self.value <= self.goal if self.kind == "<=" else self.value >= self.goal

    @property
    def shortfall(self) -> float:
        """Factor by which the goal is missed (1 when met)."""
        if self.met:
            return 1.0
        return self.value / self.goal if self.kind == "<=" else self.goal / self.value

    def line(self) -> str:
        """``<name>: <measured> (goal <goal>) met`` or ``... short (by X)``."""
        verdict = "met" if self.met else f"short (by {self.shortfall:.2f}x)"
        return (f"{self.name}: {_fmt(self.value, self.unit)} "
                f"(goal {self.kind} {_fmt(self.goal, self.unit)}) {verdict}")


def _fmt(value: float, unit: str) -> str:
    if unit == "x":
        return f"{value:.4g}x" if value >= 0.1 else f"1/{1 / value:.0f}"
    return f"{value:.4g} {unit}"


def _median_time(func: Callable[[], Any], repeats: int) -> tuple[float, list[float]]:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return statistics.median(times), times


def interleaved_ms(steps: dict[str, Callable[[], Any]], rounds: int) -> dict[str, float]:
    """Fastest processor time of each step over ``rounds`` rounds that run every step in turn.

    Parameters
    ----------
    steps : dict of str -> callable
        The steps to time, by label.
    rounds : int
        Number of rounds.

    Returns
    -------
    dict of str -> float
        Milliseconds by label, and ``load``: the 1-minute load average at the end.
    """
    best = dict.fromkeys(steps, float("inf"))
    for _ in range(rounds):
        for label, step in steps.items():
            start = time.process_time()
            step()
            best[label] = min(best[label], time.process_time() - start)
    out = {label: 1e3 * t for label, t in best.items()}
    out["load"] = os.getloadavg()[0]
    return out


# ---------------------------------------------------------------- the long line
def long_line_study(n_station: int = 200, dp: float = 1.0, p_max: float = 6000.0):
    """Configuration and canonical section of an invented long line.

    Five classes (interfaces at sigma_0 26.8 and 27.5, sigma_2 36.95, sigma_4
    45.9), a 3000 dbar level of no motion, an Ekman stress and a
    mass-conserving inverse.

    Returns
    -------
    config : sectionkit.config.Config
    sections : dict of str -> xr.Dataset
    """
    _ensure_importable()
    from _synthetic import synthetic_section

    from sectionkit.config import parse_config

    section = synthetic_section(n_station, dp, p_max, lat=30.0, seed=0, name="line", noise=10.0)
    config = parse_config({
        "title": "invented long line",
        "grid": {"dp": dp},
        "sections": [{"name": "line", "file": "line.nc"}],
        "reference": {"pressure": 3000.0},
        "ekman": {"stress": {"line": [0.05, 0.0]}},
        "layers": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 27.5, "p_ref": 0.0},
                                  {"sigma": 36.95, "p_ref": 2000.0},
                                  {"sigma": 45.9, "p_ref": 4000.0}]},
        "inverse": {"conserve": ["mass"], "noise_layer": [1.0] * 5},
    })
    return config, {"line": section}


def notebook_peer(sa: np.ndarray, ct: np.ndarray, p: np.ndarray, lon: np.ndarray,
                  lat: np.ndarray, faces: list[tuple[float, float]],
                  reference_pressure: float) -> np.ndarray:
    """Class volume transports as a hand-written notebook computes them (plain gsw + numpy).

    Dynamic height, in-situ density and one potential density per interface
    reference pressure with gsw on the whole section; then a loop over
    station pairs: velocity relative to the reference pressure (or the
    deepest common level), pair-mean densities, a class per level (how
    many interfaces it is denser than) and the class sums of velocity times
    cell height times pair width (volume), density-weighted (mass) and heat.
    No inverse, no bottom triangles.

    Parameters
    ----------
    sa, ct : ndarray (station, level)
        Absolute Salinity (g/kg) and Conservative Temperature (degC); NaN below the bottom.
    p : ndarray (level,)
        Pressure grid, dbar.
    lon, lat : ndarray (station,)
        Station positions, degrees.
    faces : list of (sigma, p_ref)
        Class interfaces, kg m^-3 and dbar.
    reference_pressure : float
        Level of no motion, dbar.

    Returns
    -------
    ndarray (3, class)
        Volume (m^3 s^-1), mass (kg s^-1) and heat (W) transports per class.
    """
    import gsw

    psi = gsw.geo_strf_dyn_height(sa, ct, p, p_ref=0.0, axis=1, max_dp=1.0)
    rho = gsw.rho(sa, ct, p)
    sigma = {pr: gsw.rho(sa, ct, pr) - 1000.0 for pr in sorted({pr for _, pr in faces})}
    dist = np.ravel(gsw.distance(lon, lat))  # m, between neighbouring stations
    dz = -np.diff(gsw.z_from_p(p, lat.mean()))
    dz = np.concatenate([dz[:1] / 2, 0.5 * (dz[:-1] + dz[1:]), dz[-1:] / 2])
    out = np.zeros((3, len(faces) + 1))
    for j in range(sa.shape[0] - 1):
        f = gsw.f(0.5 * (lat[j] + lat[j + 1]))
        v = (psi[j + 1] - psi[j]) / (f * dist[j])
        ok = np.isfinite(v)
        if ok.sum() < 2:
            continue
        k_ref = min(int(np.searchsorted(p, reference_pressure)), int(np.flatnonzero(ok)[-1]))
        v = v - v[k_ref]
        r = 0.5 * (rho[j] + rho[j + 1])
        heat = r * 3991.86795711963 * 0.5 * (ct[j] + ct[j + 1])
        klass = np.zeros(p.size, dtype=int)
        for value, pr in faces:
            klass += 0.5 * (sigma[pr][j] + sigma[pr][j + 1]) > value
        flux = np.where(ok, v * dz * dist[j], 0.0)
        for q, weight in enumerate((1.0, np.where(ok, r, 0.0), np.where(ok, heat, 0.0))):
            out[q] += np.bincount(klass, weights=flux * weight, minlength=out.shape[1])
    return out


def pipeline_vs_floor(quick: bool = False) -> list[Measurement]:
    """Whole chain of a 200-station, 1 dbar, 6000 dbar line against gsw dynamic height alone,
    and against a hand-written notebook peer on the same line.

    The floor (gsw.geo_strf_dyn_height alone), sectionkit's chain
    (``Study.from_config`` + ``solve``: dynamic height, references, classes,
    budgets and a mass-conserving inverse) from scratch (nothing kept from an
    earlier build: :func:`sectionkit.operator.clear_kept_parts` first), the
    same chain as a rebuild (for the record) and the peer
    (:func:`notebook_peer`, same classes and reference, no inverse) are timed
    in turn in each round, so all see the same machine load; the fastest
    round of each counts.

    Parameters
    ----------
    quick : bool
        3 rounds instead of 9 (after one cold run of each).

    Returns
    -------
    list of Measurement
        The chain's time over the floor's (goal <= 3), and the peer's time
        over the chain's (goal >= 2); details hold the seconds of each stage.
    """
    import gsw

    from sectionkit.operator import clear_kept_parts
    from sectionkit.study import Study

    config, sections = long_line_study()
    sec = sections["line"]
    sa, ct, p = sec["SA"].values, sec["CT"].values, sec["pressure"].values
    lon, lat = sec["lon"].values, sec["lat"].values
    faces = [(face.sigma, face.p_ref) for face in config.interfaces]
    rounds = 3 if quick else 9

    def floor() -> None:
        gsw.geo_strf_dyn_height(sa, ct, p, p_ref=0.0, axis=1, max_dp=1.0)

    def full() -> None:
        # from scratch: nothing kept from an earlier build of these stations
        clear_kept_parts()
        Study.from_config(config, sections=sections).solve()

    def full_kept() -> None:
        # a rebuild of the same stations (ensemble members, reruns): position-only parts kept
        Study.from_config(config, sections=sections).solve()

    def peer() -> None:
        notebook_peer(sa, ct, p, lon, lat, faces, config.reference.pressure)

    start = time.perf_counter()
    full()  # the first (cold) run also pays page faults of the large temporaries
    cold = time.perf_counter() - start
    peer()
    times: dict[str, list[float]] = {"floor": [], "full": [], "full_kept": [], "peer": []}
    load_before = os.getloadavg()[0]
    for _ in range(rounds):  # interleaved: the same load for all of them
        for label, func in (("floor", floor), ("full", full), ("full_kept", full_kept),
                            ("peer", peer)):
            t0 = time.perf_counter()
            func()
            times[label].append(time.perf_counter() - t0)
    load_after = os.getloadavg()[0]
    study = Study.from_config(config, sections=sections)
    t_build, _ = _median_time(lambda: Study.from_config(config, sections=sections), 3)
    t_solve, _ = _median_time(study.solve, 3)
    best = {k: min(v) for k, v in times.items()}
    details = {"floor_s (fastest)": best["floor"], "pipeline_s (fastest)": best["full"],
               "peer_s (fastest)": best["peer"],
               "pipeline_rebuild_s (fastest; position-only parts kept)": best["full_kept"],
               "pipeline_median_s": statistics.median(times["full"]),
               "pipeline_cold_s": cold, "operators_median_s": t_build,
               "solve_median_s": t_solve, "rounds": rounds,
               "load_average_1min_before": load_before, "load_average_1min_after": load_after,
               "grid": f"{sa.shape[0]} stations x {sa.shape[1]} levels"}
    return [
        Measurement("full pipeline (200 stations, 1 dbar, 6000 dbar) / gsw dynamic height alone",
                    best["full"] / best["floor"], 3.0, details=details),
        Measurement("hand-written gsw+numpy notebook peer / sectionkit full pipeline "
                    "(same line, classes, reference)", best["peer"] / best["full"], 2.0,
                    kind=">=", details={"peer_s": best["peer"], "pipeline_s": best["full"]}),
    ]


def reference_update(quick: bool = False) -> Measurement:
    """A changed reference level turned into new class transports, against a full recompute.

    Parameters
    ----------
    quick : bool
        Fewer repeats.

    Returns
    -------
    Measurement
        Ratio of the update's wall time to rebuilding the operators and
        computing the same transports.
    """
    import dataclasses

    from sectionkit.study import Study

    config, sections = long_line_study()
    study = Study.from_config(config, sections=sections)
    ekman = study.ekman()
    levels = iter(np.tile(np.linspace(1000.0, 4000.0, 31), 100))

    def update() -> dict[str, np.ndarray]:
        study.config.reference = dataclasses.replace(study.config.reference,
                                                     pressure=float(next(levels)))
        refs = study.references()
        return {name: op.transports(refs[name].offset, 0.0, ekman[name]).sum(axis=-2)
                for name, op in study.operators.items()}

    def recompute() -> None:
        fresh = Study.from_config(config, sections=sections)
        refs = fresh.references()
        for name, op in fresh.operators.items():
            op.transports(refs[name].offset, 0.0, ekman[name]).sum(axis=-2)

    update()
    t_update, _ = _median_time(update, 10 if quick else 50)
    t_full, _ = _median_time(recompute, 1 if quick else 3)
    return Measurement("reference update / full recompute (200-station line)",
                       t_update / t_full, 0.01,
                       details={"update_s": t_update, "recompute_s": t_full})


# ---------------------------------------------------------------- ensembles
def ensemble_box(n_station: int = 40, dp: float = 2.0):
    """An invented two-line box whose members cost a few tenths of a second each.

    Returns
    -------
    config : sectionkit.config.Config
    sections : dict of str -> xr.Dataset
    """
    _ensure_importable()
    from _synthetic import synthetic_section

    from sectionkit.config import parse_config

    config = parse_config({
        "title": "invented ensemble box",
        "grid": {"dp": dp},
        "sections": [{"name": "south", "file": "south.nc"},
                     {"name": "north", "file": "north.nc", "into_box": False}],
        "reference": {"pressure": 3000.0},
        "ekman": {"stress": {"south": [0.05, 0.0]}},
        "layers": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0},
                                  {"sigma": 36.95, "p_ref": 2000.0}],
                   "names": ["upper", "intermediate", "deep"]},
        "inverse": {"conserve": ["mass", "salt"], "noise_layer": [1.0, 0.5, 0.5],
                    "prior_velocity": 0.01},
    })
    sections = {
        "south": synthetic_section(n_station, dp, 5000.0, lat=28.0, seed=1, name="south",
                                   noise=20.0),
        "north": synthetic_section(n_station + 5, dp, 5000.0, lat=34.0, seed=2, name="north",
                                   noise=20.0),
    }
    return config, sections


def ensemble_scaling(quick: bool = False) -> Measurement:
    """Members per second with 2 worker processes against 1 (LocalCluster, 1 thread each).

    Clusters come from :func:`sectionkit.ensemble.local_cluster` (as the
    ``sectionkit ensemble`` command makes them). Cluster start-up and a
    warm-up member (imports on the workers) are not timed; the ensemble
    perturbs sensors, the reference level and the priors, so every member
    rebuilds both operators and solves the inverse (plus one task for the
    unperturbed run). Each cluster runs the ensemble 2 (quick) or 3 times
    and the fastest counts. The full run also times 2 workers with dask's
    default ``MALLOC_TRIM_THRESHOLD_`` for the record.

    Parameters
    ----------
    quick : bool
        8 members instead of 32.

    Returns
    -------
    Measurement
        Throughput ratio (2 workers / 1 worker).
    """
    from distributed import Client

    from sectionkit.ensemble import Perturbation, local_cluster, members_equal, run_ensemble

    config, sections = ensemble_box()
    perturb = Perturbation(reference_range=(2000.0, 3500.0), prior_factor=(0.5, 2.0))
    members = 8 if quick else 32
    rounds = 2 if quick else 3
    setups = [("1w", 1, False), ("2w", 2, False)]
    if not quick:
        setups.append(("2w_dask_malloc_trim", 2, True))
    times: dict[str, float] = {}
    runs = {}
    capacity_before = parallel_capacity()
    load_before = os.getloadavg()[0]
    for label, workers, keep in setups:
        # one cluster at a time (idle clusters still poll), fastest of a few rounds: bursts of
        # other jobs on a shared machine only ever add time
        with local_cluster(workers, keep_malloc_trim=keep) as cluster, Client(cluster) as client:
            run_ensemble(config, workers, seed=99, client=client, perturb=perturb,
                         sections=sections)  # warm-up: imports on every worker
            best = float("inf")
            for _ in range(rounds):
                start = time.perf_counter()
                runs[label] = run_ensemble(config, members, seed=1, client=client,
                                           perturb=perturb, sections=sections)
                best = min(best, time.perf_counter() - start)
            times[label] = best
    start = time.perf_counter()
    serial = run_ensemble(config, members, seed=1, perturb=perturb, sections=sections)
    t_serial = time.perf_counter() - start
    same = max(members_equal(r, serial) for r in runs.values())
    capacity = parallel_capacity()
    details = {"machine_2_process_capacity_before_x": capacity_before["capacity_x"],
               "machine_2_process_capacity_after_x": capacity["capacity_x"],
               "load_average_1min_before": load_before,
               "load_average_1min_after": os.getloadavg()[0],
               "one_worker_s": times["1w"], "two_workers_s": times["2w"],
               "serial_in_client_s": t_serial, "members": members,
               "members_per_s_2w": members / times["2w"], "max_rel_diff_vs_serial": same}
    if "2w_dask_malloc_trim" in times:
        details["two_workers_with_dask_MALLOC_TRIM_THRESHOLD_s"] = times["2w_dask_malloc_trim"]
    return Measurement(
        f"ensemble throughput 2 workers / 1 worker ({members} members)",
        times["1w"] / times["2w"], 1.7, kind=">=", details=details,
    )


#: The demo box as it was when the earlier engine's figure was recorded: the two bundled
#: CF-NetCDF lines, four interfaces, a mass- and salt-conserving inverse (the bundled demo
#: has since read its northern line from WHP-Exchange files with bottle tracers and LADCP
#: priors, which a member also carries; that is other work, so it is not the box measured).
DEMO_BOX_TOML = """
title = "Orinel Basin demo box as recorded for issue 16 (invented)"
[grid]
dp = 2.0
[[sections]]
name = "south"
file = "south_line.nc"
into_box = true
[[sections]]
name = "north"
file = "north_line.nc"
into_box = false
[[boxes]]
name = "interior"
enters = ["south"]
leaves = ["north"]
[reference]
pressure = 3000.0
bottom_triangle = "constant"
[ekman]
depth = 50.0
stress = { south = [-0.06, 0.0], north = [0.08, 0.0] }
[layers]
interfaces = [
  { sigma = 27.0, p_ref = 0.0 },
  { sigma = 32.15, p_ref = 1000.0 },
  { sigma = 36.98, p_ref = 2000.0 },
  { sigma = 45.92, p_ref = 4000.0 },
]
names = ["upper", "intermediate", "upper_deep", "lower_deep", "bottom"]
[inverse]
solver = "gauss-markov"
conserve = ["mass", "salt"]
prior_velocity = 0.02
prior_diapycnal = 3.0
prior_ekman = 0.3
noise_total = 0.5
noise_layer = [1.0, 0.7, 0.7, 0.7, 0.3]
noise_salt = [4.0, 2.5, 0.3, 0.1, 0.05]
known = [{name = "sennet_strait", transport = 0.8, noise = 0.2, layer = "upper", box = "interior"}]
section_net = [ { section = "south", transport = 0.0, noise = 1.0 } ]
"""


def demo_box_config(folder: Path) -> Path:
    """Write :data:`DEMO_BOX_TOML` into ``folder`` beside links to the bundled demo lines."""
    _ensure_importable()
    from sectionkit.demo import bundled_demo_config

    bundled = bundled_demo_config().parent
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("south_line.nc", "north_line.nc"):
        target = folder / name
        if not target.exists():
            target.symlink_to(bundled / name)
    path = folder / "demo_box.toml"
    path.write_text(DEMO_BOX_TOML)
    return path


#: Members per second of the demo-box ensemble on 2 local workers, measured with
#: :func:`demo_ensemble_throughput` (200 members) on the engine before the one-pass
#: changes (commit af7f1fd), on the 2-core machine of that day: the figure the goal
#: multiplied when issue 16 was filed. Machines differ: the goal is measured against
#: that engine run side by side on this machine (:data:`EARLIER_ENGINE`).
DEMO_ENSEMBLE_BASELINE_MEMBERS_PER_S = 16.36  # fastest of 2 runs (13.46, 16.36), load 0.1-1.3
#: The engine whose ensemble figure the goal multiplies (git revision).
EARLIER_ENGINE = "af7f1fd"
#: Required gain in members per second over that engine.
DEMO_ENSEMBLE_GOAL_FACTOR = 3.0


def demo_ensemble_throughput(quick: bool = False, members: int | None = None,
                             compare: int | None = None, progress: bool = True,
                             earlier: str | None = None) -> list[Measurement]:
    """Members per second of a demo-box ensemble on 2 worker processes.

    The box is :data:`DEMO_BOX_TOML` (the demo box as it was when the earlier
    engine's figure was recorded). Every member perturbs the CTD sensors (per
    station), the global reference pressure (2000-3500 dbar) and the prior
    standard deviations (factor 0.5-2), so it rebuilds both operators and solves the inverse. The
    cluster comes from :func:`sectionkit.ensemble.local_cluster` (as the
    ``sectionkit ensemble`` command makes it); cluster start-up and a
    warm-up ensemble are not timed. The first ``compare`` members are then
    run serially in this process and must equal the cluster's bit for bit
    (a member's draws do not depend on the ensemble size).

    Parameters
    ----------
    quick : bool
        100 members instead of 1000 (and 20 compared instead of 100).
    members, compare : int, optional
        Override the number of members and of serially compared members.
    progress : bool
        Show the ensemble's text progress bar on stderr.
    earlier : str, optional
        A source tree of the earlier engine (:data:`EARLIER_ENGINE`): both
        engines then also run 200 members (50 quick) in turn, each in its
        own interpreter and cluster, alternating, so that both see the same
        machine load; the gain of those runs is the goal. Without it, the
        1000-member rate is compared with the figure recorded on the
        machine of the day (:data:`DEMO_ENSEMBLE_BASELINE_MEMBERS_PER_S`).

    Returns
    -------
    list of Measurement
        The gain over the earlier engine (goal ``DEMO_ENSEMBLE_GOAL_FACTOR``),
        or members per second against the recorded figure; then the largest
        relative difference of the 1000-member cluster run from the serial
        run (goal 0: bit for bit).
    """
    import tempfile

    from distributed import Client

    from sectionkit.config import load_config
    from sectionkit.ensemble import Perturbation, local_cluster, members_equal, run_ensemble

    box = demo_box_config(Path(tempfile.mkdtemp(prefix="sectionkit-demo-box-")))
    config = load_config(box)
    perturb = Perturbation(reference_range=(2000.0, 3500.0), prior_factor=(0.5, 2.0))
    n = members or (100 if quick else 1000)
    n_cmp = min(compare or (20 if quick else 100), n)
    out: list[Measurement] = []
    if earlier:
        n_side = 50 if quick else 200
        both = side_by_side({"this": str(ROOT), "earlier": earlier}, n_side, str(box))
        gain = both["this"] / both["earlier"]
        out.append(Measurement(
            f"demo-box ensemble, 2 workers, members per second: this engine / the engine at "
            f"{EARLIER_ENGINE} (alternating runs of {n_side} members)", gain,
            DEMO_ENSEMBLE_GOAL_FACTOR, kind=">=",
            details={"this_members_per_s": both["this"],
                     "earlier_members_per_s": both["earlier"],
                     "earlier_engine_figure_recorded_on_the_machine_of_the_day":
                         DEMO_ENSEMBLE_BASELINE_MEMBERS_PER_S}))
    load_before = os.getloadavg()[0]
    with local_cluster(2) as cluster, Client(cluster) as client:
        run_ensemble(config, 4, seed=99, client=client, perturb=perturb)  # warm-up
        start = time.perf_counter()
        ens = run_ensemble(config, n, seed=1, client=client, perturb=perturb,
                           progress=progress)
        elapsed = time.perf_counter() - start
    load_after = os.getloadavg()[0]
    start = time.perf_counter()
    serial = run_ensemble(config, n_cmp, seed=1, perturb=perturb)
    t_serial = time.perf_counter() - start
    names = [v for v in serial.data_vars if "member" in serial[v].dims]
    first = ens.isel(member=slice(0, n_cmp))
    same = members_equal(first, serial, names)
    rate = n / elapsed
    details = {"seconds": elapsed, "members": n, "members_per_s": rate,
               "serial_members_per_s (in this process)": n_cmp / t_serial,
               f"max_rel_diff_vs_serial (first {n_cmp} members)": same,
               "load_average_1min_before": load_before,
               "load_average_1min_after": load_after}
    if not earlier:
        out.append(Measurement(
            f"demo-box ensemble, 2 workers ({n} members): members per second against the "
            f"figure of the engine at {EARLIER_ENGINE} recorded on the machine of the day",
            rate, DEMO_ENSEMBLE_GOAL_FACTOR * DEMO_ENSEMBLE_BASELINE_MEMBERS_PER_S, kind=">=",
            unit="members/s", details=dict(details)))
    out.append(Measurement(
        f"demo-box ensemble, 2 workers, {n} members with a progress bar "
        f"({rate:.1f} members/s): largest relative difference from the serial run "
        f"(first {n_cmp} members)", same, 0.0, kind="<=", unit="(0 = bit for bit)",
        details=details))
    return out


_SIDE_BY_SIDE = """
import json, sys, time
sys.path.insert(0, {root!r})
from distributed import Client
from sectionkit.config import load_config
from sectionkit.ensemble import Perturbation, local_cluster, run_ensemble
config = load_config({config!r})
perturb = Perturbation(reference_range=(2000.0, 3500.0), prior_factor=(0.5, 2.0))
with local_cluster(2) as cluster, Client(cluster) as client:
    run_ensemble(config, 4, seed=99, client=client, perturb=perturb)
    start = time.perf_counter()
    run_ensemble(config, {members}, seed=1, client=client, perturb=perturb)
    print(json.dumps({{"members_per_s": {members} / (time.perf_counter() - start)}}))
"""


def side_by_side(engines: dict[str, str], members: int, config: str, rounds: int = 2
                 ) -> dict[str, float]:
    """Members per second of the demo-box ensemble (2 workers) of several engines, alternated.

    Each engine (a source tree holding ``sectionkit`` and ``demo_sections``)
    runs in its own interpreter and cluster; the rounds alternate between
    the engines so that they share the machine's load; the fastest round of
    each counts.

    Parameters
    ----------
    engines : dict of str -> str
        Label -> source tree.
    members : int
        Members per run.
    config : str
        The configuration file both engines run.
    rounds : int
        Runs of each engine.

    Returns
    -------
    dict of str -> float
        Members per second by label.
    """
    best: dict[str, float] = {}
    for _ in range(rounds):
        for label, root in engines.items():
            env = {**os.environ, "PYTHONPATH": root}
            proc = subprocess.run([sys.executable, "-c",
                                   _SIDE_BY_SIDE.format(root=root, members=members,
                                                        config=config)],
                                  capture_output=True, text=True, check=True, env=env,
                                  cwd=root)
            rate = json.loads(proc.stdout.strip().splitlines()[-1])["members_per_s"]
            best[label] = max(best.get(label, 0.0), rate)
    return best


def _capacity_work(n: int) -> float:
    """CPU-bound numpy work of a fixed size (what two cores can do at once)."""
    rng = np.random.default_rng(n)
    a = rng.standard_normal((400, 400))
    total = 0.0
    for _ in range(12):
        total += float(np.tanh(a @ a.T / 400.0).sum())
        a = np.sin(a) + 1e-3 * rng.standard_normal(a.shape)
    return total


def parallel_capacity(tasks: int = 8) -> dict[str, float]:
    """Speed-up of 2 processes over 1 on plain numpy work, measured now.

    On a machine shared with other jobs this is what two workers can get at
    best; it puts the ensemble scaling in context.

    Returns
    -------
    dict
        ``one_process_s``, ``two_processes_s`` and ``capacity_x``.
    """
    import multiprocessing as mp

    ctx = mp.get_context("spawn")
    times = {}
    for procs in (1, 2):
        with ctx.Pool(procs) as pool:
            pool.map(_capacity_work, range(procs))
            start = time.perf_counter()
            pool.map(_capacity_work, range(tasks), chunksize=1)
            times[procs] = time.perf_counter() - start
    return {"one_process_s": times[1], "two_processes_s": times[2],
            "capacity_x": times[1] / times[2]}


# ---------------------------------------------------------------- model-output memory
def _peak_rss_mb() -> float:
    """Peak resident set size of this process, MB (VmHWM; unlike ru_maxrss it is not
    inherited from the parent across fork and exec)."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    import resource  # pragma: no cover - not Linux

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _memory_child(n_time: int, chunk: int, n_station: int) -> dict[str, float]:
    """Run in a fresh interpreter: a chunked model-output line to time series; peak memory."""
    import dask

    _ensure_importable()
    from _synthetic import synthetic_model_output

    from sectionkit.config import parse_config
    from sectionkit.modelsection import section_time_series

    config = parse_config({
        "grid": {"dp": 10.0},
        "sections": [{"name": "line", "file": "line.nc"}],
        "reference": {"pressure": "bottom"},
        "layers": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0},
                                  {"sigma": 36.95, "p_ref": 2000.0}]},
    })
    base = _peak_rss_mb()
    model = synthetic_model_output(n_time, n_station, chunks=chunk)
    start = time.perf_counter()
    series = section_time_series(model, config, "line")
    with dask.config.set(scheduler="threads", num_workers=2):
        result = series[["net", "heat", "overturning", "volume_transport"]].compute()
    seconds = time.perf_counter() - start
    peak = _peak_rss_mb()
    n_level = int(series.sizes["pressure"])
    return {
        "n_time": n_time, "chunk": chunk, "seconds": seconds,
        "peak_rss_mb": peak, "rss_after_imports_mb": base, "growth_mb": peak - base,
        "canonical_sa_ct_mb": 2 * n_time * n_station * n_level * 8 / 2**20,
        "finite": bool(np.isfinite(result["net"].values).all()),
    }


def _memory_run(n_time: int, chunk: int, n_station: int) -> dict[str, float]:
    code = (
        "import json, sys; sys.path.insert(0, {root!r}); sys.path.insert(0, {bench!r});"
        "from bench_pipeline import _memory_child;"
        "print(json.dumps(_memory_child({n}, {c}, {s})))"
    ).format(root=str(ROOT), bench=str(ROOT / "benchmarks"), n=n_time, c=chunk, s=n_station)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    return json.loads(proc.stdout.strip().splitlines()[-1])


def model_output_memory(quick: bool = False) -> Measurement:
    """Peak memory of a long model-output section computed in chunks along time.

    A 40-station invented model line (40 depth levels, 10 dbar canonical
    grid, ~530 levels) chunked by 20 records and computed with dask's
    threaded scheduler (2 threads); each length runs in its own subprocess,
    and the peak resident set sizes (VmHWM) are compared.

    Parameters
    ----------
    quick : bool
        200 records against 40 instead of 1000 against 100.

    Returns
    -------
    Measurement
        Peak RSS of the long run divided by that of the short one.
    """
    long_n, short_n = (200, 40) if quick else (1000, 100)
    short = _memory_run(short_n, 20, 40)
    long = _memory_run(long_n, 20, 40)
    details: dict[str, Any] = {"long": long, "short": short}
    if not quick:
        # for contrast: the short series as one chunk (memory grows with the chunk)
        details["short_as_one_chunk"] = _memory_run(short_n, short_n, 40)
    return Measurement(
        f"peak memory {long_n}-record / {short_n}-record model-output section "
        f"({long['peak_rss_mb']:.0f} MB vs {short['peak_rss_mb']:.0f} MB, chunks of 20)",
        long["peak_rss_mb"] / short["peak_rss_mb"], 1.25, details=details,
    )


# ---------------------------------------------------------------- density-class chain
def class_chain_parts(rounds: int = 9) -> dict[str, float]:
    """Processor time (ms) of each step of the density-class chain of the long line.

    One build of :func:`long_line_study` records the arguments of
    ``layers.deciding_densities``, ``layers.class_levels`` (the main call and the
    Ekman layer's), ``operator._class_integrals`` and ``operator.ekman_class_share``;
    each is then called again on them, in turn with gsw's dynamic height of the
    same line (the floor), ``rounds`` times; the fastest time of each counts.

    Returns
    -------
    dict of str -> float
        Milliseconds per call by step, and ``"floor"``; ``"load"`` is the
        1-minute load average at the end.
    """
    import gsw

    import sectionkit.operator as operator
    from sectionkit.study import Study

    config, sections = long_line_study()
    sec = sections["line"]
    recorded: dict[str, list] = {}
    names = ("deciding_densities", "class_levels", "_class_integrals", "ekman_class_share")
    originals = {name: getattr(operator, name) for name in names}

    def recorder(name: str) -> Callable[..., Any]:
        def call(*args: Any, **kwargs: Any) -> Any:
            recorded.setdefault(name, []).append((args, kwargs))
            return originals[name](*args, **kwargs)
        return call

    for name in names:
        setattr(operator, name, recorder(name))
    try:
        Study.from_config(config, sections=sections)
    finally:
        for name, func in originals.items():
            setattr(operator, name, func)
    sa, ct, p = sec["SA"].values, sec["CT"].values, sec["pressure"].values
    steps: dict[str, Callable[[], Any]] = {
        "floor": lambda: gsw.geo_strf_dyn_height(sa, ct, p, p_ref=0.0, axis=1, max_dp=1.0)}
    for name in names:
        for n, (args, kwargs) in enumerate(recorded[name]):
            label = name if n == 0 else f"{name} ({n + 1})"
            steps[label] = (lambda f=originals[name], a=args, k=kwargs: f(*a, **k))
    return interleaved_ms(steps, rounds)


def equation_of_state_parts(rounds: int = 9) -> dict[str, float]:
    """Processor time (ms) of the equation of state on the long line, against gsw and the floor.

    The long line's SA and CT (200 stations x 6001 levels at 1 dbar): specific
    volume by ``eos.specific_volume`` and by gsw.specvol, potential density at
    2000 dbar by ``eos.density_anomaly`` and by gsw.rho, the whole
    ``thermo.specific_volume_pass`` on the 1 dbar grid and on every second
    level (a 2 dbar grid integrated at ``max_dp`` = 1 dbar, as an ensemble
    member's builds), and gsw.geo_strf_dyn_height on each grid; interleaved,
    ``rounds`` times, the fastest time of each counts.

    Returns
    -------
    dict of str -> float
        Milliseconds per call by step; ``"load"`` is the 1-minute load average at the end.
    """
    import gsw

    from sectionkit.eos import density_anomaly, specific_volume
    from sectionkit.thermo import specific_volume_pass

    _, sections = long_line_study()
    sec = sections["line"]
    sa, ct, p = sec["SA"].values, sec["CT"].values, sec["pressure"].values
    sa2, ct2, p2 = np.ascontiguousarray(sa[:, ::2]), np.ascontiguousarray(ct[:, ::2]), p[::2]
    steps: dict[str, Callable[[], Any]] = {
        "floor (1 dbar)": lambda: gsw.geo_strf_dyn_height(sa, ct, p, p_ref=0.0, axis=1,
                                                          max_dp=1.0),
        "gsw.specvol": lambda: gsw.specvol(sa, ct, p),
        "eos.specific_volume": lambda: specific_volume(sa, ct, p),
        "gsw.rho(p_ref=2000) - 1000": lambda: gsw.rho(sa, ct, 2000.0) - 1000.0,
        "eos.density_anomaly(p_ref=2000)": lambda: density_anomaly(sa, ct, 2000.0),
        "specific_volume_pass (1 dbar)": lambda: specific_volume_pass(sa, ct, p, 1.0),
        "floor (2 dbar, max_dp 1)": lambda: gsw.geo_strf_dyn_height(sa2, ct2, p2, p_ref=0.0,
                                                                    axis=1, max_dp=1.0),
        "specific_volume_pass (2 dbar, max_dp 1)": lambda: specific_volume_pass(sa2, ct2, p2,
                                                                                1.0),
    }
    for step in steps.values():
        step()  # compile and warm
    return interleaved_ms(steps, rounds)


# ---------------------------------------------------------------- profile
def profile_pipeline(quick: bool = False, top: int = 25) -> str:
    """cProfile (processor time, 3 runs from scratch) of the long-line pipeline, top functions.

    Parameters
    ----------
    quick : bool
        A 100-station, 2 dbar line instead of 200 stations at 1 dbar.
    top : int
        Number of functions listed.

    Returns
    -------
    str
        The pstats listing (sorted by total own time), then by cumulative time.
    """
    from sectionkit.operator import clear_kept_parts
    from sectionkit.study import Study

    config, sections = long_line_study(100, 2.0) if quick else long_line_study()
    config.dp = sections["line"].attrs["dp"]
    Study.from_config(config, sections=sections).solve()  # warm
    # processor time (other jobs on the machine do not count), from scratch, 3 runs
    prof = cProfile.Profile(time.process_time)
    for _ in range(3):
        clear_kept_parts()
        prof.enable()
        Study.from_config(config, sections=sections).solve()
        prof.disable()
    buf = io.StringIO()
    stats = pstats.Stats(prof, stream=buf)
    stats.sort_stats("tottime").print_stats(top)
    stats.sort_stats("cumulative").print_stats(top)
    return buf.getvalue()
