"""``sectionkit check``: what a section file holds, in words, or why it cannot be used."""

from __future__ import annotations

import argparse
import dataclasses
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import xarray as xr

from sectionkit.errors import Cautions, SectionkitError
from sectionkit.geometry import great_circle_distance
from sectionkit.io.bottle import grid_tracers, read_bottle, tracer_variables
from sectionkit.io.casts import Source
from sectionkit.io.csvfile import CSV_COLUMNS
from sectionkit.io.formats import CSV_SUFFIXES
from sectionkit.io.raw import RawSection
from sectionkit.io.section import grid_raw_section, read_section
from sectionkit.io.validate import validate_section
from sectionkit.thermo import SALINITY_KINDS, TEMPERATURE_KINDS, GriddingRules


def _range(values: np.ndarray, fmt: str) -> str:
    return f"{format(float(np.min(values)), fmt)} .. {format(float(np.max(values)), fmt)}"


def format_report(raw: RawSection, ds: xr.Dataset, cautions: Cautions) -> str:
    """The report text for a loaded section.

    Parameters
    ----------
    raw : RawSection
        The profiles as read.
    ds : xarray.Dataset
        The gridded section.
    cautions : Cautions
        Findings of reading, checking and gridding.

    Returns
    -------
    str
        Several lines of text.
    """
    ids = raw.stations
    first = raw.profiles[0]
    read_as = sorted(
        {
            f"pressure {p.names.get('pressure')} [{p.units.get('pressure')}], "
            f"salinity {p.names.get('salinity')} ({p.salinity_kind}), "
            f"temperature {p.names.get('temperature')} ({p.temperature_kind}, "
            f"[{p.units.get('temperature')}])"
            for p in raw.profiles
        }
    )
    deepest = np.array([p.pressure[p.complete()][-1] for p in raw.profiles])
    given = sum(np.isfinite(p.bottom_depth) for p in raw.profiles)
    spacing = great_circle_distance(raw.lon, raw.lat) / 1e3
    pressure = ds["pressure"].values
    files = raw.sources if len(raw.sources) <= 3 else raw.sources[:2] + ["..."] + raw.sources[-1:]
    lines = [
        f"Section {raw.name}: {len(ids)} stations from {', '.join(files)}",
        f"  stations:  {ids[0]} .. {ids[-1]}"
        + (f" (first in {first.file})" if len(raw.sources) > 1 else ""),
        "  read as:   " + "; ".join(read_as),
        f"  latitude:  {_range(raw.lat, '.3f')} degrees_north",
        f"  longitude: {_range(raw.lon, '.3f')} degrees_east",
        f"  deepest samples: {_range(deepest, '.0f')} dbar",
        f"  bottom:    {_range(ds['bottom_depth'].values, '.0f')} m "
        f"({given} of {len(ids)} stations give a bottom depth)",
        f"  spacing:   min {spacing.min():.1f} km, median {np.median(spacing):.1f} km, "
        f"max {spacing.max():.1f} km (total {spacing.sum():.1f} km)",
        f"  grid:      0 .. {pressure[-1]:g} dbar every {ds.attrs['dp']:g} dbar "
        f"({pressure.size} levels)",
    ]
    lines.extend(flag_report(raw))
    if cautions:
        lines.append(f"  cautions ({len(cautions)}):")
        lines.extend(f"    {c}" for c in cautions)
    else:
        lines.append("  cautions:  none")
    return "\n".join(lines)


def _flag_text(per_flag: dict[int, int]) -> str:
    return ", ".join(
        f"{'no flag' if flag < 0 else f'flag {flag}'}: {n}" for flag, n in sorted(per_flag.items())
    )


