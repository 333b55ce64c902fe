"""Errors and cautions: what went wrong, and what a scientist should know.

Every module of sectionkit raises only the exceptions defined here, so a
caller (the command line, the workbench) can show them without a traceback.
Messages say what was found, where (file, station, variable, value) and what
to do about it.

Cautions are the non-fatal findings (density inversions, wide station gaps,
reference levels that fell back to the bottom, results that are temperature
rather than heat transports). They are collected in a :class:`Cautions`
report and shown to the user, never printed and lost.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field


class SectionkitError(Exception):
    """Base of every error sectionkit raises on purpose."""


class InputFileError(SectionkitError):
    """A file could not be read, or is not the kind of file expected."""


class SectionDataError(SectionkitError):
    """A section file was read but its contents cannot be used as they are."""


class EquatorError(SectionDataError):
    """Geostrophy was asked of station pairs too close to the equator."""


class ConfigError(SectionkitError):
    """The configuration is malformed, inconsistent, or names unknown things."""


class OutputError(SectionkitError):
    """The output folder cannot be used as asked (a file, not writable, holds other files)."""


class ComputationError(SectionkitError):
    """A computation cannot go on with the data and choices given."""


def check_trailing_shape(
    kernel: str, name: str, array: object, trailing: tuple[int, ...], dims: str
) -> None:
    """Refuse an array whose last axes are not ``trailing`` (leading axes are free).

    The kernels of sectionkit take the vertical axis last and broadcast any
    leading dimensions; this is their one shape check, stating what was
    found and what was expected (as gsw does).

    Parameters
    ----------
    kernel : str
        Name of the refusing function, for the message.
    name : str
        Name of the argument checked.
    array : array_like
        The argument (anything with a ``shape``; scalars have shape ``()``).
    trailing : tuple of int
        Required sizes of the last axes.
    dims : str
        Names of those axes, e.g. ``"pair, level"``.

    Raises
    ------
    ComputationError
        When the last axes differ from ``trailing``.
    """
    shape = tuple(getattr(array, "shape", ()))
    n = len(trailing)
    if shape[len(shape) - n:] != tuple(trailing) or len(shape) < n:
        want = ", ".join(str(int(t)) for t in trailing)
        raise ComputationError(
            f"{kernel}: {name} has shape {shape}; expected (..., {dims}) = (..., {want}) "
            f"— give arrays whose last axes match (vertical axis last, leading axes broadcast)"
        )


def where(
    file: str | None = None,
    station: str | int | None = None,
    variable: str | None = None,
) -> str:
    """Format the location part of a message: ``station 7 (file north.nc), variable CT``."""
    parts = []
    if station is not None:
        parts.append(f"station {station}")
    if file is not None:
        parts.append(f"(file {file})" if parts else f"file {file}")
    text = " ".join(parts)
    if variable is not None:
        text = f"{text}, variable {variable}" if text else f"variable {variable}"
    return text


@dataclass(frozen=True)
class Caution:
    """One non-fatal finding.

    Parameters
    ----------
    kind : str
        Short machine-readable category, e.g. ``"density-inversion"``.
    message : str
        Full sentence for the scientist: what, where, and why it matters.
    file, station, variable : str, optional
        Where it was found, when that applies.
    """

    kind: str
    message: str
    file: str | None = None
    station: str | None = None
    variable: str | None = None

    def __str__(self) -> str:
        return f"[{self.kind}] {self.message}"


@dataclass
class Cautions:
    """An ordered, de-duplicated collection of :class:`Caution` findings."""

    items: list[Caution] = field(default_factory=list)

    def add(
        self,
        kind: str,
        message: str,
        *,
        file: str | None = None,
        station: str | int | None = None,
        variable: str | None = None,
    ) -> None:
        """Record a finding (an identical one is kept once)."""
        caution = Caution(
            kind, message, file, None if station is None else str(station), variable
        )
        if caution not in self.items:
            self.items.append(caution)

    def extend(self, other: Iterable[Caution]) -> None:
        """Append the findings of another collection."""
        for caution in other:
            if caution not in self.items:
                self.items.append(caution)

    def of_kind(self, kind: str) -> list[Caution]:
        """The findings of one category."""
        return [c for c in self.items if c.kind == kind]

    def __iter__(self) -> Iterator[Caution]:
        return iter(self.items)

    def __len__(self) -> int:
        return len(self.items)

    def __bool__(self) -> bool:
        return bool(self.items)

    def report(self) -> str:
        """All findings as text, one per line (empty string when none)."""
        return "\n".join(str(c) for c in self.items)
