"""Fuzzing: malformed files and configurations end in results without NaN or one error.

Hypothesis draws NetCDF classic and NetCDF-4 files (cut at every tenth of the
file, variables of the wrong type, wrong or missing attributes), CSV files in
many dialects, and configurations built from the schema with wrong types and
values. The only acceptable outcomes are results whose every number is finite,
or one SectionkitError whose message is a single line. The short profile runs
in the suite; the long one (thousands of examples) is marked slow
(``pytest --slow tests/test_fuzz.py``).
"""

from __future__ import annotations

import copy
import tempfile
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from _sections import invented_section, write_csv, write_netcdf
from _synthetic import thermocline_section
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sectionkit.config import SCHEMA, parse_config
from sectionkit.errors import SectionkitError
from sectionkit.study import Study

SHORT = settings(max_examples=25, deadline=None, database=None,
                 suppress_health_check=[HealthCheck.too_slow])
LONG = settings(max_examples=2000, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow])

FORMATS = ["NETCDF3_CLASSIC", "NETCDF3_64BIT", "NETCDF4", "NETCDF4_CLASSIC"]
MUTATIONS = ["none", "temperature_as_int", "temperature_as_text", "units_garbage",
             "standard_name_number", "drop_salinity", "salinity_in_pa", "latitude_shifted",
             "fill_value_zero", "pressure_reversed", "station_all_nan", "temperature_kelvin"]


def _undefined_by_design(out) -> np.ndarray:
    """Outputs that are blank by definition: the density-space overturning of a section
    with a single class (no interface to turn over at), reported as a blank, not a number."""
    mask = np.zeros(out.initial.shape, bool)
    classes = [n for n in out.names if n.startswith("volume:")]
    if len(classes) <= 1 and "overturning_density" in out.names:
        mask[out.index("overturning_density")] = True
    return mask


def _outcome(run) -> str:
    """Run ``run()`` (returning Results); 'refused' or 'result', anything else fails."""
    try:
        results = run()
    except SectionkitError as exc:
        message = str(exc)
        assert message.strip() and "\n" not in message, message
        return "refused"
    for name, out in results.outputs.items():
        bad = ~np.isfinite(out.initial) & ~_undefined_by_design(out)
        assert not bad.any(), f"{name}: NaN in {[out.names[i] for i in np.flatnonzero(bad)][:5]}"
    if results.inverse is not None:
        assert np.isfinite(results.estimate).all()
        assert np.isfinite(results.covariance).all()
    return "result"


def _budget(path: str | Path, dp: float = 10.0, **section: object):
    def run():
        cfg = parse_config({"grid": {"dp": dp},
                            "sections": [{"name": "line", "file": str(path), **section}],
                            "reference": {"pressure": 400.0},
                            "layers": {"interfaces": [{"sigma": 27.0, "p_ref": 0.0}]}})
        return Study.from_config(cfg).solve()
    return run


# ------------------------------------------------------------------ NetCDF
_BASE: dict[str, xr.Dataset] = {}


def _base_dataset() -> xr.Dataset:
    if "ds" not in _BASE:
        with tempfile.TemporaryDirectory() as tmp:
            path = write_netcdf(Path(tmp) / "base.nc", invented_section(4, dp=10.0))
            with xr.open_dataset(path) as ds:
                _BASE["ds"] = ds.load().drop_encoding()
    return _BASE["ds"].copy(deep=True)


def _mutate(ds: xr.Dataset, mutation: str) -> xr.Dataset:
    if mutation == "temperature_as_int":
        ds["temp"] = ds["temp"].fillna(-99).astype("int16")
    elif mutation == "temperature_as_text":
        ds["temp"] = ds["temp"].astype(str)
    elif mutation == "units_garbage":
        ds["temp"].attrs["units"] = "furlongs"
    elif mutation == "standard_name_number":
        ds["psal"].attrs["standard_name"] = 5
    elif mutation == "drop_salinity":
        ds = ds.drop_vars("psal")
    elif mutation == "salinity_in_pa":
        ds["psal"].attrs["units"] = "Pa"
    elif mutation == "latitude_shifted":
        ds["lat"] = ds["lat"] + 200.0
    elif mutation == "fill_value_zero":
        ds["temp"].attrs["_FillValue"] = 0.0
        ds["temp"] = ds["temp"].fillna(0.0)
    elif mutation == "pressure_reversed":
        ds["pres"] = ds["pres"].copy(data=ds["pres"].values[::-1].copy())
    elif mutation == "station_all_nan":
        ds["temp"][1] = np.nan
    elif mutation == "temperature_kelvin":
        ds["temp"] = ds["temp"] + 273.15
    return ds


