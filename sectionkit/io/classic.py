"""The length a NetCDF classic file must have, from its own header.

A NetCDF classic file (format versions 1, 2 and 5: classic, 64-bit offset,
64-bit data) states in its header where every variable's data begins and how
large it is, and how many records it holds. A file cut short (an interrupted
copy or download) is otherwise read with zeros past the cut, and 0 degC is a
legal temperature, so the length is checked against the header before the
file is read. Layout from the NetCDF classic format specification
(Unidata, "NetCDF Classic and 64-bit Offset File Formats"): header = magic
numrecs dim_list gatt_list var_list; var = name nelems [dimid...] vatt_list
nc_type vsize begin.
"""

from __future__ import annotations

import os

from sectionkit.errors import InputFileError

_TYPE_SIZE = {1: 1, 2: 1, 3: 2, 4: 4, 5: 4, 6: 8, 7: 1, 8: 2, 9: 4, 10: 8, 11: 8}
_NC_DIMENSION, _NC_VARIABLE, _NC_ATTRIBUTE = 10, 11, 12
_STREAMING = 0xFFFFFFFF


class _Header:
    """A cursor over the header bytes; running off the end means a truncated header."""

    def __init__(self, data: bytes, version: int) -> None:
        self.data, self.pos = data, 4
        self.wide = version == 5  # 64-bit data format: 8-byte counts
        self.offset = 4 if version == 1 else 8

    def _take(self, n: int) -> bytes:
        if self.pos + n > len(self.data):
            raise EOFError
        chunk = self.data[self.pos:self.pos + n]
        self.pos += n
        return chunk

    def int(self, size: int) -> int:
        return int.from_bytes(self._take(size), "big")

    def count(self) -> int:
        return self.int(8 if self.wide else 4)

    def name(self) -> str:
        n = self.count()
        text = self._take(n)
        self._take(-n % 4)
        return text.decode("utf-8", "replace")

    def skip_attributes(self) -> None:
        tag, n = self.int(4), self.count()
        if tag not in (0, _NC_ATTRIBUTE):
            raise ValueError(f"attribute list tag {tag}")
        for _ in range(n):
            self.name()
            nc_type = self.int(4)
            size = self.count() * _TYPE_SIZE.get(nc_type, 0)
            if nc_type not in _TYPE_SIZE:
                raise ValueError(f"attribute type {nc_type}")
            self._take(size + (-size % 4))


def classic_expected_length(path: str | os.PathLike, header: bytes) -> int | None:
    """The least length, in bytes, a NetCDF classic file with this header must have.

    Parameters
    ----------
    path : str or path-like
        The file, for messages.
    header : bytes
        The file's first bytes (enough to hold the whole header, or all of it).

    Returns
    -------
    int or None
        Bytes the data of every variable reaches; None when the file is not a
        NetCDF classic file (no ``CDF`` magic).

    Raises
    ------
    InputFileError
        The header itself is cut short or malformed.
    """
    if len(header) < 4 or header[:3] != b"CDF" or header[3] not in (1, 2, 5):
        return None
    h = _Header(header, header[3])
    try:
        numrecs = h.count()
        tag, n_dims = h.int(4), h.count()
        if tag not in (0, _NC_DIMENSION):
            raise ValueError(f"dimension list tag {tag}")
        dims = []
        for _ in range(n_dims):
            h.name()
            dims.append(h.count())
        h.skip_attributes()
        tag, n_vars = h.int(4), h.count()
        if tag not in (0, _NC_VARIABLE):
            raise ValueError(f"variable list tag {tag}")
        variables = []
        for _ in range(n_vars):
            h.name()
            ids = [h.count() for _ in range(h.count())]
            h.skip_attributes()
            nc_type = h.int(4)
            vsize = h.count()
            begin = h.int(h.offset)
            if nc_type not in _TYPE_SIZE or any(i >= len(dims) for i in ids):
                raise ValueError(f"variable type {nc_type} or dimension ids {ids}")
            is_record = bool(ids) and dims[ids[0]] == 0
            slab = _TYPE_SIZE[nc_type]
            for i in ids[1:] if is_record else ids:
                slab *= dims[i]
            variables.append((is_record, begin, slab, vsize))
    except EOFError:
        raise InputFileError(
            f"file {os.fspath(path)}: the NetCDF header is cut short ({len(header)} bytes); "
            "the file is incomplete — copy or download it again"
        ) from None
    except ValueError as exc:
        raise InputFileError(
            f"file {os.fspath(path)}: the NetCDF classic header is malformed ({exc}); "
            "the file is damaged — copy or download it again"
        ) from None
    record_vars = [v for v in variables if v[0]]
    # one record variable is stored without padding between records (specification)
    recsize = (record_vars[0][2] if len(record_vars) == 1
               else sum(vsize for _, _, _, vsize in record_vars))
    end = h.pos
    for is_record, begin, slab, _ in variables:
        if not is_record:
            end = max(end, begin + slab)
        elif numrecs not in (0, _STREAMING):
            end = max(end, begin + (numrecs - 1) * recsize + slab)
    return end


def check_classic_length(path: str | os.PathLike) -> None:
    """Refuse a NetCDF classic file shorter than its header says it is.

    Parameters
    ----------
    path : str or path-like
        Any file; only NetCDF classic files (``CDF`` magic) are checked.

    Raises
    ------
    InputFileError
        The file is shorter than the data its header describes.
    """
    try:
        size = os.path.getsize(path)
        with open(path, "rb") as fh:
            header = fh.read(min(size, 1 << 20))
    except OSError:
        return  # missing or unreadable: the NetCDF reader says so
    if header[:3] != b"CDF":
        return
    if size > len(header):  # a header larger than 1 MiB: read it whole
        with open(path, "rb") as fh:
            header = fh.read()
    expected = classic_expected_length(path, header)
    if expected is not None and size < expected:
        raise InputFileError(
            f"file {os.fspath(path)}: is {size} bytes but its NetCDF header describes "
            f"{expected} bytes of data; the file is cut short (an interrupted copy or "
            "download?) — copy it again; sectionkit does not read zeros in place of data"
        )
