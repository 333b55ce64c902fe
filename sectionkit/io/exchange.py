"""WHP-Exchange files (the WOCE Hydrographic Programme's open CSV format): parsing and CTD casts.

A file starts with ``CTD,<stamp>`` or ``BOTTLE,<stamp>``; ``#`` lines are
comments. A CTD file then has ``NUMBER_HEADERS = n`` (the count includes
that line) and ``KEY = value`` lines (EXPOCODE, SECT_ID, STNNBR, CASTNO,
DATE, TIME, LATITUDE, LONGITUDE, DEPTH); both kinds then have a line of
column names, a line of units, comma-separated data rows and ``END_DATA``.
Missing values are -999 (any value at or below -999 is read as missing).
Quality flags are the ``<COLUMN>_FLAG_W`` columns (WOCE flags).

WOCE CTD flags as sectionkit reads them (WOCE Hydrographic Programme
operations manual, flag tables; recalled from memory): 2 acceptable, 6
interpolated over a pressure gap and 7 despiked are used; 1 not calibrated
and 3 questionable are used with a caution; 4 bad, 5 not reported and 9 not
sampled are dropped. Any other flag is an error. A section is a folder or a
zip of CTD files (one cast per file), recognised by its first line, never by
the file name; stations are ordered by STNNBR.
"""

from __future__ import annotations

import os
import zipfile
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np

from sectionkit.errors import Cautions, InputFileError, SectionDataError
from sectionkit.io.raw import Profile

#: First-line keywords of the two exchange kinds.
KINDS = ("CTD", "BOTTLE")
#: Values at or below this are the exchange fill value (-999).
FILL = -999.0
#: Columns kept as text (identifiers, dates), never parsed as numbers.
TEXT_COLUMNS = ("EXPOCODE", "SECT_ID", "STNNBR", "CASTNO", "SAMPNO", "BTLNBR", "DATE", "TIME")
#: WOCE CTD flags: used, used with a caution, dropped.
CTD_USED = frozenset({2, 6, 7})
CTD_CAUTION = frozenset({1, 3})
CTD_DROPPED = frozenset({4, 5, 9})
CTD_FLAG_MEANING = {
    1: "not calibrated",
    2: "acceptable",
    3: "questionable",
    4: "bad",
    5: "not reported",
    6: "interpolated",
    7: "despiked",
    9: "not sampled",
}
#: Units labels understood per quantity (upper case, spaces removed).
PRESSURE_UNITS = {"DBAR": 1.0, "DBARS": 1.0, "DECIBAR": 1.0, "DB": 1.0}
TEMPERATURE_UNITS = ("ITS-90", "ITS90", "DEGC", "DEG_C", "IPTS-68", "ITS-68", "IPTS68", "ITS68")
SALINITY_UNITS = ("PSS-78", "PSS78", "PSU")
CONCENTRATION_UNITS = ("UMOL/KG",)
_ITS68 = ("IPTS-68", "ITS-68", "IPTS68", "ITS68")


@dataclass
class ExchangeTable:
    """One exchange file as read: headers, columns, units and data.

    Attributes
    ----------
    kind : {"CTD", "BOTTLE"}
        From the first line.
    file : str
        The file (``archive.zip:member`` inside a zip), for messages.
    headers : dict of str -> str
        ``KEY = value`` header lines (CTD files).
    columns : list of str
        Column names, as in the file.
    units : dict of str -> str
        Units label of each column, as in the file.
    text : dict of str -> ndarray of str
        Identifier columns (STNNBR, CASTNO, ...), stripped.
    numbers : dict of str -> ndarray of float
        Every other column; the fill value read as NaN.
    lines : ndarray of int
        1-based line number of each data row in the file.
    """

    kind: str
    file: str
    headers: dict[str, str]
    columns: list[str]
    units: dict[str, str]
    text: dict[str, np.ndarray] = field(default_factory=dict)
    numbers: dict[str, np.ndarray] = field(default_factory=dict)
    lines: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))

    def unit_key(self, column: str) -> str:
        """The column's units label in upper case without spaces."""
        return "".join(self.units.get(column, "").upper().split())

    def header_number(self, key: str) -> float:
        """A numeric header value (NaN when missing or the fill value)."""
        text = self.headers.get(key, "").strip()
        if not text:
            return float("nan")
        try:
            value = float(text)
        except ValueError:
            raise InputFileError(
                f"file {self.file}: header {key} = {text!r} is not a number; "
                "give decimal degrees or metres"
            ) from None
        return float("nan") if value <= FILL else value


