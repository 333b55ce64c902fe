"""WHP-Exchange CTD and bottle files of an invented cruise."""

from __future__ import annotations

import io
import zipfile

import gsw
import numpy as np
import pytest

from sectionkit.errors import Cautions, InputFileError, SectionDataError
from sectionkit.io import check_main, load_section
from sectionkit.io.bottle import read_bottle, tracer_name
from sectionkit.io.exchange import exchange_texts, parse_exchange
from sectionkit.io.exchange_write import (
    bottle_text,
    ctd_text,
    write_bottle,
    write_ctd_folder,
    write_ctd_zip,
)

try:
    from tests._exchange import bottle_rows, casts, rounded_section
    from tests._sections import write_netcdf
except ImportError:  # tests/ itself on sys.path
    from _exchange import bottle_rows, casts, rounded_section
    from _sections import write_netcdf

# A CTD file typed by hand from the layout of the WHP-Exchange description
# (first line, comments, NUMBER_HEADERS counting itself, KEY = value, names, units,
# data, END_DATA); invented values.
HAND_WRITTEN = """CTD,20260101INVENT
# invented cast
NUMBER_HEADERS = 10
EXPOCODE = INV2026
SECT_ID = X1
STNNBR = 17
CASTNO = 2
DATE = 20260101
TIME = 1200
LATITUDE = -30.5000
LONGITUDE = 10.2500
DEPTH = 4100
CTDPRS,CTDPRS_FLAG_W,CTDTMP,CTDTMP_FLAG_W,CTDSAL,CTDSAL_FLAG_W,CTDOXY,CTDOXY_FLAG_W
DBAR,,ITS-90,,PSS-78,,UMOL/KG,
2.0,2,20.1234,2,35.1000,2,230.0,2
4.0,2,-999.0000,9,35.1001,2,231.0,2
6.0,2,20.1000,3,35.1002,4,-999,9
END_DATA
"""


@pytest.fixture(scope="module")
def sec():
    return rounded_section()


def test_hand_written_ctd_file_gives_headers_units_values_and_flags():
    table = parse_exchange(HAND_WRITTEN, "hand.csv")
    assert table.kind == "CTD"
    assert table.headers["STNNBR"] == "17" and table.headers["LATITUDE"] == "-30.5000"
    assert table.units["CTDTMP"] == "ITS-90" and table.units["CTDOXY"] == "UMOL/KG"
    np.testing.assert_array_equal(table.numbers["CTDPRS"], [2.0, 4.0, 6.0])
    # -999 is the exchange fill value
    assert np.isnan(table.numbers["CTDTMP"][1]) and table.numbers["CTDTMP"][2] == 20.1
    np.testing.assert_array_equal(table.numbers["CTDSAL_FLAG_W"], [2, 2, 4])
    np.testing.assert_array_equal(table.lines, [15, 16, 17])


def test_trailing_commas_on_every_line_are_accepted():
    text = "\n".join(line + "," if line and line[0] in "CD2460" and "," in line else line
                     for line in HAND_WRITTEN.splitlines())
    table = parse_exchange(text, "commas.csv")
    assert table.columns[-1] == "CTDOXY_FLAG_W"
    np.testing.assert_array_equal(table.numbers["CTDPRS"], [2.0, 4.0, 6.0])


def test_zip_of_ctd_files_is_read_in_stnnbr_order_whatever_the_member_order(sec, tmp_path):
    z = write_ctd_zip(tmp_path / "cruise.zip", casts(sec)[::-1])
    ds, _ = load_section(z, name="line")
    assert list(ds["station"].values) == ["1", "2", "3", "4", "5"]
    np.testing.assert_allclose(ds["lat"].values, sec["lat"], rtol=0, atol=0)


def test_exchange_zip_and_cf_netcdf_of_one_section_give_the_same_grid(sec, tmp_path):
    ex, _ = load_section(write_ctd_zip(tmp_path / "cruise.zip", casts(sec)))
    nc, _ = load_section(write_netcdf(tmp_path / "line.nc", sec))
    for name in ("SA", "CT", "bottom_pressure", "bottom_depth", "lat", "lon"):
        np.testing.assert_allclose(ex[name].values, nc[name].values, rtol=0, atol=1e-12)


def test_folder_is_recognised_by_content_not_by_file_name(sec, tmp_path):
    folder = write_ctd_folder(tmp_path / "casts", casts(sec))
    for f in folder.iterdir():  # names that say nothing about the format
        f.rename(f.with_suffix(".dat"))
    (folder / "notes.txt").write_text("cruise notes, not data\n")
    ds, _ = load_section(folder)
    assert ds.sizes["station"] == 5


