"""Benchmark of the inverse solver layer at box-inverse size.

A synthetic two-box problem of realistic size: three sections of 200 station
pairs (600 reference-velocity unknowns), 18 diapycnal transfers (9 interfaces
x 2 boxes) and 3 Ekman adjustments (621 unknowns); 60 constraint rows (per box:
mass in 10 classes, total mass, salt anomaly in 10 classes, heat in 9 classes)
and about 1900 linear outputs (the along-section cumulative transport of every
pair in 3 class groups, section x class transports, section net, heat and
freshwater transports).

Timed separately: assembling E, y and the output operator G from per-pair
class operators; the Gauss–Markov solve with every diagnostic; the output
covariance G P G^T and the output standard deviations. The goal is an
interactive update (reference change -> new budget with errors) within 1 s.

Run as a script (``python benchmarks/bench_solvers.py [--quick]``) or call
:func:`run` from a project-wide runner.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

#: Seconds allowed for one full update (assembly + solve + propagation).
GOAL_SECONDS = 1.0

N_SECTIONS = 3
PAIRS_PER_SECTION = 200
N_CLASSES = 10
N_GROUPS = 3  # coarse class groups for the along-section streamfunction outputs
BOXES = ((0, 1), (1, 2))  # box b is bounded by sections BOXES[b] (enters, leaves)


def _ensure_importable() -> None:
    """Let the script run from a source checkout without installing the package."""
    try:
        import sectionkit.solvers  # noqa: F401
    except ImportError:
        sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def _synthetic_operators(rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Per-pair class operators of an invented ocean (the output of the layer step).

    Returns
    -------
    dict
        ``area`` (section, class, pair) in m^2; ``t0`` (section, class, pair)
        initial transport in Sv; ``salt`` and ``heat`` (section, class, pair)
        property anomalies per unit area, g kg^-1 and degC.
    """
    shape = (N_SECTIONS, N_CLASSES, PAIRS_PER_SECTION)
    thickness = rng.gamma(2.0, 250.0, size=shape)  # m, class thickness per pair
    width = rng.uniform(2.0e4, 6.0e4, size=(N_SECTIONS, 1, PAIRS_PER_SECTION))  # m
    area = thickness * width
    t0 = rng.normal(0.0, 0.3, size=shape)  # Sv
    salt = rng.normal(0.0, 0.2, size=shape)  # g/kg anomaly
    heat = np.linspace(20.0, 1.0, N_CLASSES)[None, :, None] + rng.normal(0.0, 0.5, size=shape)
    return {"area": area, "t0": t0, "salt": salt, "heat": heat}