def exchange_kind(head: bytes | str) -> str | None:
    """``"CTD"`` or ``"BOTTLE"`` when the text starts like an exchange file, else None.

    Parameters
    ----------
    head : bytes or str
        The first bytes of a file.
    """
    if isinstance(head, bytes):
        head = head.decode("utf-8", "replace")
    first = head.lstrip("\ufeff").split("\n", 1)[0].strip()
    word = first.split(",", 1)[0].strip().upper()
    return word if word in KINDS and "," in first else None


def file_kind(path: str | os.PathLike) -> str | None:
    """What exchange content a path holds: ``"CTD"``, ``"BOTTLE"``, ``"ZIP"`` or None.

    Parameters
    ----------
    path : str or path-like
        A file.
    """
    try:
        with open(path, "rb") as fh:
            head = fh.read(64)
    except OSError:
        return None
    if head.startswith(b"PK\x03\x04") and zipfile.is_zipfile(path):
        return "ZIP"
    return exchange_kind(head)


def _members(path: str) -> Iterator[tuple[str, str]]:
    """(label, text) of each exchange member of a zip, in member-name order."""
    try:
        with zipfile.ZipFile(path) as archive:
            names = sorted(
                n
                for n in archive.namelist()
                if not n.endswith("/") and not os.path.basename(n).startswith(".")
                and not n.startswith("__MACOSX")
            )
            for name in names:
                data = archive.read(name)
                if exchange_kind(data[:64]) is None:
                    continue
                yield f"{path}:{name}", decode_text(data)
    except (zipfile.BadZipFile, OSError) as exc:
        raise InputFileError(
            f"file {path}: cannot be read as a zip archive ({exc}); "
            "check that the download is complete"
        ) from exc


def exchange_texts(path: str | os.PathLike) -> list[tuple[str, str]]:
    """The exchange texts a file holds: itself, or every exchange member of a zip.

    Parameters
    ----------
    path : str or path-like
        An exchange file or a zip of exchange files.

    Returns
    -------
    list of (str, str)
        Label for messages and the file's text.
    """
    file = os.fspath(path)
    if file_kind(file) == "ZIP":
        texts = list(_members(file))
        if not texts:
            raise InputFileError(
                f"file {file}: the zip holds no WHP-Exchange files (none starts with "
                "'CTD,' or 'BOTTLE,'); point to the zip of the cruise's CTD files"
            )
        return texts
    try:
        with open(file, "rb") as fh:
            return [(file, decode_text(fh.read()))]
    except OSError as exc:
        raise InputFileError(f"file {file}: cannot be opened ({exc})") from exc


def decode_text(data: bytes) -> str:
    """The text of a file as delivered: UTF-8, or Latin-1 when it is not valid UTF-8.

    Older exchange files carry Latin-1 characters (degree signs, names) in
    their comment lines; every byte is a Latin-1 character, so nothing is
    replaced or lost, and a data line keeps the characters it really has.

    Parameters
    ----------
    data : bytes
        The file's bytes.

    Returns
    -------
    str
    """
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        return data.decode("latin-1")


