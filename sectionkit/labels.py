"""Names of station pairs: ``"<section>:<k>"``, written and read in one place.

A pair is named by its section and its 0-based index along the section
(pair ``k`` lies between stations ``k`` and ``k + 1``), e.g. ``"south:12"``.
Configuration overrides and bounds, the inverse's unknowns, tables and the
workbench all use this form; section names never contain ``:`` (the
configuration refuses them).
"""

from __future__ import annotations

from collections.abc import Mapping
from functools import lru_cache

from sectionkit.errors import ConfigError

__all__ = ["pair_label", "pair_labels", "parse_pair_label", "split_pair_label"]


def pair_label(section: str, k: int) -> str:
    """The name of pair ``k`` of a section.

    Parameters
    ----------
    section : str
        Section name.
    k : int
        0-based pair index along the section, dimensionless.

    Returns
    -------
    str
        ``"<section>:<k>"``.
    """
    return f"{section}:{int(k)}"


def pair_labels(section: str, n_pair: int) -> list[str]:
    """Names of every pair of a section with ``n_pair`` pairs, in station order."""
    return list(_pair_labels(str(section), int(n_pair)))


@lru_cache(maxsize=256)
def _pair_labels(section: str, n_pair: int) -> tuple[str, ...]:
    """The labels of :func:`pair_labels`, formed once per section name and size."""
    return tuple(pair_label(section, k) for k in range(n_pair))


def split_pair_label(label: str) -> tuple[str, int | None]:
    """Section and pair index of a label, without checking that they exist.

    Parameters
    ----------
    label : str
        ``"<section>:<k>"``.

    Returns
    -------
    section : str
        Everything before the first ``:`` (the whole label when it has none).
    k : int or None
        The pair index; None when the part after ``:`` is not a whole number >= 0.
    """
    section, _, k = str(label).partition(":")
    return section, (int(k) if k.isdigit() else None)


def parse_pair_label(label: str, pairs: Mapping[str, int], where: str = "pair") -> tuple[str, int]:
    """Section and pair index of a label that must name an existing pair.

    Parameters
    ----------
    label : str
        ``"<section>:<k>"``.
    pairs : mapping of str -> int
        Number of pairs of every known section.
    where : str
        What the label belongs to, for the message (``"[inverse] bounds"``).

    Returns
    -------
    section : str
    k : int

    Raises
    ------
    ConfigError
        The section is unknown, the index is not a whole number, or the
        section has no such pair; the message names the valid range.
    """
    section, k = split_pair_label(label)
    if section not in pairs:
        known = ", ".join(pairs) or "none"
        raise ConfigError(f"{where}: {label!r} names no known section (sections: {known}); "
                          "pairs are named '<section>:<k>'")
    n = int(pairs[section])
    if k is None or k >= n:
        raise ConfigError(f"{where}: pair {label!r} does not exist; section {section} has "
                          f"{n} pairs, {section}:0 to {section}:{n - 1}")
    return section, k


#: The class name of a box's total (all classes) in its constraint rows.
TOTAL_CLASS = "total"


def constraint_label(kind: str, klass: str = TOTAL_CLASS) -> str:
    """Name of a box constraint row: ``"<kind>:<class>"`` (``mass:deep``, ``mass:total``).

    Parameters
    ----------
    kind : str
        ``mass``, ``salt``, ``heat``, a tracer name or ``net_mass``.
    klass : str
        Class name, or :data:`TOTAL_CLASS` for the sum over classes.
    """
    return f"{kind}:{klass}"


def split_constraint_label(label: str) -> tuple[str, str]:
    """Kind and class of a constraint row name (class ``""`` when it has none, as ``net_mass``)."""
    kind, _, klass = str(label).partition(":")
    return kind, klass
