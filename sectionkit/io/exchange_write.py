"""Writing WHP-Exchange CTD and bottle files (for the invented demo cruise and tests).

The files follow the layout :mod:`sectionkit.io.exchange` reads: first line
``CTD,<stamp>`` or ``BOTTLE,<stamp>``, a comment, (CTD) ``NUMBER_HEADERS``
and ``KEY = value`` headers, column names, units, data with ``*_FLAG_W``
columns, ``END_DATA``; missing values -999. Files are written to a
temporary name and renamed.
"""

from __future__ import annotations

import os
import zipfile
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from sectionkit.atomic import replaced_atomically, write_text_atomic

#: Units written for each column.
UNITS = {
    "CTDPRS": "DBAR",
    "CTDTMP": "ITS-90",
    "CTDSAL": "PSS-78",
    "SALNTY": "PSS-78",
    "OXYGEN": "UMOL/KG",
    "SILCAT": "UMOL/KG",
    "NITRAT": "UMOL/KG",
    "PHSPHT": "UMOL/KG",
    "TCARBN": "UMOL/KG",
    "ALKALI": "UMOL/KG",
}
#: Decimals written for each column.
DECIMALS = {"CTDPRS": 1, "CTDTMP": 4, "CTDSAL": 4, "SALNTY": 4, "OXYGEN": 1, "SILCAT": 2,
            "NITRAT": 2, "PHSPHT": 3, "TCARBN": 1, "ALKALI": 1}


def _format(values: np.ndarray, decimals: int) -> list[str]:
    return [f"{v:.{decimals}f}" if np.isfinite(v) else "-999" for v in values]


def ctd_text(
    *,
    station: str,
    cast: str = "1",
    lat: float,
    lon: float,
    depth: float | None,
    pressure: np.ndarray,
    temperature: np.ndarray,
    salinity: np.ndarray,
    flags: Mapping[str, np.ndarray] | None = None,
    expocode: str = "SKDEMO2026",
    sect_id: str = "DEMO",
    stamp: str = "20260101SKDEMO",
    units: Mapping[str, str] | None = None,
    decimals: Mapping[str, int] | None = None,
) -> str:
    """The text of one CTD exchange file (one cast).

    Parameters
    ----------
    station, cast : str
        STNNBR and CASTNO.
    lat, lon : float
        Position, decimal degrees north and east.
    depth : float or None
        Bottom depth, m (-999 when None).
    pressure, temperature, salinity : ndarray (sample,)
        dbar, degC (ITS-90, in situ), PSS-78; NaN written as -999.
    flags : mapping, optional
        Column (CTDTMP, CTDSAL) to WOCE flags per sample; 2 (9 where
        missing) when not given.
    expocode, sect_id, stamp : str
        Header texts.
    units : mapping, optional
        Units labels replacing the defaults.
    decimals : mapping, optional
        Column to decimals written, replacing :data:`DECIMALS`; the key
        ``"position"`` sets those of LATITUDE and LONGITUDE (default 4).

    Returns
    -------
    str
    """
    units = {**UNITS, **(units or {})}
    places = {**DECIMALS, **(decimals or {})}
    flags = dict(flags or {})
    data = {"CTDPRS": np.asarray(pressure, float), "CTDTMP": np.asarray(temperature, float),
            "CTDSAL": np.asarray(salinity, float)}
    columns = ["CTDPRS", "CTDTMP", "CTDTMP_FLAG_W", "CTDSAL", "CTDSAL_FLAG_W"]
    cells = {c: _format(v, places[c]) for c, v in data.items()}
    for c in ("CTDTMP", "CTDSAL"):
        f = flags.get(c)
        if f is None:
            f = np.where(np.isfinite(data[c]), 2, 9)
        cells[f"{c}_FLAG_W"] = [str(int(v)) for v in f]
    header = [
        f"CTD,{stamp}",
        "# invented data written by sectionkit (no real cruise)",
        "NUMBER_HEADERS = 10",
        f"EXPOCODE = {expocode}",
        f"SECT_ID = {sect_id}",
        f"STNNBR = {station}",
        f"CASTNO = {cast}",
        "DATE = 20260101",
        "TIME = 0000",
        f"LATITUDE = {lat:.{places.get('position', 4)}f}",
        f"LONGITUDE = {lon:.{places.get('position', 4)}f}",
        f"DEPTH = {depth:.0f}" if depth is not None and np.isfinite(depth) else "DEPTH = -999",
        ",".join(columns),
        ",".join(units.get(c.replace("_FLAG_W", ""), "") if not c.endswith("_FLAG_W") else ""
                 for c in columns),
    ]
    body = [",".join(cells[c][k] for c in columns) for k in range(data["CTDPRS"].size)]
    return "\n".join(header + body + ["END_DATA", ""])


