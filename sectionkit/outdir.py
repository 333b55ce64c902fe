"""The output folder of a run: checked before computing, built beside, swapped in whole.

A run's result set is written into a temporary folder next to the output
folder and replaces it as a whole only when every file is written, so the
folder always holds exactly one complete run: a failure at any point leaves
the previous results untouched, and files of an earlier run with other
options do not linger. Files sectionkit did not write are never removed: a
non-empty folder without a sectionkit ``provenance.json``, or with files its
provenance does not list, is refused. Temporary folders left by killed runs
are removed (or, for a run killed in the middle of the swap, its previous
results put back) by the next run.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import tempfile
from pathlib import Path

from sectionkit.errors import OutputError

PARTIAL = ".sectionkit-partial-"  # a result set being written
PREVIOUS = ".sectionkit-previous-"  # the previous result set during the swap
PROVENANCE = "provenance.json"
#: What a run writes, for folders whose provenance predates the list of outputs.
KNOWN_OUTPUTS = re.compile(r"^([^/]+\.csv|tables\.(tex|md)|results\.nc|provenance\.json|"
                           r"figures/.+)$")


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError):
        return True
    return True


def _pid_of(path: Path, marker: str) -> int | None:
    match = re.match(r"\d+", path.name.split(marker, 1)[1])
    return int(match.group()) if match else None


def remove_leftovers(out: Path) -> list[Path]:
    """Remove temporary folders of killed runs beside ``out``; put back interrupted swaps.

    Parameters
    ----------
    out : Path
        The output folder (absolute).

    Returns
    -------
    list of Path
        The temporary folders removed or restored.
    """
    handled = []
    if not out.parent.is_dir():
        return handled
    for marker in (PREVIOUS, PARTIAL):
        for path in sorted(out.parent.glob(f".{out.name}{marker}*")):
            pid = _pid_of(path, marker)
            if pid is not None and _pid_alive(pid):
                continue  # a run still going (or this one)
            if marker == PREVIOUS and not out.exists():
                os.rename(path, out)  # killed between the two renames of the swap
            else:
                shutil.rmtree(path, ignore_errors=True)
            handled.append(path)
    return handled


def _recorded_outputs(out: Path) -> set[str] | None:
    """The files a sectionkit run recorded in ``out``'s provenance (None: not sectionkit's)."""
    try:
        record = json.loads((out / PROVENANCE).read_text())
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or "configuration" not in record:
        return None
    outputs = record.get("outputs")
    return set(outputs) if isinstance(outputs, list) else set()


def check_output_folder(out_dir: str | os.PathLike) -> Path:
    """Check that a run may write its results to ``out_dir``, before any computation.

    Parameters
    ----------
    out_dir : str or path-like
        The output folder (created by the run when missing).

    Returns
    -------
    Path
        The folder, absolute.

    Raises
    ------
    OutputError
        ``out_dir`` is a file, cannot be written, or holds files sectionkit did
        not write.
    """
    out = Path(os.path.abspath(os.fspath(out_dir)))
    if out.is_symlink():
        out = out.resolve()  # replace the folder it points to, keep the link
    cwd = Path.cwd().resolve()
    if out.exists() and (cwd == out.resolve() or out.resolve() in cwd.parents):
        raise OutputError(f"--out {out} is the current folder (or holds it); the result set "
                          "replaces the output folder as a whole, so give a subfolder, e.g. "
                          "--out results")
    if out.exists() and not out.is_dir():
        raise OutputError(f"--out {out} is a file, not a folder; give the name of a folder "
                          "(it is created when missing)")
    ancestor = out.parent
    while not ancestor.exists():
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise OutputError(f"--out {out}: {ancestor} is a file, not a folder; give a folder path")
    if out.is_dir() and any(out.iterdir()):
        recorded = _recorded_outputs(out)
        if recorded is None:
            raise OutputError(
                f"--out {out} is not empty and holds no sectionkit {PROVENANCE}, so its files "
                "were not written by sectionkit; choose a new or empty folder, or move those "
                "files away (sectionkit replaces the whole folder with each run)"
            )
        foreign = sorted(
            rel for rel in (p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file())
            if rel not in recorded and not (not recorded and KNOWN_OUTPUTS.match(rel))
        )
        if foreign:
            shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
            raise OutputError(
                f"--out {out} holds {len(foreign)} file(s) an earlier sectionkit run did not "
                f"write ({shown}); sectionkit replaces the whole folder with each run, so move "
                "them away or choose another folder"
            )
    try:
        ancestor_probe = Path(tempfile.mkdtemp(prefix=f".{out.name}{PARTIAL}probe-",
                                               dir=ancestor))
        ancestor_probe.rmdir()
    except OSError as exc:
        raise OutputError(f"--out {out}: cannot write in {ancestor} ({exc.strerror}); choose a "
                          "folder you can write to") from None
    if out.is_dir() and not os.access(out, os.W_OK | os.X_OK):
        raise OutputError(f"--out {out}: the folder is not writable; choose a folder you can "
                          "write to")
    remove_leftovers(out)
    return out


def new_partial_folder(out: Path) -> Path:
    """A fresh temporary folder beside ``out`` for a result set being written."""
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}{PARTIAL}{os.getpid()}-", dir=out.parent))
    umask = os.umask(0)
    os.umask(umask)
    tmp.chmod(0o777 & ~umask)  # a result folder like any other, not mkdtemp's 0700
    return tmp


def swap_in(tmp: Path, out: Path) -> None:
    """Replace ``out`` by the complete result set in ``tmp`` (same parent folder).

    The previous folder is renamed aside, the new one renamed into place,
    and the previous one removed; a run killed between the renames is
    repaired by :func:`remove_leftovers`.
    """
    if not out.exists():
        os.rename(tmp, out)
        return
    check_output_folder(out)  # nothing foreign appeared while computing
    previous = Path(tempfile.mkdtemp(prefix=f".{out.name}{PREVIOUS}{os.getpid()}-",
                                     dir=out.parent))
    previous.rmdir()
    os.rename(out, previous)
    try:
        os.rename(tmp, out)
    except OSError:
        os.rename(previous, out)
        raise
    shutil.rmtree(previous, ignore_errors=True)
