"""Every reported number of a study as one CF-NetCDF Dataset (``results.nc``).

Variables are named by :mod:`sectionkit.outputs`; each output ``X`` comes as
``X_initial`` (the chosen references), ``X_adjusted`` (after the inverse;
equal to the initial value without one) and ``X_error`` (one posterior
standard deviation; NaN without an inverse). Units attributes are CF /
UDUNITS strings (``1e6 m3 s-1``, never ``Sv``, which unit libraries read as
the sievert). Dimensions: ``section``, ``class``, ``interface``, ``level``,
``pair``, ``box``, ``unknown``, ``constraint``. Every variable is described
in docs/outputs.md.

>>> import xarray as xr
>>> ds = xr.open_dataset("results/results.nc")            # doctest: +SKIP
>>> ds["class_volume_transport_adjusted"].sel(section="south")   # doctest: +SKIP

Every function here that takes ``study`` and ``results`` takes a
:class:`~sectionkit.study.Study` and the :class:`~sectionkit.study.Results` it
solved; their docstrings list only the other parameters.
"""

from __future__ import annotations

from importlib import metadata
from pathlib import Path

import numpy as np
import xarray as xr

from sectionkit.budget import level_end_pressure
from sectionkit.outputs import SECTION_OUTPUTS, SIGN, udunits
from sectionkit.study import Results, Study
from sectionkit.tracers import split_output_name

CF_VERSION = "CF-1.10"


def _package_version() -> str:
    try:
        return metadata.version("sectionkit")
    except metadata.PackageNotFoundError:  # pragma: no cover - running from a checkout
        return "unknown"


def _section_variables(study: Study, results: Results, levels: np.ndarray) -> dict:
    sections = list(study.operators)
    classes = list(study.config.layer_names)
    n_interface = len(study.config.interfaces)
    estimate = results.estimate if results.inverse is not None else None
    cov = results.covariance
    data: dict = {}
    for spec in SECTION_OUTPUTS:
        shape = (len(sections),) + tuple(
            {"class": len(classes), "interface": n_interface, "level": levels.size}[d]
            for d in spec.dims[1:])
        initial = np.full(shape, np.nan)
        adjusted = np.full(shape, np.nan)
        error = np.full(shape, np.nan)
        for s, name in enumerate(sections):
            out = results.outputs[name]
            n_level = study.operators[name].pressure.size
            for j, key in enumerate(spec.keys(classes, n_interface, n_level)):
                k = out.index(key)
                g = out.gradient[k]
                at = (s, j) if len(spec.dims) > 1 else (s,)
                initial[at] = out.initial[k]
                adjusted[at] = out.initial[k] + (g @ estimate if estimate is not None else 0.0)
                if cov is not None:
                    error[at] = np.sqrt(max(float(g @ cov @ g), 0.0))
        for tag, values, what in (("initial", initial, "with the chosen references"),
                                  ("adjusted", adjusted, "after the box inverse"),
                                  ("error", error, "one posterior standard deviation")):
            attrs = {"long_name": f"{spec.long_name}, {what}", "units": spec.units,
                     "display_units": spec.display}
            if tag != "error":
                attrs["ancillary_variables"] = f"{spec.name}_error"
            if tag == "error":
                attrs["comment"] = "NaN without an inverse"
            data[f"{spec.name}_{tag}"] = (spec.dims, values, attrs)
    return data


def _tracer_variables(study: Study, results: Results) -> tuple[dict, dict]:
    """Bottle-tracer class transports (section, tracer, class), kmol s-1."""
    tracers = results.tracers
    names: list[str] = []
    for out in tracers.values():
        for label in out.names:
            tracer = split_output_name(label)[0]
            if tracer not in names:
                names.append(tracer)
    if not names:
        return {}, {}
    sections = list(study.operators)
    classes = list(study.config.layer_names)
    shape = (len(sections), len(names), len(classes))
    initial, adjusted, error = (np.full(shape, np.nan) for _ in range(3))
    for s, section in enumerate(sections):
        sel = results.tracer_values(section)
        for k, label in enumerate(sel.keys if sel is not None else []):
            tracer, cls = split_output_name(label)
            if cls in classes:  # not the TOTAL rows (the sum over classes)
                at = (s, names.index(tracer), classes.index(cls))
                initial[at], adjusted[at], error[at] = sel.initial[k], sel.adjusted[k], \
                    sel.error[k]
    data = {}
    for tag, values, what in (("initial", initial, "with the chosen references"),
                              ("adjusted", adjusted, "after the box inverse"),
                              ("error", error, "one posterior standard deviation")):
        attrs = {"long_name": f"bottle-tracer transport of the density class (rho c v), {what}",
                 "units": udunits("kmol s-1"), "display_units": "kmol s-1"}
        data[f"class_tracer_transport_{tag}"] = (("section", "tracer", "class"), values, attrs)
    return {"tracer": ("tracer", names, {"long_name": "bottle tracer"})}, data


