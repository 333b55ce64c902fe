"""The batch outputs of DESIGN.md §7: files written atomically, and provenance.

The tables come from :mod:`sectionkit.tables`, paper formatting (LaTeX,
Markdown) from :mod:`sectionkit.paper` and figures from
:mod:`sectionkit.figures`; everything is written into a temporary folder
that is moved into place only when the whole run has succeeded
(:func:`write_outputs`). :func:`provenance` records what is needed to
reproduce a run and :func:`load_provenance` reads it back. The files and
their columns are described in docs/outputs.md; ``results.nc`` comes from
:mod:`sectionkit.dataset`.

Every function here that takes ``study`` and ``results`` takes a
:class:`~sectionkit.study.Study` and the :class:`~sectionkit.study.Results` it
solved; their docstrings list only the other parameters.
"""

from __future__ import annotations

import hashlib
import json
import platform
import shutil
from collections.abc import Callable
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

import pandas as pd

from sectionkit.config import Config, parse_config
from sectionkit.dataset import write_results_nc
from sectionkit.errors import InputFileError
from sectionkit.figures import write_figures
from sectionkit.operator import SALINITY_NAMES
from sectionkit.outdir import PROVENANCE, check_output_folder, new_partial_folder, swap_in
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


def input_files(cfg: Config) -> tuple[list[Path], dict[str, list[str]]]:
    """Every input file a configuration reads, and the file list of each folder it names.

    Parameters
    ----------
    cfg : Config
        The configuration.

    Returns
    -------
    files : list of Path
        Section files (each file of a per-cast folder), bathymetry tracks, in
        configuration order.
    folders : dict of str -> list of str
        Per-cast folder to the names of the files read from it, in reading order.
    """
    from sectionkit.io.casts import source_files

    files: list[Path] = []
    folders: dict[str, list[str]] = {}
    for spec in cfg.sections:
        for path in cfg.section_paths(spec):
            if path.is_dir():
                try:
                    names = [Path(f) for f in source_files(str(path))]
                except InputFileError:
                    names = []
                folders[str(path)] = [f.name for f in names]
                files.extend(names)
            else:
                files.append(path)
        if spec.bathymetry:
            files.append(cfg.base_dir / spec.bathymetry)
        for extra in (spec.bottle, spec.adcp):  # bottle tracers, direct velocities
            if extra:
                files.append(cfg.base_dir / extra)
    return files, folders


def provenance(study: Study, results: Results, outputs: list[str] | None = None) -> dict:
    """Full resolved configuration, input hashes, package versions and time.

    Parameters
    ----------
    outputs : list of str, optional
        The files of the result set (relative paths), this one included.
    """
    cfg = study.config
    paths, folders = input_files(cfg)
    files = {str(p): sha256(p) for p in paths if p.is_file()}
    record = {
        "configuration": cfg.to_dict(),
        "configuration_dir": str(cfg.base_dir),
        "input_sha256": files,
        "input_folders": folders,
        "packages": _package_versions(),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "cautions": [str(c) for c in results.cautions],
        "inverse": results.inverse.summary() if results.inverse else None,
        "salt_salinity": SALINITY_NAMES[cfg.salt_salinity],
    }
    if outputs is not None:
        record["outputs"] = sorted(outputs)
    return record


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
        for folder, names in (record.get("input_folders") or {}).items():
            _check_folder(path, folder, names)
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


def _check_folder(record_path: Path, folder: str, names: list[str]) -> None:
    """Refuse a per-cast folder whose list of files differs from the recorded run's."""
    from sectionkit.io.casts import source_files

    if not Path(folder).is_dir():
        raise InputFileError(f"{record_path}: input folder {folder} of the recorded run is "
                             "missing; restore it to reproduce the run")
    try:
        now = [Path(f).name for f in source_files(folder)]
    except InputFileError:
        now = []
    added = [n for n in now if n not in names]
    missing = [n for n in names if n not in now]
    if added or missing:
        what = "; ".join(part for part in (
            f"added since: {', '.join(added)}" if added else "",
            f"missing now: {', '.join(missing)}" if missing else "") if part)
        raise InputFileError(f"{record_path}: the files of input folder {folder} differ from "
                             f"the recorded run ({what}); restore the folder as it was to "
                             "reproduce the run")


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

    Everything is written into a temporary folder beside ``out_dir`` that
    replaces ``out_dir`` as a whole when all writers succeeded
    (:mod:`sectionkit.outdir`): a failure leaves ``out_dir`` as it was, and
    ``out_dir`` never mixes two runs.

    Parameters
    ----------
    out_dir : str or Path
        Destination folder (created when missing; refused when it holds files
        sectionkit did not write).
    extras : list of callables, optional
        Further writers ``f(study, results, folder)`` (tables, figures).

    Returns
    -------
    list of Path
        The files written, relative to ``out_dir``.
    """
    out = check_output_folder(out_dir)
    tmp = new_partial_folder(out)
    try:
        for name, df in tables(study, results).items():
            _write_csv(df, tmp / name)
        write_results_nc(study, results, tmp)
        for writer in extras or []:
            writer(study, results, tmp)
        written = sorted(p.relative_to(tmp) for p in tmp.rglob("*") if p.is_file())
        written = sorted(written + [Path(PROVENANCE)])
        record = provenance(study, results, [p.as_posix() for p in written])
        # keys in configuration order: the order of [ekman] stress sets the Ekman unknowns
        (tmp / PROVENANCE).write_text(json.dumps(record, indent=2, default=str) + "\n")
        swap_in(tmp, out)
        return written
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