def parse_exchange(text: str, file: str) -> ExchangeTable:
    """Parse the text of one WHP-Exchange file.

    Parameters
    ----------
    text : str
        Whole file.
    file : str
        Label for messages.

    Returns
    -------
    ExchangeTable

    Raises
    ------
    InputFileError
        Any malformed line, named by file and line number.
    """
    lines = text.lstrip("\ufeff").splitlines()

    def fail(number: int, problem: str) -> InputFileError:
        return InputFileError(f"file {file}, line {number}: {problem}")

    kind = exchange_kind(lines[0] if lines else "")
    if kind is None:
        first = lines[0][:40] if lines else ""
        raise fail(1, f"starts with {first!r}; a WHP-Exchange file starts with 'CTD,<stamp>' "
                      "or 'BOTTLE,<stamp>'")
    k = 1
    while k < len(lines) and (lines[k].lstrip().startswith("#") or not lines[k].strip()):
        k += 1
    headers: dict[str, str] = {}
    if kind == "CTD":
        if k >= len(lines) or not lines[k].replace(" ", "").upper().startswith("NUMBER_HEADERS="):
            raise fail(k + 1, "expected 'NUMBER_HEADERS = n' after the comments of a CTD file")
        count_text = lines[k].split("=", 1)[1].strip()
        if not count_text.isdigit() or int(count_text) < 1:
            raise fail(k + 1, f"NUMBER_HEADERS = {count_text!r} is not a whole number >= 1")
        expected = int(count_text) - 1  # the count includes the NUMBER_HEADERS line
        start = k + 1
        k += 1
        while k < len(lines) and "=" in lines[k] and not lines[k].lstrip().startswith("#"):
            key, _, value = lines[k].partition("=")
            headers[key.strip().upper()] = value.strip()
            k += 1
        if len(headers) != expected:
            raise fail(
                start + 1,
                f"NUMBER_HEADERS = {count_text} announces {expected} 'KEY = value' lines after "
                f"it but {len(headers)} follow; correct the count or the header lines",
            )
    if k + 1 >= len(lines):
        raise fail(k + 1, "the file ends before its column-name and units lines")
    columns = [c.strip().upper() for c in lines[k].split(",")]
    units_line = [u.strip() for u in lines[k + 1].split(",")]
    if len(columns) > 1 and columns[-1] == "":  # a trailing comma
        columns = columns[:-1]
    if units_line and units_line[-1] == "" and len(units_line) == len(columns) + 1:
        units_line = units_line[:-1]
    if len(units_line) != len(columns):
        raise fail(k + 2, f"the units line has {len(units_line)} fields but the column line "
                          f"above has {len(columns)}; give one unit (possibly empty) per column")
    if len(set(columns)) != len(columns) or "" in columns:
        raise fail(k + 1, "column names must be non-empty and unique")
    units = dict(zip(columns, units_line, strict=True))
    rows: list[list[str]] = []
    numbers_at: list[int] = []
    end = None
    for n in range(k + 2, len(lines)):
        line = lines[n].strip()
        if not line or line.startswith("#"):
            continue
        if line.upper() == "END_DATA":
            end = n
            break
        fields = [f.strip() for f in line.split(",")]
        if len(fields) == len(columns) + 1 and fields[-1] == "":
            fields = fields[:-1]
        if len(fields) != len(columns):
            raise fail(n + 1, f"{len(fields)} fields but {len(columns)} columns; "
                              "every data row needs one value per column")
        rows.append(fields)
        numbers_at.append(n + 1)
    if end is None:
        raise fail(len(lines), "the file ends without END_DATA; it is probably truncated — "
                               "download it again")
    table = ExchangeTable(kind, file, headers, columns, units, lines=np.array(numbers_at))
    for c, column in enumerate(columns):
        values = [r[c] for r in rows]
        if column in TEXT_COLUMNS:
            table.text[column] = np.array(values, dtype=str)
            continue
        try:
            out = np.array([v or "nan" for v in values], dtype=float)
        except ValueError:
            for r, value in enumerate(values):  # find the cell to name it
                try:
                    float(value or "nan")
                except ValueError:
                    raise fail(numbers_at[r], f"column {column}: {value!r} is not a number; "
                                              "missing values are -999") from None
            raise
        bad = ~np.isfinite(out) & np.array([v.lower() not in ("", "nan") for v in values],
                                            dtype=bool)
        if bad.any():
            r = int(np.flatnonzero(bad)[0])
            raise fail(numbers_at[r], f"column {column}: {values[r]!r} is not a finite number; "
                                      "missing values are -999")
        out[out <= FILL] = np.nan
        table.numbers[column] = out
    return table