def test_of_several_casts_at_a_station_the_deepest_is_used_with_a_caution(sec, tmp_path):
    cs = casts(sec)
    shallow = dict(cs[1], cast="2", pressure=cs[1]["pressure"][:50],
                   temperature=cs[1]["temperature"][:50], salinity=cs[1]["salinity"][:50])
    ds, cautions = load_section(write_ctd_zip(tmp_path / "cruise.zip", cs + [shallow]))
    assert ds.sizes["station"] == 5
    assert np.isfinite(ds["CT"].sel(station="2").values).sum() > 50
    assert "cast 2" in cautions.of_kind("extra-casts")[0].message


def test_station_list_selects_and_orders_stations(sec, tmp_path):
    z = write_ctd_zip(tmp_path / "cruise.zip", casts(sec))
    ds, _ = load_section(z, order=["4", "2", "1"])
    assert list(ds["station"].values) == ["4", "2", "1"]


def _spiked(sec, flag):
    """Station 3 with a 6 degC spike at sample 100 flagged ``flag`` and a fill value."""
    cs = casts(sec)
    c = cs[2]
    t = c["temperature"].copy()
    t[100] += 6.0
    t[150] = np.nan  # written as -999 with flag 9
    flags = np.full(t.size, 2)
    flags[100] = flag
    flags[150] = 9
    c.update(temperature=t, flags={"CTDTMP": flags})
    return cs, c


def test_flagged_spike_and_fill_value_never_reach_the_grid(sec, tmp_path):
    cs, c = _spiked(sec, 4)
    ds, cautions = load_section(write_ctd_zip(tmp_path / "cruise.zip", cs))
    p = c["pressure"]
    # the spike and the fill are dropped; the 2 dbar gaps are interpolated linearly
    # between the neighbours' CT (gsw alone)
    for k in (100, 150):
        sa = gsw.SA_from_SP(c["salinity"][[k - 1, k + 1]], p[[k - 1, k + 1]], c["lon"], c["lat"])
        ct = gsw.CT_from_t(sa, sec["temperature"][2][[k - 1, k + 1]], p[[k - 1, k + 1]])
        got = ds["CT"].sel(station="3", pressure=p[k]).item()
        assert got == pytest.approx(ct.mean(), abs=1e-9)
    assert np.nanmax(ds["CT"].values) < 25.0
    assert cautions.of_kind("flagged-dropped")


def test_questionable_flag_is_used_with_a_caution(sec, tmp_path):
    cs, c = _spiked(sec, 3)
    ds, cautions = load_section(write_ctd_zip(tmp_path / "cruise.zip", cs))
    k = 100
    sa = gsw.SA_from_SP(c["salinity"][k], c["pressure"][k], c["lon"], c["lat"])
    ct = gsw.CT_from_t(sa, c["temperature"][k], c["pressure"][k])
    assert ds["CT"].sel(station="3", pressure=c["pressure"][k]).item() == pytest.approx(ct)
    assert any("flagged 3" in x.message for x in cautions.of_kind("questionable-flag"))


def test_check_reports_flag_counts_per_flag_and_per_station(sec, tmp_path):
    cs, _ = _spiked(sec, 4)
    out, err = io.StringIO(), io.StringIO()
    assert check_main([str(write_ctd_zip(tmp_path / "cruise.zip", cs))], out, err) == 0
    text = out.getvalue()
    n = sum(c["pressure"].size for c in cs)
    assert f"CTDTMP: flag 2: {n - 2}, flag 4: 1, flag 9: 1" in text
    assert "station 3: CTDTMP flag 2:" in text
    assert "4 of 5 stations have every sample flagged 2" in text


def test_check_reports_bottle_flags_and_tracer_profiles(sec, tmp_path):
    z = write_ctd_zip(tmp_path / "cruise.zip", casts(sec))
    rows = bottle_rows(sec)
    n = len(rows["STNNBR"])
    flags = {"OXYGEN": [2] * n, "SILCAT": [2] * n}
    flags["OXYGEN"][0] = 3
    flags["SILCAT"][1] = 4
    btl = write_bottle(tmp_path / "btl.csv", rows, flags=flags)
    out, err = io.StringIO(), io.StringIO()
    assert check_main([str(z), "--bottle", str(btl)], out, err) == 0, err.getvalue()
    text = out.getvalue()
    assert f"OXYGEN: flag 2: {n - 1}, flag 3: 1" in text
    assert f"SILCAT: flag 2: {n - 1}, flag 4: 1" in text
    assert "oxygen (OXYGEN): profiles at 5 of 5 stations" in text
    assert "station 1: OXYGEN flag 2: 5, flag 3: 1; SILCAT flag 2: 5, flag 4: 1" in text
    assert "4 of 5 stations have every bottle flagged 2" in text