def flag_report(raw: RawSection) -> list[str]:
    """Lines counting WOCE quality flags per variable, in total and per station.

    Parameters
    ----------
    raw : RawSection
        Profiles as read; only WHP-Exchange casts carry flag counts.

    Returns
    -------
    list of str
        Empty when no profile has flags. Stations whose samples are all
        flagged 2 (acceptable) are summarised, the others listed.
    """
    flagged = [p for p in raw.profiles if p.flag_counts]
    if not flagged:
        return []
    total: dict[str, dict[int, int]] = {}
    for p in flagged:
        for column, per_flag in p.flag_counts.items():
            into = total.setdefault(column, {})
            for flag, n in per_flag.items():
                into[flag] = into.get(flag, 0) + n
    lines = ["  WOCE flags (2 used; 1, 3 used with a caution; 6, 7 used; 4, 5, 9 dropped):"]
    lines += [f"    {column}: {_flag_text(per_flag)}" for column, per_flag in total.items()]
    clean = 0
    for p in flagged:
        if all(set(per_flag) <= {2} for per_flag in p.flag_counts.values()):
            clean += 1
            continue
        text = "; ".join(
            f"{c} {_flag_text(f)}" for c, f in p.flag_counts.items() if set(f) - {2}
        )
        lines.append(f"    station {p.station}: {text}")
    lines.append(f"    {clean} of {len(flagged)} stations have every sample flagged 2")
    return lines


def describe_section(
    source: Source,
    dp: float = 2.0,
    *,
    allow_equator: bool = False,
    rules: GriddingRules | None = None,
    bottle: str | None = None,
    **read_options: Any,
) -> str:
    """Read, check and grid a section, and describe it for the command line.

    Parameters
    ----------
    source : path, folder or sequence of paths
        As for :func:`sectionkit.io.read_section`.
    dp : float
        Grid step, dbar.
    allow_equator : bool
        Keep pairs near the equator with a caution instead of refusing them.
    rules : GriddingRules, optional
        Gap limits (dbar) and bottom tolerance (m).
    bottle : str, optional
        A WHP-Exchange bottle file of the same stations: its flags and tracers
        are reported too.
    **read_options
        Passed to :func:`sectionkit.io.read_section` (name, columns,
        temperature_kind, salinity_kind, pressure_units, temperature_units,
        variables, order).

    Returns
    -------
    str
        Stations, position and depth ranges, spacing (km), grid and cautions.

    Raises
    ------
    SectionkitError
        Whatever :func:`sectionkit.io.load_section` would raise.
    """
    rules = dataclasses.replace(rules or GriddingRules(), dp=float(dp))
    raw = read_section(source, **read_options)
    cautions = validate_section(raw, allow_equator=allow_equator)
    ds = grid_raw_section(raw, rules, cautions)
    if bottle is None:
        return format_report(raw, ds, cautions)
    bottles = read_bottle(bottle, cautions)
    ds = grid_tracers(ds, bottles, cautions)
    text = format_report(raw, ds, cautions)
    head, sep, tail = text.partition("\n  cautions")
    lines = bottles.flag_report()
    for name in tracer_variables(ds):
        have = int(np.isfinite(ds[name].values).any(axis=1).sum())
        lines.append(f"    {name} ({ds[name].attrs['exchange_name']}): profiles at {have} of "
                     f"{ds.sizes['station']} stations (PCHIP between good bottles)")
    return "\n".join([head, *lines]) + sep + tail


def _pairs(items: Sequence[str] | None, what: str) -> dict[str, str]:
    out = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise argparse.ArgumentTypeError(f"{what} {item!r} must look like KEY=VALUE")
        out[key.strip()] = value.strip()
    return out


