"""The batch outputs of DESIGN.md §7: CSV tables and provenance, written atomically.

Tables are built as pandas DataFrames from :class:`sectionkit.study.Results`
(``tables``), then written with everything else into a temporary folder
that is moved into place only when the whole run has succeeded
(``write_outputs``). Paper formatting (LaTeX, Markdown) and figures are
added by :mod:`sectionkit.paper` and :mod:`sectionkit.figures` when
present.
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

import numpy as np
import pandas as pd

from sectionkit.config import Config, parse_config
from sectionkit.errors import InputFileError
from sectionkit.study import Results, Study

CSV_FLOAT_FORMAT = "%.8g"  # enough digits for re-analysis, no float noise


def layer_table(study: Study, results: Results) -> pd.DataFrame:
    """layer_transports.csv: one row per section x class (section frame, Sv)."""
    cfg = study.config
    faces = cfg.interfaces
    rows = []
    for name, op in study.operators.items():
        out = results.outputs[name]
        initial = out.value(None)
        adjusted = out.value(results.estimate)
        length = op.pairs["distance"].values[:, None]
        area = (op.weights.sum(axis=-1) * length).sum(axis=0) / 1e6  # km^2
        for i, layer in enumerate(op.layer_names):
            k = out.index(f"volume:{layer}")
            top = faces[i - 1] if i > 0 else None
            bottom = faces[i] if i < len(faces) else None
            rows.append({
                "section": name,
                "layer": layer,
                "sigma_top": top.sigma if top else np.nan,
                "sigma_bottom": bottom.sigma if bottom else np.nan,
                "p_ref_top": top.p_ref if top else np.nan,
                "p_ref_bottom": bottom.p_ref if bottom else np.nan,
                "area_km2": area[i],
                "initial_sv": initial[k],
                "adjusted_sv": adjusted[k],
                "adjusted_err_sv": results.error(name, f"volume:{layer}"),
            })
    return pd.DataFrame(rows)


def pair_table(study: Study, results: Results) -> pd.DataFrame:
    """pair_adjustments.csv: one row per station pair."""
    rows = []
    x = results.estimate
    cov = results.covariance
    resolution = results.inverse.resolution_diagonal if results.inverse else None
    for name, op in study.operators.items():
        sl = results.layout.pair_slices[name]
        ref = results.references[name]
        g = op.pairs
        for k in range(op.n_pair):
            idx = sl.start + k
            rows.append({
                "section": name,
                "pair": k,
                "lon": float(g["lon"].values[k]),
                "lat": float(g["lat"].values[k]),
                "distance_km": float(g["distance"].values[k]) / 1e3,
                "ref_kind": ref.kinds[k],
                "ref_pressure": float(ref.pressure[k]),
                "adjustment_m_s": float(x[idx]),
                "adjustment_err_m_s": float(np.sqrt(cov[idx, idx])) if cov is not None
                else np.nan,
                "resolution": float(resolution[idx]) if resolution is not None else np.nan,
            })
    return pd.DataFrame(rows)


def box_table(results: Results) -> pd.DataFrame:
    """box_budget.csv: one row per box constraint (net inflow, positive in)."""
    inv = results.inverse
    columns = ["box", "constraint", "initial", "adjusted", "noise", "normalized_residual", "unit",
               "initial_normalized_residual"]
    if inv is None:
        return pd.DataFrame(columns=columns)
    sys_ = inv.system
    adjusted = inv.adjusted
    return pd.DataFrame({
        "box": [r[0] for r in sys_.rows],
        "constraint": [r[1] for r in sys_.rows],
        "initial": sys_.initial,
        "adjusted": adjusted,
        "noise": sys_.noise,
        "normalized_residual": adjusted / sys_.noise,
        "unit": sys_.units,
        "initial_normalized_residual": sys_.initial / sys_.noise,
    }, columns=columns)


def unknowns_table(results: Results) -> pd.DataFrame:
    """inverse_unknowns.csv: every unknown of the inverse with prior, estimate and error.

    Reference-velocity adjustments in m s^-1, diapycnal transfers (positive
    from the lighter to the denser class) in Sv, Ekman adjustments as a
    fraction of the stated Ekman transport.
    """
    columns = ["unknown", "kind", "unit", "prior_std", "estimate", "posterior_std",
               "resolution"]
    inv = results.inverse
    if inv is None:
        return pd.DataFrame(columns=columns)
    layout = results.layout
    kinds = ["reference_velocity"] * layout.size
    units = ["m s-1"] * layout.size
    for idx in layout.diapycnal.values():
        kinds[idx], units[idx] = "diapycnal_transfer", "Sv"
    for idx in layout.ekman.values():
        kinds[idx], units[idx] = "ekman_fraction", "1"
    return pd.DataFrame({
        "unknown": layout.labels,
        "kind": kinds,
        "unit": units,
        "prior_std": inv.system.prior,
        "estimate": inv.estimate,
        "posterior_std": np.sqrt(np.maximum(np.diag(inv.covariance), 0.0)),
        "resolution": inv.resolution_diagonal,
    }, columns=columns)


def summary_table(study: Study, results: Results) -> pd.DataFrame:
    """section_summary.csv: one row per section (section frame)."""
    rows = []
    for name in study.operators:
        row = {"section": name}
        for col, key in (("net_sv", "net"), ("heat_pw", "heat"), ("freshwater_sv", "freshwater"),
                         ("overturning_sv", "overturning")):
            row[col] = results.value(name, key)
            row[col.replace("_sv", "_err_sv").replace("_pw", "_err_pw")] = results.error(name, key)
        row["net_mass_sv"] = results.value(name, "net_mass")
        row["overturning_density_sv"] = results.value(name, "overturning_density")
        row["overturning_density_err_sv"] = results.error(name, "overturning_density")
        rows.append(row)
    order = ["section", "net_sv", "net_err_sv", "heat_pw", "heat_err_pw", "freshwater_sv",
             "freshwater_err_sv", "overturning_sv", "overturning_err_sv", "net_mass_sv",
             "overturning_density_sv", "overturning_density_err_sv"]
    return pd.DataFrame(rows)[order]


def tables(study: Study, results: Results) -> dict[str, pd.DataFrame]:
    """All §7 tables by file name."""
    return {
        "layer_transports.csv": layer_table(study, results),
        "pair_adjustments.csv": pair_table(study, results),
        "box_budget.csv": box_table(results),
        "section_summary.csv": summary_table(study, results),
        "inverse_unknowns.csv": unknowns_table(results),
    }


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
    from sectionkit.paper import write_paper_tables

    writers: list[Callable[[Study, Results, Path], None]] = [write_paper_tables]
    if figures:
        from sectionkit.figures import write_figures

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