def _pair_variables(study: Study, results: Results) -> tuple[dict, dict]:
    labels, section, index, first, second = [], [], [], [], []
    lon, lat, dist, ref_p, kinds = [], [], [], [], []
    for name, op in study.operators.items():
        g = op.pairs
        stations = ([str(s) for s in study.sections[name]["station"].values]
                    if name in study.sections else [str(k) for k in range(op.n_pair + 1)])
        ref = results.references[name]
        for k in range(op.n_pair):
            labels.append(op.pair_labels[k])
            section.append(name)
            index.append(k)
            first.append(stations[k])
            second.append(stations[k + 1])
            lon.append(float(g["lon"].values[k]))
            lat.append(float(g["lat"].values[k]))
            dist.append(float(g["distance"].values[k]) / 1e3)
            ref_p.append(float(ref.pressure[k]))
            kinds.append("deepest_common" if ref.kinds[k] == "bottom" else ref.kinds[k])
    n = len(labels)
    x = results.estimate
    cov = results.covariance
    slices = results.layout.pair_slices.values()
    idx = (np.concatenate([np.arange(sl.start, sl.stop) for sl in slices]) if n
           else np.zeros(0, int))
    adjustment = x[idx] if n else np.zeros(0)
    err = (np.sqrt(np.maximum(np.diag(cov)[idx], 0.0)) if cov is not None and n
           else np.full(n, np.nan))
    coords = {
        "pair": ("pair", labels, {"long_name": "station pair, <section>:<k> (pair k lies "
                                               "between stations k and k+1)"}),
        "pair_section": ("pair", section, {"long_name": "section of the pair"}),
        "pair_index": ("pair", np.asarray(index, dtype=np.int32),
                       {"long_name": "0-based pair number within its section", "units": "1"}),
        "first_station": ("pair", first, {"long_name": "station id of the pair's first station"}),
        "second_station": ("pair", second,
                           {"long_name": "station id of the pair's second station"}),
        "pair_lon": ("pair", np.asarray(lon), {"standard_name": "longitude",
                                               "units": "degrees_east",
                                               "long_name": "pair mid-point longitude"}),
        "pair_lat": ("pair", np.asarray(lat), {"standard_name": "latitude",
                                               "units": "degrees_north",
                                               "long_name": "pair mid-point latitude"}),
    }
    data = {
        "pair_distance": ("pair", np.asarray(dist), {"long_name": "station spacing",
                                                     "units": "km"}),
        "reference_pressure": ("pair", np.asarray(ref_p), {
            "long_name": "reference pressure: pressure of the reference level actually used",
            "units": "dbar"}),
        "reference_kind": ("pair", kinds, {
            "long_name": "kind of reference: pressure, deepest_common, isopycnal or velocity"}),
        "reference_velocity_adjustment": ("pair", np.asarray(adjustment, dtype=float), {
            "long_name": "reference-velocity adjustment from the box inverse, " + SIGN,
            "units": "m s-1", "ancillary_variables": "reference_velocity_adjustment_error"}),
        "reference_velocity_adjustment_error": ("pair", err, {
            "long_name": "reference-velocity adjustment, one posterior standard deviation",
            "units": "m s-1", "comment": "NaN without an inverse"}),
    }
    return coords, data


def _inverse_variables(study: Study, results: Results) -> tuple[dict, dict]:
    inv = results.inverse
    if inv is None:
        return {}, {}
    layout = results.layout
    faces = study.config.interfaces
    prior = inv.system.prior
    post = np.sqrt(np.maximum(np.diag(inv.covariance), 0.0))
    kinds = ["reference_velocity"] * layout.size
    for idx in layout.diapycnal.values():
        kinds[idx] = "diapycnal_transfer"
    for idx in layout.ekman.values():
        kinds[idx] = "ekman_fraction"
    coords: dict = {
        "unknown": ("unknown", list(layout.labels), {"long_name": "unknown of the inverse"}),
        "unknown_kind": ("unknown", kinds, {
            "long_name": "reference_velocity, diapycnal_transfer or ekman_fraction"}),
    }
    data: dict = {
        "unknown_resolution": ("unknown", np.asarray(inv.resolution_diagonal, dtype=float), {
            "long_name": "diagonal of the resolution matrix (1: fully determined by the "
                         "constraints; 0: the prior alone)", "units": "1"}),
    }
    boxes = sorted({box for box, _ in layout.diapycnal}, key=[b for b, _ in layout.diapycnal].index)
    if boxes and faces:
        shape = (len(boxes), len(faces))
        est, err, pri = (np.full(shape, np.nan) for _ in range(3))
        for (box, n), idx in layout.diapycnal.items():
            b = boxes.index(box)
            est[b, n], err[b, n], pri[b, n] = inv.estimate[idx], post[idx], prior[idx]
        coords["box"] = ("box", boxes, {"long_name": "box of the inverse"})
        what = "diapycnal transfer across the interface, positive from the lighter to the " \
               "denser class"
        for tag, values, text in (("adjusted", est, "estimate"),
                                  ("error", err, "one posterior standard deviation"),
                                  ("prior_std", pri, "prior standard deviation")):
            data[f"diapycnal_transfer_{tag}"] = (("box", "interface"), values, {
                "long_name": f"{what}, {text}", "units": udunits("Sv"), "display_units": "Sv"})
    if layout.ekman:
        names = list(study.operators)
        est, err, pri = (np.full(len(names), np.nan) for _ in range(3))
        for name, idx in layout.ekman.items():
            s = names.index(name)
            est[s], err[s], pri[s] = inv.estimate[idx], post[idx], prior[idx]
        for tag, values, text in (("adjusted", est, "estimate"),
                                  ("error", err, "one posterior standard deviation"),
                                  ("prior_std", pri, "prior standard deviation")):
            data[f"ekman_adjustment_{tag}"] = (("section",), values, {
                "long_name": f"fractional adjustment of the section's Ekman transport, {text}",
                "units": "1"})
    sys_ = inv.system
    coords["constraint"] = ("constraint", [f"{b}/{c}" for b, c in sys_.rows],
                            {"long_name": "<box>/<constraint> row of the inverse"})
    units = [udunits(u) for u in sys_.units]
    coords["constraint_units"] = ("constraint", units, {
        "long_name": "CF units of each constraint row (the rows mix volume, salt and heat)"})
    for tag, values, text in (("initial", sys_.initial, "net inflow into the box before the "
                                                        "inverse (positive in)"),
                              ("adjusted", inv.adjusted, "net inflow into the box after the "
                                                         "inverse (positive in)"),
                              ("noise", sys_.noise, "a priori noise, one standard deviation")):
        data[f"constraint_{tag}"] = ("constraint", np.asarray(values, dtype=float), {
            "long_name": text, "comment": "units per row: see constraint_units"})
    data["constraint_normalized_residual"] = ("constraint", inv.normalized_residuals, {
        "long_name": "adjusted net inflow divided by the noise", "units": "1"})
    return coords, data


