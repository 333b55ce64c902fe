"""Command line: ``sectionkit check | budget | demo | lab | ensemble``.

Every command and option is described in docs/cli.md.

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
    from sectionkit.outputs import REGISTRY
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
        def number(output: str, digits: int, section: str = name) -> str:
            unit = REGISTRY[output].display
            return f"{results.select(output, section).adjusted[0]:+.{digits}f} {unit}"

        line = (f"  {name}: net volume {number('net_volume_transport', 2)}, "
                f"net mass/rho0 {number('net_mass_transport', 2)}, "
                f"heat {number('heat_transport', 3)}, "
                f"overturning {number('overturning_depth', 2)}")
        if results.inverse is not None:
            line += f" (± {results.select('overturning_depth', name).error[0]:.2f})"
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


WORKBENCH_NOTEBOOK = "workbench.ipynb"


def lab_notebook(folder: Path, config: Path | None = None) -> Path:
    """A copy of the bundled workbench notebook in the user's folder, opening ``config``.

    The bundled notebook opens the demo (copied beside it on first use); for
    a configuration the copy is named after it and opens it by its path
    relative to ``folder``. An existing copy is the user's and is kept.

    Parameters
    ----------
    folder : Path
        The user's folder (JupyterLab's root).
    config : Path, optional
        A TOML configuration to open instead of the demo.
    """
    import json
    import os
    from importlib import resources

    from sectionkit.atomic import write_text_atomic

    bundled = resources.files("sectionkit") / "notebooks" / WORKBENCH_NOTEBOOK
    notebook = json.loads(bundled.read_text(encoding="utf-8"))
    target = folder / WORKBENCH_NOTEBOOK
    if config is not None:
        target = folder / f"{config.stem}_workbench.ipynb"
        relative = Path(os.path.relpath(config.resolve(), folder.resolve())).as_posix()
        for cell in notebook["cells"]:
            source = "".join(cell["source"])
            if cell["cell_type"] == "code" and "open_workbench()" in source:
                cell["source"] = source.replace("open_workbench()",
                                                f"open_workbench({json.dumps(relative)})")
    if not target.exists():
        write_text_atomic(target, json.dumps(notebook, indent=1) + "\n")
    return target


def run_lab(folder: Path, notebook: Path, extra: Sequence[str]) -> int:
    """Run JupyterLab on ``notebook`` with ``folder`` as its root; stop it when stopped.

    Ctrl-C or SIGTERM stops JupyterLab (without its interactive shutdown
    question) and waits for it to end.
    """
    import signal
    import subprocess

    cmd = [sys.executable, "-m", "jupyterlab", f"--ServerApp.root_dir={folder}",
           notebook.name, *extra]
    proc = subprocess.Popen(cmd, cwd=folder)

    def stop(signum, frame):
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, stop)
    try:
        return proc.wait()
    except KeyboardInterrupt:
        print("stopping JupyterLab", file=sys.stderr)
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        return 130
    finally:
        signal.signal(signal.SIGTERM, previous)
        if proc.poll() is None:
            proc.kill()


def _cmd_lab(args: argparse.Namespace) -> int:
    from sectionkit.errors import InputFileError

    folder = Path(args.dir).resolve()
    if not folder.is_dir():
        raise InputFileError(f"--dir {folder} is not a folder; give the folder to work in")
    config = None
    if args.config:
        config = Path(args.config)
        if not config.is_file():
            raise InputFileError(f"configuration file {config} does not exist")
    notebook = lab_notebook(folder, config)
    extra = list(args.jupyter_args)
    if args.no_browser:
        extra.append("--no-browser")
    if args.port:
        extra.append(f"--ServerApp.port={args.port}")
    print(f"workbench notebook: {notebook}", file=sys.stderr)
    return run_lab(folder, notebook, extra)


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
                       "configured) and write the tables, results.nc, figures and provenance "
                       "to --out (docs/outputs.md describes every file).")
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
                       usage="sectionkit lab [CONFIG] [--dir DIR] [-- JUPYTER ARGS]",
                       description="Copy the workbench notebook into DIR (default: the current "
                       "folder) and start JupyterLab on it there; arguments after -- go to "
                       "JupyterLab (e.g. -- --allow-root). Ctrl-C stops JupyterLab.")
    p.add_argument("config", nargs="?", default=None,
                   help="configuration to open (default: the bundled demo, copied into "
                   "DIR/sectionkit-demo)")
    p.add_argument("--dir", default=".", help="folder to work in (default: current)")
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


def _quiet_stdout() -> None:
    """Point stdout at /dev/null so Python's own final flush does not fail again."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``sectionkit`` command."""
    parser = build_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    extra: list[str] = []
    if "--" in argv:
        argv, extra = argv[: argv.index("--")], argv[argv.index("--") + 1:]
    args = parser.parse_args(argv)
    if extra and args.command != "lab":
        parser.error("arguments after -- are passed to JupyterLab by `sectionkit lab` only")
    args.jupyter_args = extra
    try:
        return int(args.func(args) or 0)
    except SectionkitError as exc:
        print(f"sectionkit {args.command}: error: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # output piped into a program that stopped reading (e.g. `| head`): end quietly
        _quiet_stdout()
        return 0


if __name__ == "__main__":
    sys.exit(main())
