"""Command line: ``sectionkit check | budget | demo | lab | ensemble``.

Errors of sectionkit's own kind are printed as one readable message without a
traceback, with exit status 1 (2 for usage errors, from argparse).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from sectionkit.errors import SectionkitError


def _progress(message: str) -> None:
    print(f"  .. {message}", file=sys.stderr, flush=True)


def run_budget(config_path: Path, out_dir: Path, *, figures: bool = True,
               quiet: bool = False) -> int:
    """Run the whole chain of one configuration and write its outputs."""
    from sectionkit.config import load_config
    from sectionkit.outdir import check_output_folder
    from sectionkit.report import default_writers, load_provenance, write_outputs
    from sectionkit.study import Study

    check_output_folder(out_dir)  # before any computation
    progress = None if quiet else _progress
    if Path(config_path).suffix.lower() == ".json":
        config = load_provenance(config_path)
    else:
        config = load_config(config_path)
    study = Study.from_config(config, progress=progress)
    if progress:
        progress("budgets" + (" and inverse" if config.inverse else ""))
    results = study.solve()
    extras = default_writers(figures)
    if progress:
        progress("tables and figures" if figures else "tables")
    written = write_outputs(study, results, out_dir, extras)
    print(f"{config.title}: wrote {len(written)} files to {out_dir}")
    for name in study.operators:
        line = (f"  {name}: net {results.value(name, 'net'):+.2f} Sv, "
                f"heat {results.value(name, 'heat'):+.3f} PW, "
                f"overturning {results.value(name, 'overturning'):+.2f} Sv")
        if results.inverse is not None:
            line += f" (± {results.error(name, 'overturning'):.2f})"
        print(line)
    if results.cautions:
        print("cautions:")
        for c in results.cautions:
            print(f"  - {c}")
    return 0


def _cmd_check(args: argparse.Namespace) -> int:
    from sectionkit.io.check import run_check

    return run_check(args)


def _cmd_budget(args: argparse.Namespace) -> int:
    return run_budget(Path(args.config), Path(args.out), figures=not args.no_figures,
                      quiet=args.quiet)


def demo_config_path() -> Path:
    """The bundled demo configuration (see :func:`sectionkit.demo.bundled_demo_config`)."""
    from sectionkit.demo import bundled_demo_config

    return bundled_demo_config()


def _cmd_demo(args: argparse.Namespace) -> int:
    return run_budget(demo_config_path(), Path(args.out), figures=not args.no_figures,
                      quiet=args.quiet)


def _cmd_lab(args: argparse.Namespace) -> int:
    import subprocess

    notebook = Path(__file__).resolve().parent.parent / "notebooks" / "workbench.ipynb"
    cmd = [sys.executable, "-m", "jupyterlab", str(notebook)]
    if args.no_browser:
        cmd.append("--no-browser")
    if args.port:
        cmd.append(f"--ServerApp.port={args.port}")
    return subprocess.call(cmd)


def _cmd_ensemble(args: argparse.Namespace) -> int:
    from sectionkit.ensemble import ensemble_main

    return ensemble_main(args)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of every command."""
    parser = argparse.ArgumentParser(
        prog="sectionkit",
        description="Hydrographic sections to transport budgets: geostrophic velocities, "
        "density-class transports, box inverses and paper-ready tables.",
    )
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("check", help="validate section files and describe what was found",
                       description="Read each section file, validate it and print what it holds "
                       "(stations, positions, depths, spacing, grid, cautions).")
    from sectionkit.io.check import add_check_arguments

    add_check_arguments(p)
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser("budget", help="compute the budgets of a TOML configuration",
                       description="Compute class transports, the box inverse (when [inverse] is "
                       "configured) and write the tables, figures and provenance to --out.")
    p.add_argument("config", help="configuration file (.toml), or the provenance.json of an "
                   "earlier run to reproduce it (its input files must be unchanged)")
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--no-figures", action="store_true", help="skip figures (faster)")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.set_defaults(func=_cmd_budget)

    p = sub.add_parser("demo", help="run the whole chain on the bundled invented-basin demo",
                       description="Run the bundled demo box (two invented lines) through "
                       "initial budgets, the inverse and the report.")
    p.add_argument("--out", default="results", help="output folder (default: results)")
    p.add_argument("--no-figures", action="store_true", help="skip figures (faster)")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.set_defaults(func=_cmd_demo)

    p = sub.add_parser("lab", help="open the workbench notebook in JupyterLab",
                       description="Start JupyterLab on notebooks/workbench.ipynb.")
    p.add_argument("--no-browser", action="store_true", help="do not open a browser")
    p.add_argument("--port", type=int, default=0, help="server port (default: Jupyter's)")
    p.set_defaults(func=_cmd_lab)

    p = sub.add_parser("ensemble", help="Monte Carlo ensemble on dask.distributed",
                       description="Perturb measurements, references and priors and run the "
                       "chain per member on a dask.distributed cluster. Every perturbation is "
                       "an option below; see docs/cli.md.")
    p.add_argument("config", help="configuration file (.toml)")
    p.add_argument("--members", type=int, default=100, help="ensemble size (default 100)")
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--scheduler", default=None, help="address of an existing dask scheduler")
    p.add_argument("--workers", type=int, default=2, help="local workers (default 2)")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    p.add_argument("--serial", action="store_true", help="run without dask (same results)")
    g = p.add_argument_group("perturbations (standard deviations; defaults in brackets)")
    g.add_argument("--temperature", type=float, metavar="DEGC",
                   help="temperature sensor accuracy, degC [0.002]")
    g.add_argument("--salinity", type=float, metavar="G_KG",
                   help="salinity accuracy, g/kg [0.002]")
    g.add_argument("--pressure", type=float, metavar="DBAR",
                   help="pressure sensor accuracy, dbar, one offset per station [1]")
    g.add_argument("--mode", choices=("station", "level"),
                   help="station: one temperature and salinity offset per station (calibration "
                   "bias) [station]; level: independent at every station and level")
    g.add_argument("--reference-range", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help="draw the global reference pressure uniformly in [LOW, HIGH] dbar "
                   "(the configuration's global reference must be a pressure) [off]")
    g.add_argument("--prior-factor", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help="multiply every prior standard deviation of the inverse by a "
                   "log-uniform factor in [LOW, HIGH] [off]")
    g.add_argument("--constraints", choices=("none", "noise", "twin"),
                   help="perturb the inverse's data: none; noise adds a draw of the "
                   "constraints' own noise; twin replaces the data by a twin experiment with a "
                   "recorded true state [none]")
    p.set_defaults(func=_cmd_ensemble)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``sectionkit`` command."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except SectionkitError as exc:
        print(f"sectionkit {args.command}: error: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