def results_dataset(study: Study, results: Results) -> xr.Dataset:
    """Every reported number of a study, named, with dimensions and CF units.

    Parameters
    ----------
    study : Study
        The study.
    results : Results
        Its results (with or without an inverse).

    Returns
    -------
    xarray.Dataset
        See the module docstring and docs/outputs.md.
    """
    cfg = study.config
    n_level = max((op.pressure.size for op in study.operators.values()), default=0)
    deepest = max(study.operators.values(), key=lambda op: op.pressure.size)
    levels = np.asarray(deepest.pressure, dtype=float)[:n_level]
    faces = cfg.interfaces
    data = _section_variables(study, results, levels)
    pair_coords, pair_data = _pair_variables(study, results)
    inv_coords, inv_data = _inverse_variables(study, results)
    tracer_coords, tracer_data = _tracer_variables(study, results)
    data.update(pair_data)
    data.update(inv_data)
    data.update(tracer_data)
    coords = {
        "section": ("section", list(study.operators), {"long_name": "hydrographic section"}),
        "class": ("class", list(cfg.layer_names),
                  {"long_name": "density class, lightest first"}),
        "interface": ("interface", [f.display() for f in faces],
                      {"long_name": "class interface (potential density surface)"}),
        "interface_sigma": ("interface", np.asarray([f.sigma for f in faces], dtype=float),
                            {"long_name": "potential density anomaly of the interface",
                             "units": "kg m-3"}),
        "interface_p_ref": ("interface", np.asarray([f.p_ref for f in faces], dtype=float),
                            {"long_name": "sigma reference pressure of the interface",
                             "units": "dbar"}),
        "level": ("level", levels, {"standard_name": "sea_water_pressure", "units": "dbar",
                                    "positive": "down", "axis": "Z",
                                    "long_name": "pressure of the common grid"}),
        "level_end_pressure": ("level", level_end_pressure(levels),
                               {"units": "dbar", "long_name": "pressure where the depth "
                                "streamfunction accumulated through the level ends"}),
        **pair_coords,
        **inv_coords,
        **tracer_coords,
    }
    ds = xr.Dataset(data, coords=coords)
    ds.attrs.update({
        "Conventions": CF_VERSION,
        "title": cfg.title,
        "source": f"sectionkit {_package_version()}",
        "sign_convention": SIGN,
        "rho0": "1025 kg m-3 (mass transports are divided by it)",
        "inverse": "none" if results.inverse is None else (cfg.inverse.solver if cfg.inverse
                                                           else "none"),
        "comment": "display units: Sv = 1e6 m3 s-1, PW = 1e15 W; column meanings in "
                   "docs/outputs.md",
    })
    return ds


def write_results_nc(study: Study, results: Results, folder: str | Path) -> Path:
    """Write ``results.nc`` (every reported number, CF-NetCDF) into ``folder``.

    ``folder`` is the output folder (the report's temporary folder during a batch
    run); returns the file written.
    """
    path = Path(folder) / "results.nc"
    ds = results_dataset(study, results)
    encoding = {name: {"_FillValue": np.nan} for name, var in ds.data_vars.items()
                if var.dtype.kind == "f"}
    ds.to_netcdf(path, engine="netcdf4", encoding=encoding)
    return path