def write_ctd_zip(path: str | os.PathLike, casts: Sequence[Mapping[str, object]]) -> Path:
    """Write CTD casts as a zip of exchange files ``<expocode>_<station>_ct1.csv``.

    Parameters
    ----------
    path : path
        The zip.
    casts : sequence of mapping
        Keyword arguments of :func:`ctd_text`, one per cast.
    """
    path = Path(path)
    with replaced_atomically(path) as tmp:
        with zipfile.ZipFile(tmp, "w", compression=zipfile.ZIP_DEFLATED) as archive:
            for cast in casts:
                name = f"{cast.get('expocode', 'SKDEMO2026')}_{int(str(cast['station'])):05d}_" \
                       f"{int(str(cast.get('cast', '1'))):05d}_ct1.csv"
                info = zipfile.ZipInfo(name, date_time=(2026, 1, 1, 0, 0, 0))
                info.compress_type = zipfile.ZIP_DEFLATED
                archive.writestr(info, ctd_text(**cast))
    return path


def write_ctd_folder(folder: str | os.PathLike, casts: Sequence[Mapping[str, object]]) -> Path:
    """Write CTD casts as one exchange file per cast into ``folder`` (created)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for cast in casts:
        write_text_atomic(folder / f"st{int(str(cast['station'])):04d}_ct1.csv",
                          ctd_text(**cast))
    return folder


def bottle_text(
    rows: Mapping[str, Sequence[object]],
    *,
    flags: Mapping[str, Sequence[int]] | None = None,
    expocode: str = "SKDEMO2026",
    sect_id: str = "DEMO",
    stamp: str = "20260101SKDEMO",
    units: Mapping[str, str] | None = None,
) -> str:
    """The text of a bottle exchange file.

    Parameters
    ----------
    rows : mapping
        Column to values, one per sample: STNNBR, CASTNO, CTDPRS and any of
        CTDTMP, CTDSAL, SALNTY, OXYGEN, SILCAT, ...; NaN written as -999.
    flags : mapping, optional
        Column to WOCE bottle flags (2, or 9 where missing, by default) for
        every measured column other than CTDPRS.
    expocode, sect_id, stamp : str
        Texts of the EXPOCODE and SECT_ID columns and of the first line.
    units : mapping, optional
        Units labels replacing the defaults.

    Returns
    -------
    str
    """
    units = {**UNITS, **(units or {})}
    flags = dict(flags or {})
    n = len(rows["STNNBR"])
    measured = [c for c in rows if c not in ("STNNBR", "CASTNO", "SAMPNO", "CTDPRS")]
    columns = ["EXPOCODE", "SECT_ID", "STNNBR", "CASTNO", "SAMPNO", "CTDPRS"]
    cells: dict[str, list[str]] = {
        "EXPOCODE": [expocode] * n,
        "SECT_ID": [sect_id] * n,
        "STNNBR": [str(v) for v in rows["STNNBR"]],
        "CASTNO": [str(v) for v in rows.get("CASTNO", ["1"] * n)],
        "SAMPNO": [str(v) for v in rows.get("SAMPNO", range(1, n + 1))],
        "CTDPRS": _format(np.asarray(rows["CTDPRS"], float), 1),
    }
    for c in measured:
        values = np.asarray(rows[c], float)
        cells[c] = _format(values, DECIMALS.get(c, 3))
        f = flags.get(c)
        if f is None:
            f = np.where(np.isfinite(values), 2, 9)
        cells[f"{c}_FLAG_W"] = [str(int(v)) for v in f]
        columns += [c, f"{c}_FLAG_W"]
    header = [
        f"BOTTLE,{stamp}",
        "# invented data written by sectionkit (no real cruise)",
        ",".join(columns),
        ",".join("" if c.endswith("_FLAG_W") or c in ("EXPOCODE", "SECT_ID", "STNNBR",
                                                       "CASTNO", "SAMPNO")
                 else units.get(c, "") for c in columns),
    ]
    body = [",".join(cells[c][k] for c in columns) for k in range(n)]
    return "\n".join(header + body + ["END_DATA", ""])


def write_bottle(path: str | os.PathLike, rows: Mapping[str, Sequence[object]],
                 **options: object) -> Path:
    """Write a bottle exchange file (arguments of :func:`bottle_text`)."""
    return write_text_atomic(Path(path), bottle_text(rows, **options))