def test_its68_temperature_is_converted_to_its90(sec, tmp_path):
    cs = casts(sec)[:2]
    a, _ = load_section(write_ctd_folder(tmp_path / "a", cs))
    t68 = [dict(c, temperature=np.round(c["temperature"] * 1.00024, 4)) for c in cs]
    b = tmp_path / "b"
    b.mkdir()
    for i, c in enumerate(t68):
        (b / f"c{i}.csv").write_text(ctd_text(**c, units={"CTDTMP": "IPTS-68"}))
    got, _ = load_section(b)
    # T90 = T68 / 1.00024 (Saunders 1990, as gsw.t90_from_t68); 1e-4 degC file precision
    np.testing.assert_allclose(got["CT"].values, a["CT"].values, rtol=0, atol=2e-4)


@pytest.mark.parametrize(
    "edit, words",
    [
        (lambda t: t.replace("END_DATA\n", ""), ["line", "END_DATA"]),
        (lambda t: t.replace("20.1000,3", "20.1x00,3"), ["line 17", "CTDTMP", "20.1x00"]),
        (lambda t: t.replace("ITS-90", "DEG F"), ["CTDTMP", "DEG F"]),
        (lambda t: t.replace("20.1000,3", "20.1000,8"), ["line 17", "CTDTMP_FLAG_W = 8"]),
        (lambda t: t.replace("NUMBER_HEADERS = 10", "NUMBER_HEADERS = 12"),
         ["line 4", "NUMBER_HEADERS = 12"]),
        (lambda t: t.replace("2.0,2,20.1234,2,35.1000,2,230.0,2", "2.0,2,20.1234,2"),
         ["line 15", "4 fields but 8 columns"]),
    ],
)
def test_malformed_file_gives_one_message_naming_file_line_and_problem(tmp_path, edit, words):
    path = tmp_path / "bad_ct1.csv"
    path.write_text(edit(HAND_WRITTEN))
    other = tmp_path / "good_ct1.csv"
    other.write_text(HAND_WRITTEN.replace("STNNBR = 17", "STNNBR = 18")
                     .replace("10.2500", "10.7500"))
    with pytest.raises((InputFileError, SectionDataError)) as info:
        load_section(tmp_path)
    message = str(info.value)
    assert "bad_ct1.csv" in message
    for w in words:
        assert w in message


def test_zip_without_exchange_members_is_refused(tmp_path):
    path = tmp_path / "empty.zip"
    with zipfile.ZipFile(path, "w") as z:
        z.writestr("readme.txt", "nothing here")
    with pytest.raises(InputFileError, match="no WHP-Exchange files"):
        load_section(path)


# ---------------------------------------------------------------------------
# Bottles
# ---------------------------------------------------------------------------


def test_tracer_names_are_file_parameter_names_or_plain_names():
    assert tracer_name("SILCAT") == tracer_name("silicate") == "silicate"
    assert tracer_name("oxygen") == "oxygen"
    with pytest.raises(Exception, match="not known"):
        tracer_name("argon")


def test_tracer_linear_in_pressure_is_reproduced_between_bottles_and_constant_beyond(
    sec, tmp_path
):
    z = write_ctd_zip(tmp_path / "cruise.zip", casts(sec))
    rows = bottle_rows(sec)
    ds, _ = load_section(z, bottle=write_bottle(tmp_path / "btl.csv", rows))
    assert ds["silicate"].attrs["units"] == "umol/kg"
    p = ds["pressure"].values
    for sid in ds["station"].values:
        mine = [q for s, q in zip(rows["STNNBR"], rows["CTDPRS"], strict=True) if s == sid]
        top, bottom = min(mine), max(mine)
        got = ds["silicate"].sel(station=sid).values
        inside = (p >= top) & (p <= bottom)
        # PCHIP reproduces data on a straight line exactly (Fritsch and Carlson 1980)
        np.testing.assert_allclose(got[inside], 2.0 + 0.03 * p[inside], rtol=0, atol=1e-9)
        # constant extension of the end bottles, NaN below the station's last level
        np.testing.assert_allclose(got[p < top], 2.0 + 0.03 * top, rtol=0, atol=1e-9)
        last = np.isfinite(ds["SA"].sel(station=sid).values)
        np.testing.assert_allclose(got[last & (p > bottom)], 2.0 + 0.03 * bottom, atol=1e-9)
        assert np.all(np.isnan(got[~last]))