def add_check_arguments(parser: argparse.ArgumentParser) -> argparse.ArgumentParser:
    """Add the ``check`` command's arguments to a parser (for the CLI's subcommand).

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The (sub)parser to fill.

    Returns
    -------
    argparse.ArgumentParser
        The same parser.
    """
    parser.add_argument(
        "files",
        nargs="+",
        metavar="FILE",
        help="section file (CF-NetCDF or CSV) or folder of per-cast files; each is one section",
    )
    parser.add_argument("--dp", type=float, default=2.0, help="grid step, dbar (default 2)")
    parser.add_argument(
        "--bottle", metavar="FILE", help="WHP-Exchange bottle file of the stations (tracers)"
    )
    parser.add_argument(
        "--allow-equator", action="store_true", help="keep pairs within 2 degrees of the equator"
    )
    parser.add_argument(
        "--column",
        action="append",
        metavar="KEY=HEADER",
        help=f"CSV only: header for a column; KEY is one of {', '.join(CSV_COLUMNS)}",
    )
    parser.add_argument(
        "--variable",
        action="append",
        metavar="QUANTITY=NAME",
        help="NetCDF variable to use where several share a standard_name",
    )
    parser.add_argument(
        "--temperature-kind", choices=TEMPERATURE_KINDS, default="in-situ",
        help="CSV only: what the temperature column holds (default in-situ); NetCDF files say "
        "it by standard_name")
    parser.add_argument(
        "--salinity-kind", choices=SALINITY_KINDS, default="practical",
        help="CSV only: what the salinity column holds (default practical); NetCDF files say "
        "it by standard_name")
    parser.add_argument("--pressure-units", default="dbar",
                        help="CSV only: pressure units (dbar, Pa, ...); NetCDF files carry "
                        "units attributes")
    parser.add_argument(
        "--temperature-units", default="degC",
        help="CSV only: temperature units (degC, K); NetCDF files carry units attributes"
    )
    return parser


def run_check(
    args: argparse.Namespace, out: TextIO | None = None, err: TextIO | None = None
) -> int:
    """Describe every file named in parsed ``check`` arguments.

    Parameters
    ----------
    args : argparse.Namespace
        As filled by a parser set up with :func:`add_check_arguments`.
    out, err : text streams, optional
        Where reports and error messages go (default stdout and stderr).

    Returns
    -------
    int
        0 when every file could be loaded, 1 when any raised a sectionkit error.
    """
    out = sys.stdout if out is None else out
    err = sys.stderr if err is None else err
    status = 0
    try:
        options: Mapping[str, Any] = {
            "columns": _pairs(args.column, "--column") or None,
            "variables": _pairs(args.variable, "--variable") or None,
            "temperature_kind": args.temperature_kind,
            "salinity_kind": args.salinity_kind,
            "pressure_units": args.pressure_units,
            "temperature_units": args.temperature_units,
        }
    except argparse.ArgumentTypeError as exc:
        print(f"error: {exc}", file=err)
        return 1
    csv_flags = [flag for flag, given, default in (
        ("--column", args.column, None), ("--temperature-kind", args.temperature_kind, "in-situ"),
        ("--salinity-kind", args.salinity_kind, "practical"),
        ("--pressure-units", args.pressure_units, "dbar"),
        ("--temperature-units", args.temperature_units, "degC")) if given != default]
    for i, file in enumerate(args.files):
        if i:
            print(file=out)
        if csv_flags and Path(file).is_file() and Path(file).suffix.lower() not in CSV_SUFFIXES:
            # the readers ignore them for NetCDF, so saying nothing would misinform
            verb = "applies" if len(csv_flags) == 1 else "apply"
            print(f"error: {file}: {', '.join(csv_flags)} {verb} to CSV files only; a NetCDF "
                  "file states what its temperature and salinity are by standard_name and "
                  "its units by units attributes; drop the option or correct the file's "
                  "attributes", file=err)
            status = 1
            continue
        try:
            text = describe_section(file, args.dp, allow_equator=args.allow_equator,
                                    bottle=getattr(args, "bottle", None), **options)
        except SectionkitError as exc:
            print(f"error: {file}: {exc}", file=err)
            status = 1
            continue
        print(text, file=out)
    return status


def check_main(
    argv: Sequence[str] | None = None, out: TextIO | None = None, err: TextIO | None = None
) -> int:
    """The ``sectionkit check FILE...`` command.

    Parameters
    ----------
    argv : sequence of str, optional
        Arguments after ``check`` (default: ``sys.argv[1:]``).
    out, err : text streams, optional
        Where reports and error messages go (default stdout and stderr).

    Returns
    -------
    int
        Exit status: 0 when every file loaded, 1 on a sectionkit error (message
        printed without traceback). Bad usage exits with status 2 (argparse).
    """
    parser = add_check_arguments(
        argparse.ArgumentParser(
            prog="sectionkit check",
            description="Validate section files and print what was found.",
        )
    )
    args = parser.parse_args(argv)
    return run_check(args, out, err)
