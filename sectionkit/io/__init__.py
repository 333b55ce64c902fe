"""Reading, checking and gridding hydrographic section files.

Public entry points:

- :func:`load_section` — the canonical gridded section Dataset and its cautions;
- :func:`read_section` — the per-station profiles as measured, before gridding;
- :func:`describe_section` — a readable report for the command line;
- :func:`check_main` — the ``sectionkit check FILE...`` command.
"""

from sectionkit.io.check import check_main, describe_section
from sectionkit.io.raw import Profile, RawSection
from sectionkit.io.section import load_section, read_section

__all__ = [
    "Profile",
    "RawSection",
    "check_main",
    "describe_section",
    "load_section",
    "read_section",
]
