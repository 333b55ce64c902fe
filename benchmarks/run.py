"""Measure every performance goal of sectionkit in one run.

Prints one line per goal::

    <name>: <measured> (goal <goal>) met
    <name>: <measured> (goal <goal>) short (by X)

Goals: the long-line pipeline against gsw dynamic height alone (<= 3x) and
against a hand-written gsw + numpy notebook peer on the same line (peer at
least 2x slower), timed in interleaved rounds of one run; a reference update
against a full recompute (<= 1/100); the 600-unknown inverse with
propagation (< 1 s, from ``bench_solvers`` when present); ensemble
throughput with 2 workers against 1 (>= 1.7x); members per second of the
demo-box ensemble on 2 workers (>= 3x the engine at ``EARLIER_ENGINE``, run
alternating with this one), and a 1000-member run with a progress bar,
bit-for-bit equal to the serial run;
bounded peak memory of a long chunked model-output section; and the
workbench's slider goals when ``bench_workbench`` is present.

Usage::

    python benchmarks/run.py [--quick] [--profile] [--json FILE] [--earlier REF]

``--quick`` runs smaller cases (under a minute); ``--profile`` also prints a
cProfile listing of the pipeline's hot paths; ``--earlier REF`` names the
engine (git revision, default ``bench_pipeline.EARLIER_ENGINE``) whose
demo-box ensemble runs alternating with this one, for a gain measured under
the same machine load (``--earlier none``: against the recorded figure).
"""

from __future__ import annotations

import argparse
import importlib
import json
import math
import os
import platform
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

# one BLAS thread, as the ensemble's dask workers use: on 2 cores shared with other jobs a
# second BLAS thread only waits for a core (set before numpy is imported; an explicit
# setting in the environment wins)
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(1, str(HERE.parent))

import bench_pipeline  # noqa: E402
from bench_pipeline import Measurement  # noqa: E402


def _machine() -> str:
    mem = ""
    try:
        with open("/proc/meminfo") as fh:
            kb = int(fh.readline().split()[1])
        mem = f", {kb / 2**20:.1f} GiB RAM"
    except (OSError, ValueError, IndexError):
        pass
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    import dask
    import distributed
    import gsw
    import numpy
    import xarray

    return (f"{os.cpu_count()} cores ({cpu}){mem}; Python {platform.python_version()}, "
            f"numpy {numpy.__version__}, gsw {gsw.__version__}, xarray {xarray.__version__}, "
            f"dask {dask.__version__}, distributed {distributed.__version__}")


def _optional(module: str, quick: bool) -> list[Measurement]:
    """Goals of another benchmark module's ``run(quick)``: (name, measured s, goal s) rows."""
    try:
        mod = importlib.import_module(module)
    except ImportError:
        return []
    rows = []
    for name, value, goal in mod.run(quick=quick):
        if goal is None or (isinstance(goal, float) and math.isnan(goal)):
            print(f"  ({name}: {value:.4g}, for reference)")
            continue
        unit = "x" if "ratio" in name else "s"
        rows.append(Measurement(name, float(value), float(goal), "<=", unit))
    return rows


def _inverse(quick: bool) -> list[Measurement]:
    rows = _optional("bench_solvers", quick)
    if rows:
        # the whole update is the goal; the steps are shown for the record
        total = [r for r in rows if "total" in r.name]
        for r in rows:
            if r not in total:
                print(f"  ({r.name}: {r.value:.4g} s)")
        return total or rows
    return [_own_inverse()]


def _own_inverse() -> Measurement:
    """A 600-unknown Gauss-Markov inverse with output propagation, when bench_solvers is absent."""
    import numpy as np

    from sectionkit.solvers import GaussMarkov, output_std

    rng = np.random.default_rng(0)
    e = rng.normal(size=(60, 600))
    g = rng.normal(size=(1900, 600))
    start = time.perf_counter()
    solver = GaussMarkov(np.full(600, 0.02**2), np.full(60, 0.25)).fit(e, rng.normal(size=60))
    output_std(g, solver.covariance_)
    return Measurement("inverse 600 unknowns + propagation", time.perf_counter() - start, 1.0,
                       unit="s")


def _earlier_tree(ref: str) -> str:
    """``sectionkit`` and ``demo_sections`` of a git revision, extracted to a temporary folder."""
    import tempfile

    tree = tempfile.mkdtemp(prefix="sectionkit-earlier-")
    archive = subprocess.run(["git", "-C", str(HERE.parent), "archive", ref, "sectionkit",
                              "demo_sections"], capture_output=True, check=True)
    subprocess.run(["tar", "-x", "-C", tree], input=archive.stdout, check=True)
    return tree


def main(argv: list[str] | None = None) -> int:
    """Run every benchmark and print one line per goal."""
    parser = argparse.ArgumentParser(description="sectionkit performance goals")
    parser.add_argument("--quick", action="store_true", help="smaller cases, under a minute")
    parser.add_argument("--profile", action="store_true", help="print the pipeline profile")
    parser.add_argument("--json", default=None, help="also write the measurements as JSON")
    parser.add_argument("--earlier", default=bench_pipeline.EARLIER_ENGINE, metavar="REF",
                        help="the engine (git revision) whose demo-ensemble rate the goal "
                             "multiplies, run alternating with this one (same load); 'none' "
                             "compares with the figure recorded on the machine of the day")
    args = parser.parse_args(argv)
    earlier = None
    if args.earlier and args.earlier.lower() != "none":
        try:
            earlier = _earlier_tree(args.earlier)
        except (OSError, subprocess.CalledProcessError) as exc:  # not a git checkout
            print(f"earlier engine {args.earlier} not available ({exc}); comparing with the "
                  "recorded figure")

    print(f"machine: {_machine()}")
    print(f"load average at start (1, 5, 15 min): {os.getloadavg()}; BLAS threads: "
          f"{os.environ.get('OPENBLAS_NUM_THREADS')}")
    print(f"mode: {'quick' if args.quick else 'full'}")
    start = time.perf_counter()
    measured: list[Measurement] = []
    steps = [
        lambda: bench_pipeline.pipeline_vs_floor(args.quick),
        lambda: [bench_pipeline.reference_update(args.quick)],
        lambda: _inverse(args.quick),
        lambda: [bench_pipeline.ensemble_scaling(args.quick)],
        lambda: bench_pipeline.demo_ensemble_throughput(args.quick, earlier=earlier),
        lambda: [bench_pipeline.model_output_memory(args.quick)],
        lambda: _optional("bench_workbench", args.quick),
    ]
    for step in steps:
        for m in step():
            measured.append(m)
            print(m.line(), flush=True)
            for key, value in m.details.items():
                text = f"{value:.4g}" if isinstance(value, float) else str(value)
                print(f"    {key}: {text}")
    print(f"goals met: {sum(m.met for m in measured)}/{len(measured)} "
          f"in {time.perf_counter() - start:.0f} s; "
          f"load average at the end (1, 5, 15 min): {os.getloadavg()}")
    if args.profile:
        print("\nprofile of the long-line pipeline (cProfile):")
        print(bench_pipeline.profile_pipeline(args.quick))
    if args.json:
        payload: list[dict[str, Any]] = [
            {"name": m.name, "value": m.value, "goal": m.goal, "kind": m.kind, "unit": m.unit,
             "met": m.met, "details": m.details} for m in measured]
        Path(args.json).write_text(json.dumps(payload, indent=2, default=str))
    return 0


if __name__ == "__main__":
    sys.exit(main())