def assemble(ops: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Build the constraint system and the output operator.

    Parameters
    ----------
    ops : dict
        Output of :func:`_synthetic_operators`.

    Returns
    -------
    dict
        ``E`` (60, 621) Sv per unknown unit; ``y`` (60,) Sv; ``prior`` (621,)
        variances; ``noise`` (60,) Sv^2; ``G`` (L, 621) output operator.
    """
    area, t0 = ops["area"], ops["t0"]
    sv = 1.0e-6  # m^3 s^-1 -> Sv
    n_ref = N_SECTIONS * PAIRS_PER_SECTION
    n_w = len(BOXES) * (N_CLASSES - 1)
    n_unknowns = n_ref + n_w + N_SECTIONS
    weights = {"mass": np.ones_like(area), "salt": ops["salt"], "heat": ops["heat"]}

    rows, data = [], []
    for b, (enters, leaves) in enumerate(BOXES):
        sign = np.zeros(N_SECTIONS)
        sign[enters], sign[leaves] = 1.0, -1.0
        w_cols = n_ref + b * (N_CLASSES - 1) + np.arange(N_CLASSES - 1)
        for kind, n_rows in (("mass", N_CLASSES), ("salt", N_CLASSES), ("heat", N_CLASSES - 1)):
            per_pair = sv * area * weights[kind]  # (section, class, pair)
            block = np.zeros((n_rows, n_unknowns))
            # reference velocities: sum over pairs of A_ij b_j, signed into the box
            block[:, :n_ref] = (
                (sign[:, None, None] * per_pair[:, :n_rows])
                .transpose(1, 0, 2)
                .reshape(n_rows, n_ref)
            )
            # diapycnal transfer W_i leaves class i and enters class i + 1
            for i in range(min(n_rows, N_CLASSES - 1)):
                block[i, w_cols[i]] -= 1.0
                if i + 1 < n_rows:
                    block[i + 1, w_cols[i]] += 1.0
            # Ekman adjustment (fraction of the Ekman transport) enters the top class
            block[0, n_ref + n_w :] = sign * 2.0
            initial = np.einsum("s,scp->c", sign, weights[kind][:, :n_rows] * t0[:, :n_rows])
            rows.append(block)
            data.append(-initial)
            if kind == "mass":
                rows.append(block.sum(axis=0, keepdims=True))
                data.append(-initial.sum(keepdims=True))
    E = np.vstack(rows)
    y = np.concatenate(data)

    prior = np.concatenate(
        [np.full(n_ref, 0.02**2), np.full(n_w, 1.0), np.full(N_SECTIONS, 0.3**2)]
    )
    noise = np.full(E.shape[0], 0.5**2)

    # Outputs: cumulative transport along each section per class group, section x class
    # transports, section net / heat / freshwater transports (all linear in x).
    groups = np.array_split(np.arange(N_CLASSES), N_GROUPS)
    out = []
    for s in range(N_SECTIONS):
        cols = slice(s * PAIRS_PER_SECTION, (s + 1) * PAIRS_PER_SECTION)
        for g in groups:
            cum = np.zeros((PAIRS_PER_SECTION, n_unknowns))
            cum[:, cols] = np.tril(np.ones((PAIRS_PER_SECTION, PAIRS_PER_SECTION))) * (
                sv * area[s, g].sum(axis=0)
            )
            out.append(cum)
        per_class = np.zeros((N_CLASSES, n_unknowns))
        per_class[:, cols] = sv * area[s]
        out.append(per_class)
        totals = np.zeros((3, n_unknowns))
        totals[0, cols] = sv * area[s].sum(axis=0)
        totals[1, cols] = sv * (area[s] * ops["heat"][s]).sum(axis=0)
        totals[2, cols] = -sv * (area[s] * ops["salt"][s]).sum(axis=0) / 35.0
        out.append(totals)
    G = np.vstack(out)
    return {"E": E, "y": y, "prior": prior, "noise": noise, "G": G}


def _time(func: Callable[[], Any], repeats: int) -> tuple[float, Any]:
    """Median wall time of ``repeats`` calls, s, and the last result."""
    times, result = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        result = func()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def run(quick: bool = False) -> list[tuple[str, float, float]]:
    """Time assembly, solve and propagation of a box-inverse-sized problem.

    Parameters
    ----------
    quick : bool
        One repeat per step and no alternative solvers (for a fast smoke run);
        otherwise the median of 5 repeats and the SVD and bounded solvers too.

    Returns
    -------
    list of (name, seconds, goal_seconds)
        Measured wall time of each step, s, against the 1 s budget of a whole
        update (each step is shown against the whole budget; the ``total``
        line is the one that must meet it).
    """
    _ensure_importable()
    from sectionkit.solvers import GaussMarkov, make_solver, output_std, propagate

    repeats = 1 if quick else 5
    rng = np.random.default_rng(2024)
    ops = _synthetic_operators(rng)
    t_assembly, system = _time(lambda: assemble(ops), repeats)
    E, y, G = system["E"], system["y"], system["G"]
    prior, noise = system["prior"], system["noise"]

    t_solve, solver = _time(lambda: GaussMarkov(prior, noise).fit(E, y), repeats)
    t_prop, _ = _time(lambda: propagate(G, solver.covariance_), repeats)
    t_std, _ = _time(lambda: output_std(G, solver.covariance_), repeats)
    total = t_assembly + t_solve + t_prop + t_std
    m, k = E.shape
    results = [
        (f"solvers: assembly (E {m}x{k}, G {G.shape[0]}x{k})", t_assembly, GOAL_SECONDS),
        (f"solvers: gauss-markov solve ({solver.form_used_} form)", t_solve, GOAL_SECONDS),
        (f"solvers: propagate G P G^T ({G.shape[0]}x{G.shape[0]})", t_prop, GOAL_SECONDS),
        ("solvers: output_std (einsum, diagonal only)", t_std, GOAL_SECONDS),
        ("solvers: total update", total, GOAL_SECONDS),
    ]
    if not quick:
        # bounded: reference velocities within +-0.1 m/s, other unknowns free
        limit = np.where(np.arange(k) < N_SECTIONS * PAIRS_PER_SECTION, 0.1, np.inf)
        for name, extra in (("svd", {"rank": 0}), ("bounded", {"lower": -limit, "upper": limit})):
            t, _ = _time(
                lambda name=name, extra=extra: make_solver(
                    name, prior_variance=prior, noise_variance=noise, **extra
                ).fit(E, y),
                repeats,
            )
            results.append((f"solvers: {name} solve", t, GOAL_SECONDS))
    return results


def main(argv: list[str] | None = None) -> None:
    """Print the timings and their ratio to the goal."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one repeat, Gauss-Markov only")
    args = parser.parse_args(argv)
    print(f"{'step':<58} {'seconds':>9} {'goal':>6} {'ratio':>7}")
    for name, seconds, goal in run(quick=args.quick):
        print(f"{name:<58} {seconds:9.4f} {goal:6.2f} {seconds / goal:7.3f}")


if __name__ == "__main__":
    main()
