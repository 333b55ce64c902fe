"""The batch outputs of DESIGN.md §7: files written atomically, and provenance.

The tables come from :mod:`sectionkit.tables`, paper formatting (LaTeX,
Markdown) from :mod:`sectionkit.paper` and figures from
:mod:`sectionkit.figures`; everything is written into a temporary folder
that is moved into place only when the whole run has succeeded
(:func:`write_outputs`). :func:`provenance` records what is needed to
reproduce a run and :func:`load_provenance` reads it back. The files and
their columns are described in docs/outputs.md; ``results.nc`` comes from
:mod:`sectionkit.dataset`.
"""

from __future__ import annotations

import hashlib
import json
import os
import platform
import shutil
import tempfile
from collections.abc import Callable
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

import pandas as pd

from sectionkit.config import Config, parse_config
from sectionkit.dataset import write_results_nc
from sectionkit.errors import InputFileError
from sectionkit.figures import write_figures
from sectionkit.paper import write_paper_tables
from sectionkit.study import Results, Study
from sectionkit.tables import (  # noqa: F401  (re-exported: the §7 tables)
    box_table,
    class_table,
    pair_table,
    summary_table,
    tables,
    unknowns_table,
)

CSV_FLOAT_FORMAT = "%.8g"  # enough digits for re-analysis, no float noise


def sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _package_versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for pkg in ("sectionkit", "numpy", "scipy", "xarray", "gsw", "pandas", "netCDF4",
                "matplotlib"):
        try:
            out[pkg] = metadata.version(pkg)
        except metadata.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def provenance(study: Study, results: Results) -> dict:
    """Full resolved configuration, input hashes, package versions and time."""
    cfg = study.config
    files = {}
    for spec in cfg.sections:
        for path in cfg.section_paths(spec):
            if path.is_dir():
                for p in sorted(path.iterdir()):
                    if p.is_file():
                        files[str(p)] = sha256(p)
            elif path.exists():
                files[str(path)] = sha256(path)
    return {
        "configuration": cfg.to_dict(),
        "configuration_dir": str(cfg.base_dir),
        "input_sha256": files,
        "packages": _package_versions(),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "cautions": [str(c) for c in results.cautions],
        "inverse": results.inverse.summary() if results.inverse else None,
    }


def load_provenance(path: str | Path, check_inputs: bool = True) -> Config:
    """The configuration of an earlier run, from its provenance.json.

    Parameters
    ----------
    path : str or Path
        A ``provenance.json`` written by :func:`write_outputs`.
    check_inputs : bool
        Refuse to go on when an input file is missing or its SHA-256 differs
        from the recorded one (the rerun would not reproduce the run).

    Returns
    -------
    Config
        The resolved configuration, relative paths taken from the original
        configuration's folder.
    """
    path = Path(path)
    try:
        record = json.loads(path.read_text())
        data = record["configuration"]
        base = Path(record["configuration_dir"])
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InputFileError(
            f"{path} is not a sectionkit provenance.json ({exc}); pass the run's "
            "provenance.json or a TOML configuration"
        ) from None
    if check_inputs:
        for name, digest in record.get("input_sha256", {}).items():
            if not Path(name).is_file():
                raise InputFileError(f"{path}: input file {name} of the recorded run is missing; "
                                     "restore it to reproduce the run")
            if sha256(name) != digest:
                raise InputFileError(
                    f"{path}: input file {name} has changed since the recorded run (SHA-256 "
                    f"{sha256(name)[:12]}… instead of {digest[:12]}…); restore the original "
                    "to reproduce the run"
                )
    return parse_config(data, base_dir=base)


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    df.to_csv(path, index=False, float_format=CSV_FLOAT_FORMAT, lineterminator="\n")


def default_writers(figures: bool = True) -> list[Callable[[Study, Results, Path], None]]:
    """The writers a batch run uses beyond the CSV tables: paper tables, and figures.

    Parameters
    ----------
    figures : bool
        Include the figures (the slowest part of a run).
    """
    writers: list[Callable[[Study, Results, Path], None]] = [write_paper_tables]
    if figures:
        writers.append(write_figures)
    return writers


def write_outputs(
    study: Study,
    results: Results,
    out_dir: str | Path,
    extras: list[Callable[[Study, Results, Path], None]] | None = None,
) -> list[Path]:
    """Write every §7 file into ``out_dir`` atomically.

    Everything is written into a temporary folder beside ``out_dir``; only
    when all writers succeeded are the files moved into ``out_dir``. A failure
    leaves ``out_dir`` as it was.

    Parameters
    ----------
    study : Study
        The study.
    results : Results
        Its results.
    out_dir : str or Path
        Destination folder (created when missing).
    extras : list of callables, optional
        Further writers ``f(study, results, folder)`` (tables, figures).

    Returns
    -------
    list of Path
        The files written, relative to ``out_dir``.
    """
    out_dir = Path(out_dir).resolve()
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", dir=out_dir.parent))
    try:
        for name, df in tables(study, results).items():
            _write_csv(df, tmp / name)
        write_results_nc(study, results, tmp)
        for writer in extras or []:
            writer(study, results, tmp)
        (tmp / "provenance.json").write_text(
            json.dumps(provenance(study, results), indent=2, sort_keys=True, default=str) + "\n"
        )
        written = sorted(p.relative_to(tmp) for p in tmp.rglob("*") if p.is_file())
        out_dir.mkdir(exist_ok=True)
        for rel in written:
            target = out_dir / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            os.replace(tmp / rel, target)
        return written
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