def _netcdf_case(fmt: str, mutation: str, tenth: int, folder: Path) -> Path:
    ds = _mutate(_base_dataset(), mutation)
    if fmt == "NETCDF4_CLASSIC" and mutation == "temperature_as_text":
        fmt = "NETCDF4"  # the classic model has no variable-length strings
    path = folder / "case.nc"
    try:
        ds.to_netcdf(path, format=fmt)
    except (ValueError, TypeError, RuntimeError):
        pytest.skip("xarray cannot write this combination")  # not our reader's concern
    if tenth < 10:
        data = path.read_bytes()
        path.write_bytes(data[: len(data) * tenth // 10])
    return path


def _check_netcdf(fmt: str, mutation: str, tenth: int) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = _netcdf_case(fmt, mutation, tenth, Path(tmp))
        outcome = _outcome(_budget(path))
        if tenth < 10:
            assert outcome == "refused", f"{fmt} cut at {tenth}/10 was read"


@SHORT
@given(st.sampled_from(FORMATS), st.sampled_from(MUTATIONS), st.integers(1, 10))
def test_netcdf_variants_give_finite_results_or_one_error(fmt, mutation, tenth):
    _check_netcdf(fmt, mutation, tenth)


@pytest.mark.parametrize("fmt", FORMATS)
@pytest.mark.parametrize("tenth", range(1, 10))
def test_netcdf_cut_at_every_tenth_is_refused(fmt, tenth):
    with tempfile.TemporaryDirectory() as tmp:
        path = _netcdf_case(fmt, "none", tenth, Path(tmp))
        with pytest.raises(SectionkitError, match="case.nc"):
            _budget(path)()


@pytest.mark.slow
@LONG
@given(st.sampled_from(FORMATS), st.sampled_from(MUTATIONS), st.integers(1, 10))
def test_netcdf_variants_long_profile(fmt, mutation, tenth):
    _check_netcdf(fmt, mutation, tenth)


# ------------------------------------------------------------------ CSV dialects
@st.composite
def csv_dialects(draw):
    return {
        "delimiter": draw(st.sampled_from([",", ";", "\t"])),
        "newline": draw(st.sampled_from(["\n", "\r\n"])),
        "bom": draw(st.booleans()),
        "comments": draw(st.integers(0, 3)),
        "blank_lines": draw(st.booleans()),
        "quote": draw(st.booleans()),
        "spaces": draw(st.booleans()),
        "decimal_comma": draw(st.integers(0, 5)) == 0,
        "order": draw(st.permutations(range(7))),
        "tenth": draw(st.sampled_from([10, 10, 10, 3, 5, 8])),
    }


def _csv_case(d: dict, folder: Path) -> Path:
    path = write_csv(folder / "raw.csv", invented_section(4, dp=10.0), delimiter=",")
    rows = [line.split(",") for line in path.read_text().splitlines()]
    rows = [[row[i] for i in d["order"]] for row in rows]
    out = []
    for k, row in enumerate(rows):
        if d["decimal_comma"] and k:
            row = [f.replace(".", ",") for f in row]
        if d["quote"]:
            row = [f'"{f}"' for f in row]
        sep = d["delimiter"] + (" " if d["spaces"] else "")
        out.append(sep.join(row))
        if d["blank_lines"] and k % 7 == 3:
            out.append("")
    head = [f"# comment {i}" for i in range(d["comments"])]
    text = d["newline"].join(head + out) + d["newline"]
    data = ("\ufeff" if d["bom"] else "").encode() + text.encode()
    data = data[: len(data) * d["tenth"] // 10]
    case = folder / "case.csv"
    case.write_bytes(data)
    return case


def _check_csv(dialect: dict) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        _outcome(_budget(_csv_case(dialect, Path(tmp))))


@SHORT
@given(csv_dialects())
def test_csv_dialects_give_finite_results_or_one_error(dialect):
    _check_csv(dialect)


@pytest.mark.slow
@LONG
@given(csv_dialects())
def test_csv_dialects_long_profile(dialect):
    _check_csv(dialect)


# ------------------------------------------------------------------ configuration trees
SECTIONS = {}


def _sections() -> dict[str, xr.Dataset]:
    if not SECTIONS:
        SECTIONS["south"] = thermocline_section(n=5, dp=50.0, lat0=25.0, name="south")
        SECTIONS["north"] = thermocline_section(n=4, dp=50.0, lat0=35.0, name="north")
    return SECTIONS


WORDS = st.sampled_from(["south", "north", "box", "upper", "deep", "mass", "salt", "heat",
                         "bottom", "constant", "zero", "shear", "svd", "gauss-markov",
                         "bounded", "south:1", "north:0", "south:9", "preformed", "", "x"])
NUMBERS = st.one_of(st.sampled_from([0.0, -1.0, 1.0, 2.0, 27.0, 50.0, 1000.0, 3000.0, 1e9]),
                    st.floats(-1e3, 1e4, allow_nan=False), st.integers(-3, 5))
SCALARS = st.one_of(NUMBERS, WORDS, st.booleans())
WRONG = st.one_of(SCALARS, st.lists(SCALARS, max_size=3),
                  st.dictionaries(WORDS, SCALARS, max_size=2))


def _value(kind: str):
    """A strategy for a value of one schema type."""
    kind = kind.split(" or ")[0]
    if kind.startswith("list of "):
        inner = kind[len("list of "):].removesuffix("s")
        if inner == "table":
            return st.just([])
        return st.lists(_value(inner), min_size=1, max_size=3)
    if kind.startswith("table of "):
        inner = kind[len("table of "):].removesuffix("s")
        value = st.lists(NUMBERS, min_size=2, max_size=2) if inner == "list" else _value(inner)
        return st.dictionaries(WORDS, value, max_size=2)
    return {"boolean": st.booleans(), "number": NUMBERS, "integer": st.integers(-1, 4),
            "string": WORDS, "table": st.just({}), "list": st.just([])}[kind]


@st.composite
def configurations(draw):
    """A valid starting tree, then keys of the schema set to drawn values, right or wrong."""
    data = {
        "grid": {"dp": 50.0},
        "sections": [{"name": "south", "file": "south.nc"},
                     {"name": "north", "file": "north.nc", "into_box": False}],
        "classes": {"interfaces": [{"sigma": 27.0, "p_ref": 0.0}], "names": ["upper", "deep"]},
        "inverse": {},
    }
    box = {"name": "b", "enters": ["south"], "leaves": ["north"]}
    # every table of the schema written as a table (not nested ones, not [[arrays]])
    names = sorted(t for t in SCHEMA if "." not in t)
    for _ in range(draw(st.integers(1, 4))):
        table = draw(st.sampled_from(names))
        key = draw(st.sampled_from(sorted(SCHEMA[table])))
        if key == "sections":
            continue
        target = {"": data, "sections": data["sections"][0], "boxes": box}.get(table)
        if target is None:
            target = data.setdefault(table, {})
            if not isinstance(target, dict):  # the table itself was drawn of a wrong type
                continue
        wrong = draw(st.booleans())
        target[key] = draw(WRONG if wrong else _value(SCHEMA[table][key]))
    if draw(st.booleans()):
        data["boxes"] = [box]
    return copy.deepcopy(data)


def _check_configuration(data: dict) -> None:
    def run():
        cfg = parse_config(data)
        return Study.from_config(cfg, sections=_sections()).solve()

    _outcome(run)


@SHORT
@given(configurations())
def test_random_configurations_give_finite_results_or_one_error(data):
    _check_configuration(data)


@pytest.mark.slow
@LONG
@given(configurations())
def test_random_configurations_long_profile(data):
    _check_configuration(data)
