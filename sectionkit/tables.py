"""The tables of DESIGN.md §7 as pandas DataFrames, built from a study's results.

One function per output file; :func:`tables` returns them all by file name.
Values stay at full precision here: :mod:`sectionkit.paper` rounds them for a
paper and :mod:`sectionkit.report` writes them. Every column and its unit is
described in docs/outputs.md.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from sectionkit.operator import SALINITY_NAMES
from sectionkit.outputs import REGISTRY
from sectionkit.study import Results, Study
from sectionkit.tracers import TOTAL, split_output_name
from sectionkit.tracers import UNIT as TRACER_UNIT


def class_table(study: Study, results: Results) -> pd.DataFrame:
    """class_transports.csv: one row per section x density class (section frame, Sv).

    Columns and units: docs/outputs.md. The volume transport of each class;
    ``sigma_top`` is the lighter bound, ``sigma_bottom`` the denser one.
    """
    cfg = study.config
    faces = cfg.interfaces
    rows = []
    for name, op in study.operators.items():
        volume = results.select("class_volume_transport", name)
        area = op.class_area / 1e6  # km^2
        for i, layer in enumerate(op.layer_names):
            top = faces[i - 1] if i > 0 else None
            bottom = faces[i] if i < len(faces) else None
            rows.append({
                "section": name,
                "class": layer,
                "sigma_top": top.sigma if top else np.nan,
                "sigma_bottom": bottom.sigma if bottom else np.nan,
                "p_ref_top": top.p_ref if top else np.nan,
                "p_ref_bottom": bottom.p_ref if bottom else np.nan,
                "area_km2": area[i],
                "initial_sv": volume.initial[i],
                "adjusted_sv": volume.adjusted[i],
                "adjusted_err_sv": volume.error[i],
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
        stations = [str(s) for s in study.sections[name]["station"].values] \
            if name in study.sections else [str(k) for k in range(op.n_pair + 1)]
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
                # clamped at 0 like results.nc and inverse_unknowns.csv: rounding can
                # leave a fully resolved adjustment's variance a hair below zero
                "adjustment_err_m_s": float(np.sqrt(max(cov[idx, idx], 0.0))) if cov is not None
                else np.nan,
                "resolution": float(resolution[idx]) if resolution is not None else np.nan,
                "first_station": stations[k],
                "second_station": stations[k + 1],
            })
    return pd.DataFrame(rows)


def box_table(results: Results) -> pd.DataFrame:
    """box_budget.csv: one row per box constraint (net inflow, positive in)."""
    inv = results.inverse
    columns = ["box", "constraint", "initial", "adjusted", "noise", "normalized_residual",
               "posterior_residual_std", "posterior_normalized_residual", "unit",
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
        "posterior_residual_std": inv.posterior_residual_std,
        "posterior_normalized_residual": inv.posterior_normalized_residuals,
        "unit": sys_.units,
        "initial_normalized_residual": sys_.initial / sys_.noise,
    }, columns=columns)


def unknowns_table(study: Study, results: Results) -> pd.DataFrame:
    """inverse_unknowns.csv: every unknown of the inverse with prior, estimate and error.

    Reference-velocity adjustments in m s^-1, diapycnal transfers (positive
    from the lighter to the denser class) in Sv, Ekman adjustments as a
    fraction of the stated Ekman transport. ``interface`` names the surface a
    diapycnal transfer crosses (``σ₂ 36.98``; blank for other unknowns).
    """
    columns = ["unknown", "kind", "unit", "prior_std", "estimate", "posterior_std",
               "resolution", "interface", "prior_mean"]
    inv = results.inverse
    if inv is None:
        return pd.DataFrame(columns=columns)
    layout = results.layout
    kinds = ["reference_velocity"] * layout.size
    units = ["m s-1"] * layout.size
    faces = [""] * layout.size
    for (_, n), idx in layout.diapycnal.items():
        kinds[idx], units[idx] = "diapycnal_transfer", "Sv"
        face = study.config.interfaces[n]
        faces[idx] = face.display()
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
        "interface": faces,
        "prior_mean": (np.zeros(layout.size) if inv.system.prior_mean is None
                       else inv.system.prior_mean),
    }, columns=columns)


def summary_table(study: Study, results: Results) -> pd.DataFrame:
    """section_summary.csv: one row per section (section frame)."""
    rows = []
    for name in study.operators:
        row = {"section": name}
        for col, output in (("net_sv", "net_volume_transport"), ("heat_pw", "heat_transport"),
                            ("freshwater_sv", "freshwater_transport"),
                            ("overturning_sv", "overturning_depth"),
                            ("net_mass_sv", "net_mass_transport"),
                            ("overturning_density_sv", "overturning_density")):
            selected = results.select(output, name)
            row[col] = float(selected.adjusted[0])
            row[col.replace("_sv", "_err_sv").replace("_pw", "_err_pw")] = float(
                selected.error[0])
        op = study.operators[name]
        row["freshwater_ref_salinity"] = (float(op.mean_salinity)
                                          if study.config.reference_salinity is None
                                          else study.config.reference_salinity)
        row["freshwater_ref_kind"] = SALINITY_NAMES[study.config.salt_salinity]
        rows.append(row)
    order = ["section", "net_sv", "net_err_sv", "heat_pw", "heat_err_pw", "freshwater_sv",
             "freshwater_err_sv", "overturning_sv", "overturning_err_sv", "net_mass_sv",
             "overturning_density_sv", "overturning_density_err_sv", "net_mass_err_sv",
             "freshwater_ref_salinity", "freshwater_ref_kind"]
    return pd.DataFrame(rows)[order]


PROPERTY_COLUMNS = ["section", "class", "property", "unit", "initial", "adjusted",
                    "adjusted_err"]


def property_table(study: Study, results: Results) -> pd.DataFrame:
    """property_transports.csv: heat, salt and every bottle tracer per section x class.

    Heat in PW (potential enthalpy), salt in Sv g/kg (rho SA v / rho0), tracers
    in kmol s^-1 (rho c v); section frame; without an inverse adjusted equals
    initial and the error is blank.
    """
    rows = []
    for name, op in study.operators.items():
        for prop in ("heat", "salt"):
            spec = REGISTRY[f"class_{prop}_transport"]
            sel = results.select(spec.name, name)
            for i, layer in enumerate(op.layer_names):
                rows.append([name, layer, prop, spec.display, sel.initial[i], sel.adjusted[i],
                             sel.error[i]])
        tracer = results.tracer_values(name)
        for k, label in enumerate(tracer.keys if tracer is not None else []):
            prop, layer = split_output_name(label)
            if layer != TOTAL:
                rows.append([name, layer, prop, TRACER_UNIT, tracer.initial[k],
                             tracer.adjusted[k], tracer.error[k]])
    return pd.DataFrame(rows, columns=PROPERTY_COLUMNS)


def tables(study: Study, results: Results) -> dict[str, pd.DataFrame]:
    """All §7 tables by file name."""
    return {
        "class_transports.csv": class_table(study, results),
        "pair_adjustments.csv": pair_table(study, results),
        "box_budget.csv": box_table(results),
        "section_summary.csv": summary_table(study, results),
        "inverse_unknowns.csv": unknowns_table(study, results),
        "property_transports.csv": property_table(study, results),
    }
