"""Files written whole or not at all: a temporary file beside the target, then a rename.

A reader never sees a half-written file, and a failure (full disk, a killed
process in the middle of writing, an error while forming the content) leaves
the earlier file as it was and no temporary file behind.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from pathlib import Path


@contextlib.contextmanager
def replaced_atomically(path: str | os.PathLike) -> Iterator[Path]:
    """A temporary path to write; it replaces ``path`` when the block ends without error.

    Parameters
    ----------
    path : str or PathLike
        The file to (re)write.

    Yields
    ------
    Path
        ``.<name>.<pid>.tmp`` beside ``path``; removed if the block raises.
    """
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


def write_text_atomic(path: str | os.PathLike, text: str, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` whole or not at all.

    Parameters
    ----------
    path : str or PathLike
        Destination file.
    text : str
        Its content.
    encoding : str
        Text encoding (UTF-8 unless a format says otherwise).

    Returns
    -------
    Path
        ``path``.
    """
    with replaced_atomically(path) as tmp:
        tmp.write_text(text, encoding=encoding)
    return Path(path)


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``path`` whole or not at all (see :func:`write_text_atomic`)."""
    with replaced_atomically(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)