def test_bad_bottles_and_fill_values_never_reach_the_grid(sec, tmp_path):
    z = write_ctd_zip(tmp_path / "cruise.zip", casts(sec))
    rows = bottle_rows(sec)
    n = len(rows["STNNBR"])
    flags = {"OXYGEN": [2] * n, "SILCAT": [2] * n}
    rows["SILCAT"][2] = 500.0  # a bad bottle
    flags["SILCAT"][2] = 4
    rows["SILCAT"][3] = np.nan  # -999, not drawn
    flags["SILCAT"][3] = 9
    path = write_bottle(tmp_path / "btl.csv", rows, flags=flags)
    ds, cautions = load_section(z, bottle=path)
    got = ds["silicate"].sel(station="1").values
    p = ds["pressure"].values
    deepest = max(q for s, q in zip(rows["STNNBR"], rows["CTDPRS"], strict=True) if s == "1")
    inside = (p >= 5.0) & (p <= deepest)
    # without the two samples the remaining bottles are still on the line (PCHIP exact)
    np.testing.assert_allclose(got[inside], 2.0 + 0.03 * p[inside], rtol=0, atol=1e-9)
    assert np.nanmax(ds["silicate"].values) < 100.0
    assert any(c.variable == "SILCAT" for c in cautions.of_kind("flagged-dropped"))
    counts = read_bottle(path).stations["1"].flag_counts["SILCAT"]
    assert counts == {2: sum(1 for s in rows["STNNBR"] if s == "1") - 2, 4: 1, 9: 1}


def test_a_bottle_that_did_not_trip_gives_no_samples(sec, tmp_path):
    rows = bottle_rows(sec)
    rows["OXYGEN"][2] = 999.0  # the bottle closed somewhere else
    text = bottle_text(rows).splitlines()
    # add the bottle's own flag column: 4 (did not trip correctly) on the third sample
    text[2] += ",BTLNBR_FLAG_W"
    text[3] += ","
    for k in range(4, len(text) - 1):
        text[k] += ",4" if k == 6 else ",2"
    path = tmp_path / "btl.csv"
    path.write_text("\n".join(text) + "\n")
    cautions = Cautions()
    bottles = read_bottle(path, cautions)
    p, c = bottles.stations["1"].samples["oxygen"]
    assert 999.0 not in c and rows["CTDPRS"][2] not in p
    assert cautions.of_kind("bottle-mistrip")


def test_pchip_does_not_overshoot_a_step_between_bottles(sec, tmp_path):
    z = write_ctd_zip(tmp_path / "cruise.zip", casts(sec))
    rows = bottle_rows(sec, tracers={"OXYGEN": lambda p, i: 200.0 if p < 300 else 150.0})
    ds, _ = load_section(z, bottle=write_bottle(tmp_path / "btl.csv", rows))
    values = ds["oxygen"].values
    assert np.nanmax(values) <= 200.0 + 1e-9 and np.nanmin(values) >= 150.0 - 1e-9


def test_bottle_units_other_than_umol_per_kg_are_refused(sec, tmp_path):
    rows = bottle_rows(sec)
    path = write_bottle(tmp_path / "btl.csv", rows, units={"OXYGEN": "ML/L"})
    with pytest.raises(SectionDataError, match="OXYGEN: units 'ML/L'"):
        read_bottle(path)


def test_bottle_pressure_in_other_units_than_dbar_is_refused_naming_file_and_units(sec, tmp_path):
    rows = bottle_rows(sec)
    path = write_bottle(tmp_path / "btl.csv", rows, units={"CTDPRS": "PSI"})
    with pytest.raises(SectionDataError, match=r"btl\.csv, variable CTDPRS: units 'PSI'"):
        read_bottle(path)


def test_a_latin1_comment_is_read_as_written(tmp_path):
    # older files carry Latin-1 bytes (a degree sign, an accented name) in comments; the
    # text is kept, not replaced, and the data are read as usual
    text = HAND_WRITTEN.replace("# invented cast", "# invented cast, J. Müller, 2 °C")
    path = tmp_path / "latin1_ct1.csv"
    path.write_bytes(text.encode("latin-1"))
    ((label, read),) = exchange_texts(path)
    assert "J. Müller, 2 °C" in read and "\ufffd" not in read
    table = parse_exchange(read, label)
    np.testing.assert_array_equal(table.numbers["CTDPRS"], [2.0, 4.0, 6.0])
    # UTF-8 files are read as UTF-8
    path.write_bytes(text.encode("utf-8"))
    assert "Müller, 2 °C" in exchange_texts(path)[0][1]