def flag_codes(table: ExchangeTable, column: str) -> np.ndarray | None:
    """The WOCE flags of a column as integers (None when the column has no flag column).

    Parameters
    ----------
    table : ExchangeTable
        The file.
    column : str
        Data column, e.g. ``CTDTMP``.

    Returns
    -------
    ndarray of int or None
        One flag per row; -1 where the flag is missing.
    """
    values = table.numbers.get(f"{column}_FLAG_W")
    if values is None:
        return None
    bad = np.isfinite(values) & (values != np.round(values))
    if bad.any():
        r = int(np.flatnonzero(bad)[0])
        raise InputFileError(f"file {table.file}, line {table.lines[r]}: {column}_FLAG_W = "
                             f"{values[r]:g} is not a whole-number WOCE flag")
    return np.where(np.isfinite(values), values, -1).astype(int)


def apply_flags(
    table: ExchangeTable,
    column: str,
    used: frozenset[int],
    caution: frozenset[int],
    dropped: frozenset[int],
    what: str,
) -> tuple[np.ndarray, dict[int, int]]:
    """A column's values with dropped flags set missing, and the count per flag.

    Parameters
    ----------
    table : ExchangeTable
        The file.
    column : str
        Data column.
    used, caution, dropped : frozenset of int
        Flags kept, kept with a caution, and dropped.
    what : str
        ``"CTD"`` or ``"bottle"``, for the message on an unknown flag.

    Returns
    -------
    values : ndarray (row,)
        NaN where missing or dropped.
    counts : dict of int -> int
        Rows per flag (flag -1: no flag given); empty when the column has no
        flag column.
    """
    values = table.numbers[column].copy()
    flags = flag_codes(table, column)
    if flags is None:
        return values, {}
    known = used | caution | dropped
    unknown = (flags >= 0) & ~np.isin(flags, list(known))
    if unknown.any():
        r = int(np.flatnonzero(unknown)[0])
        raise SectionDataError(
            f"file {table.file}, line {table.lines[r]}: {column}_FLAG_W = {flags[r]} is not a "
            f"WOCE {what} flag sectionkit knows ({', '.join(str(f) for f in sorted(known))}); "
            "correct the flag"
        )
    values[np.isin(flags, list(dropped))] = np.nan
    counts = {int(f): int(n) for f, n in zip(*np.unique(flags, return_counts=True), strict=True)}
    return values, counts


def _require_column(table: ExchangeTable, column: str) -> None:
    if column not in table.numbers:
        raise InputFileError(
            f"file {table.file}: no column {column}; columns present: {', '.join(table.columns)}"
            f" — a CTD file needs CTDPRS, CTDTMP and CTDSAL"
        )


def check_units(table: ExchangeTable, column: str, accepted: tuple[str, ...] | dict) -> str:
    """The column's units key, refused (naming file, column and units) when not ``accepted``."""
    key = table.unit_key(column)
    if key not in accepted:
        raise SectionDataError(
            f"file {table.file}, variable {column}: units {table.units.get(column, '')!r} are "
            f"not understood; expected {' or '.join(accepted)}"
        )
    return key


