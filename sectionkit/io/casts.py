"""A section from one file, a folder of per-cast files, or a list of files."""

from __future__ import annotations

import os
import re
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from sectionkit.errors import Cautions, InputFileError, SectionDataError
from sectionkit.io.csvfile import read_csv
from sectionkit.io.exchange import file_kind, read_exchange_ctd, station_key, station_sort_key
from sectionkit.io.formats import CSV_SUFFIXES, NETCDF_SUFFIXES, file_format
from sectionkit.io.netcdf import read_netcdf
from sectionkit.io.raw import Profile

Source = str | os.PathLike | Sequence[str | os.PathLike]


def natural_key(name: str) -> list[Any]:
    """Sort key that orders ``cast2`` before ``cast10`` (digit runs compare as numbers)."""
    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", name)]


def source_files(source: Source) -> list[str]:
    """The files a source names, in station order.

    Parameters
    ----------
    source : path, folder, or sequence of paths
        A section file; a folder of per-cast files (read in sorted file-name
        order, digit runs compared as numbers); or files in the order given.

    Returns
    -------
    list of str
        File paths.
    """
    if isinstance(source, (str, os.PathLike)):
        path = os.fspath(source)
        if os.path.isdir(path):
            listed = [n for n in os.listdir(path) if not n.startswith(".")]
            # exchange CTD files are recognised by their first line, whatever their name
            exchange = [n for n in listed if file_kind(os.path.join(path, n)) == "CTD"]
            names = exchange or [
                n for n in listed if n.lower().endswith(NETCDF_SUFFIXES + CSV_SUFFIXES)
            ]
            if not names:
                raise InputFileError(
                    f"folder {path}: holds no section files (.nc, .csv or WHP-Exchange CTD "
                    "files); point to the folder of per-cast files or to a section file"
                )
            return [os.path.join(path, n) for n in sorted(names, key=natural_key)]
        return [path]
    try:
        files = [os.fspath(s) for s in source]
    except TypeError as exc:
        raise InputFileError(
            f"source {source!r} is not a file path, a folder or a list of file paths"
        ) from exc
    if not files:
        raise InputFileError("no section files given; pass a file, a folder or a list of files")
    for f in files:
        if os.path.isdir(f):
            raise InputFileError(
                f"file {f}: is a folder inside a list of files; list the files themselves"
            )
    return files


def read_profiles(
    files: list[str],
    *,
    cautions: Cautions,
    variables: Mapping[str, str] | None = None,
    csv_options: Mapping[str, Any] | None = None,
) -> list[Profile]:
    """Read and concatenate the profiles of several files, in the order given.

    Parameters
    ----------
    files : list of str
        Section or per-cast files: NetCDF, CSV, WHP-Exchange CTD files or zips of them.
    cautions : Cautions
        Collects reading findings.
    variables : mapping, optional
        NetCDF: quantity to variable name where standard names are ambiguous.
    csv_options : mapping, optional
        CSV: keyword arguments of :func:`sectionkit.io.csvfile.read_csv`.

    Returns
    -------
    list of Profile
        All stations, file by file; WHP-Exchange CTD casts (files or zips,
        recognised by their first line) ordered by STNNBR.
    """
    profiles: list[Profile] = []
    exchange = 0
    for f in files:
        kind = file_kind(f) if os.path.isfile(f) else None
        if kind in ("CTD", "ZIP"):
            profiles.extend(read_exchange_ctd(f, cautions))
            exchange += 1
        elif kind == "BOTTLE":
            raise InputFileError(
                f"file {f}: is a WHP-Exchange bottle file, not CTD casts; give the CTD files "
                "(a folder or zip) as the section and the bottle file as its bottle key"
            )
        elif file_format(f) == "netcdf":
            profiles.extend(read_netcdf(f, variables=variables, cautions=cautions))
        else:
            profiles.extend(read_csv(f, cautions=cautions, **dict(csv_options or {})))
    if exchange == len(files):
        # exchange casts: station order by STNNBR (then CASTNO), not by file name
        profiles.sort(key=lambda p: (station_sort_key(str(p.station)), p.cast))
        profiles = deepest_casts(profiles, cautions)
    return profiles


def deepest_casts(profiles: list[Profile], cautions: Cautions) -> list[Profile]:
    """One cast per station: where a station has several (CASTNO), the deepest, with a caution.

    Parameters
    ----------
    profiles : list of Profile
        Exchange casts in station order.
    cautions : Cautions
        Records the casts left out.

    Returns
    -------
    list of Profile
        The deepest cast of every station, in the same order.
    """
    by_station: dict[str, list[Profile]] = {}
    for p in profiles:
        by_station.setdefault(str(p.station), []).append(p)
    out = []
    for station, casts in by_station.items():
        if len(casts) == 1:
            out.append(casts[0])
            continue
        deepest = max(casts, key=lambda c: float(np.nanmax(c.pressure, initial=-np.inf)))
        others = ", ".join(f"cast {c.cast} ({c.file})" for c in casts if c is not deepest)
        cautions.add(
            "extra-casts",
            f"station {station}: {len(casts)} casts; the deepest (cast {deepest.cast}, "
            f"{np.nanmax(deepest.pressure):g} dbar) is used and {others} left out",
            file=deepest.file, station=station,
        )
        out.append(deepest)
    return out


def reorder(profiles: list[Profile], order: Sequence[str]) -> list[Profile]:
    """Select and order stations by id.

    Parameters
    ----------
    profiles : list of Profile
        Stations with ids.
    order : sequence of str
        Station ids in the wanted order; stations not named are left out.

    Returns
    -------
    list of Profile
        The named stations in the given order.
    """
    by_id = {str(p.station): p for p in profiles}
    # "7" also finds a station written "007" or "7.0" (STNNBR of exchange files)
    for p in profiles:
        by_id.setdefault(station_key(str(p.station)), p)
    order = [s if str(s) in by_id else station_key(str(s)) for s in order]
    missing = [str(s) for s in order if str(s) not in by_id]
    if missing:
        raise SectionDataError(
            f"station order names {', '.join(missing)}, not found among the stations read "
            f"({', '.join(by_id)}); use the station ids of the files"
        )
    return [by_id[str(s)] for s in order]
