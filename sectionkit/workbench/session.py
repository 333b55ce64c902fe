"""Files of a workbench session: autosave on a background thread, backups, portable copies.

No widgets and no physics. :class:`~sectionkit.workbench.model.WorkbenchState`
hands each new configuration to an :class:`AutosaveWriter`, which writes it
atomically beside the session; :func:`portable` rewrites relative file names
for a configuration saved into another folder.
"""

from __future__ import annotations

import atexit
import copy
import os
import threading
import time
import weakref
from pathlib import Path

from sectionkit.atomic import write_bytes_atomic
from sectionkit.config import Config

AUTOSAVE_SUFFIX = ".autosave.toml"
AUTOSAVE_COALESCE = 0.05  # s a change waits for newer ones before the autosave is written


def keep_backup(path: Path) -> Path:
    """Copy a file to the first free numbered backup beside it (``x.autosave.1.toml``, ...).

    Parameters
    ----------
    path : Path
        The file (an autosave that could not be resumed).

    Returns
    -------
    Path
        The backup written.
    """
    stem = path.name.removesuffix(".toml")
    n = 1
    while (backup := path.with_name(f"{stem}.{n}.toml")).exists():
        n += 1
    write_bytes_atomic(backup, path.read_bytes())
    return backup


def portable(cfg: Config, folder: Path) -> Config:
    """A copy whose relative file names are taken from ``folder``."""
    folder = Path(folder).resolve()
    if folder == Path(cfg.base_dir).resolve():
        return cfg

    def move(name: str) -> str:
        path = Path(name)
        if path.is_absolute():
            return name
        target = (Path(cfg.base_dir) / path).resolve()
        try:
            return os.path.relpath(target, folder)
        except ValueError:  # another drive
            return str(target)

    out = copy.deepcopy(cfg)
    for spec in out.sections:
        spec.file = move(spec.file) if isinstance(spec.file, str) else [move(f) for f in spec.file]
        if spec.bathymetry:
            spec.bathymetry = move(spec.bathymetry)
    out.base_dir = folder
    return out


_LIVE_WRITERS: weakref.WeakSet[AutosaveWriter] = weakref.WeakSet()


@atexit.register
def _flush_autosaves() -> None:
    """Let pending autosaves reach the disk when the interpreter exits."""
    for writer in list(_LIVE_WRITERS):
        writer.flush(5.0)


class AutosaveWriter:
    """Writes the latest configuration to the autosave file on a background thread.

    Changes hand over the (immutable) configuration and return at once;
    the thread serialises it and replaces the file atomically. Configurations
    submitted within ``AUTOSAVE_COALESCE`` seconds of each other, or while a
    write is under way, are coalesced: only the newest one is written. The
    file is never half-written, and a change is on disk well within a tenth
    of a second.
    """

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self.error: str | None = None
        self._pending: Config | None = None
        self._busy = False
        self._cond = threading.Condition()
        self._thread: threading.Thread | None = None
        _LIVE_WRITERS.add(self)

    def submit(self, config: Config) -> None:
        """Queue ``config`` for writing (replacing any queued one)."""
        with self._cond:
            self._pending = config
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._run, name="sectionkit-autosave",
                                                daemon=True)
                self._thread.start()
            self._cond.notify_all()

    def flush(self, timeout: float = 10.0) -> bool:
        """Wait until nothing is queued or being written; True when done in time."""
        with self._cond:
            return self._cond.wait_for(lambda: self._pending is None and not self._busy,
                                       timeout=timeout)

    def _run(self) -> None:
        while True:
            with self._cond:
                if not self._cond.wait_for(lambda: self._pending is not None, timeout=30.0):
                    self._thread = None
                    return
            time.sleep(AUTOSAVE_COALESCE)  # let a dragged slider settle: one write, not fifty
            with self._cond:
                config, self._pending = self._pending, None
                self._busy = True
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
                portable(config, self.path.parent).save(self.path)
                error = None
            except Exception as exc:  # reported through the state, never raised
                error = f"autosave to {self.path} failed: {exc}"
            with self._cond:
                self.error = error
                self._busy = False
                self._cond.notify_all()