def ctd_profile(table: ExchangeTable, cautions: Cautions) -> Profile:
    """One station's profile from a parsed CTD exchange file.

    Parameters
    ----------
    table : ExchangeTable
        A ``CTD`` file.
    cautions : Cautions
        Collects flag findings (questionable data used, samples dropped).

    Returns
    -------
    Profile
        Pressure (dbar), in-situ temperature (degC, ITS-90), Practical
        Salinity, bottom depth (m, from the DEPTH header); samples with a
        dropped flag are NaN. ``flag_counts`` holds the counts per variable and
        flag; ``cast`` the CASTNO header.
    """
    if table.kind != "CTD":
        raise InputFileError(
            f"file {table.file}: is a {table.kind} exchange file, not a CTD file; name bottle "
            "files with the bottle key of the section"
        )
    station = table.headers.get("STNNBR", "").strip()
    if not station:
        raise InputFileError(f"file {table.file}: header STNNBR is missing; every CTD file "
                             "names its station")
    for column in ("CTDPRS", "CTDTMP", "CTDSAL"):
        _require_column(table, column)
    check_units(table, "CTDPRS", PRESSURE_UNITS)
    t_units = check_units(table, "CTDTMP", TEMPERATURE_UNITS)
    check_units(table, "CTDSAL", SALINITY_UNITS)
    counts: dict[str, dict[int, int]] = {}
    data = {}
    for column in ("CTDPRS", "CTDTMP", "CTDSAL"):
        data[column], counts[column] = apply_flags(
            table, column, CTD_USED, CTD_CAUTION, CTD_DROPPED, "CTD"
        )
    # a scan with a dropped (or not sampled) value is left out whole: it is not an
    # incomplete sample but a flagged one, and the gap it leaves is gridded as any gap
    flagged = np.zeros(table.lines.size, dtype=bool)
    for column in ("CTDPRS", "CTDTMP", "CTDSAL"):
        codes = flag_codes(table, column)
        if codes is not None:
            flagged |= np.isin(codes, list(CTD_DROPPED))
    data = {c: v[~flagged] for c, v in data.items()}
    temperature = data["CTDTMP"]
    if t_units in _ITS68:
        temperature = temperature / 1.00024  # T90 = T68 / 1.00024 (Saunders 1990; as gsw)
    lat = table.header_number("LATITUDE")
    lon = table.header_number("LONGITUDE")
    depth = table.header_number("DEPTH")
    profile = Profile(
        station=station,
        file=table.file,
        lat=lat,
        lon=lon,
        pressure=data["CTDPRS"],
        salinity=data["CTDSAL"],
        temperature=temperature,
        bottom_depth=depth,
        salinity_kind="practical",
        temperature_kind="in-situ",
        names={"pressure": "CTDPRS", "salinity": "CTDSAL", "temperature": "CTDTMP",
               "latitude": "LATITUDE", "longitude": "LONGITUDE", "bottom_depth": "DEPTH"},
        units={"pressure": table.units["CTDPRS"], "salinity": table.units["CTDSAL"],
               "temperature": table.units["CTDTMP"], "bottom_depth": "m"},
        flag_counts={c: n for c, n in counts.items() if n},
        cast=table.headers.get("CASTNO", "").strip(),
    )
    flag_cautions(profile, counts, CTD_CAUTION, CTD_DROPPED, CTD_FLAG_MEANING, cautions)
    return profile


def flag_cautions(
    profile: Profile,
    counts: dict[str, dict[int, int]],
    caution: frozenset[int],
    dropped: frozenset[int],
    meaning: dict[int, str],
    cautions: Cautions,
) -> None:
    """Cautions for flagged data used with a caution, and for dropped samples."""
    for column, per_flag in counts.items():
        for flag, n in sorted(per_flag.items()):
            if flag in caution:
                cautions.add(
                    "questionable-flag",
                    f"{profile.where()}: {n} {column} sample(s) flagged {flag} "
                    f"({meaning.get(flag, '')}) were used",
                    file=profile.file, station=profile.station, variable=column,
                )
            elif flag in dropped and flag != 9:
                cautions.add(
                    "flagged-dropped",
                    f"{profile.where()}: {n} {column} sample(s) flagged {flag} "
                    f"({meaning.get(flag, '')}) were dropped; short gaps they leave are "
                    "interpolated like any other gap",
                    file=profile.file, station=profile.station, variable=column,
                )


def read_exchange_ctd(path: str | os.PathLike, cautions: Cautions) -> list[Profile]:
    """The CTD casts of an exchange file or a zip of them, in STNNBR order.

    Parameters
    ----------
    path : str or path-like
        A CTD exchange file, or a zip holding them (other members are ignored).
    cautions : Cautions
        Collects flag findings.

    Returns
    -------
    list of Profile
        One per cast.
    """
    profiles = []
    for label, text in exchange_texts(path):
        table = parse_exchange(text, label)
        if table.kind != "CTD":
            continue
        profiles.append(ctd_profile(table, cautions))
    if not profiles:
        raise InputFileError(f"file {os.fspath(path)}: holds no CTD exchange files")
    return profiles


def station_key(station: str) -> str:
    """STNNBR as a comparable key: ``"007"``, ``"7"`` and ``"7.0"`` are one station."""
    text = str(station).strip()
    try:
        value = float(text)
    except ValueError:
        return text
    return f"{value:g}"


def station_sort_key(station: str) -> tuple:
    """Order of STNNBR values: numbers by value, then text."""
    text = str(station).strip()
    try:
        return (0, float(text), text)
    except ValueError:
        return (1, 0.0, text)
