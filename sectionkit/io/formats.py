"""Which reader a file needs, judged by its first bytes and its name."""

from __future__ import annotations

import os

from sectionkit.errors import InputFileError

NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")
CSV_SUFFIXES = (".csv", ".tsv", ".txt")
_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")


def file_format(path: str | os.PathLike) -> str:
    """``"netcdf"`` or ``"csv"`` for a section file, or an error saying why neither.

    Parameters
    ----------
    path : str or path-like
        The file.

    Returns
    -------
    str
        ``"netcdf"`` when the file starts with a NetCDF-3 or HDF5 signature,
        ``"csv"`` when it is named .csv, .tsv or .txt.
    """
    file = os.fspath(path)
    if not os.path.exists(file):
        raise InputFileError(f"file {file}: does not exist; check the path")
    if os.path.isdir(file):
        raise InputFileError(f"file {file}: is a folder, expected a file")
    try:
        with open(file, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise InputFileError(f"file {file}: cannot be opened ({exc})") from exc
    if any(head.startswith(m) for m in _MAGIC):
        return "netcdf"
    if file.lower().endswith(CSV_SUFFIXES):
        return "csv"
    if not head:
        raise InputFileError(f"file {file}: is empty; expected a CF-NetCDF or CSV section file")
    raise InputFileError(
        f"file {file}: is not a NetCDF file (it starts with {head!r}, not a NetCDF or HDF5 "
        "signature); sectionkit reads CF-NetCDF files and long-form CSV files named .csv"
    )
