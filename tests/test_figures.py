"""Paper figures: what each panel shows, the files written, and that pyplot is never used.

The ocean here is invented: two lines of stations over a smooth
stratification, built in memory (no files).
"""

from __future__ import annotations

import sys

import matplotlib as mpl
import numpy as np
import pytest
from _synthetic import invented_line
from matplotlib.collections import LineCollection, PolyCollection, QuadMesh
from matplotlib.container import BarContainer
from matplotlib.contour import ContourSet

from sectionkit import figures as F
from sectionkit.config import parse_config
from sectionkit.paper import write_paper_tables
from sectionkit.report import write_outputs
from sectionkit.study import Study


def make_study(inverse: dict | None = None) -> Study:
    cfg = {
        "title": "Invented box",
        "grid": {"dp": 10.0},
        "sections": [
            {"name": "south", "file": "south.nc"},
            {"name": "north", "file": "north.nc", "into_box": False},
        ],
        "reference": {"pressure": 2000.0, "overrides": {"south:2": "deepest_common"}},
        "ekman": {"stress": {"south": [-0.06, 0.0]}},
        "classes": {
            "interfaces": [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 36.9, "p_ref": 2000.0}],
            "names": ["upper", "mid", "deep_water"],
        },
    }
    if inverse is not None:
        cfg["inverse"] = {"noise_class": [1.0, 1.0, 1.0], **inverse}
    sections = {"south": invented_line(5, 25.0), "north": invented_line(6, 40.0)}
    return Study.from_config(parse_config(cfg), sections=sections)


@pytest.fixture(scope="module")
def solved():
    study = make_study({})
    return study, study.solve()


@pytest.fixture(scope="module")
def written(solved, tmp_path_factory):
    """One full batch run (CSV, tables and figures) through report.write_outputs."""
    study, results = solved
    out = tmp_path_factory.mktemp("run") / "out"
    files = write_outputs(study, results, out, [write_paper_tables, F.write_figures])
    return out, files


# ---------------------------------------------------------------- velocity section


def test_velocity_section_has_labelled_axes_zero_centred_colours_and_colour_bar(solved):
    study, results = solved
    op = study.operators["south"]
    v = F.section_velocity(study, results, "south")
    fig = F.new_figure(6, 4)
    ax = fig.add_subplot()
    mesh = F.plot_velocity_section(
        ax, op, v, bottom_pressure=study.sections["south"]["bottom_pressure"].values,
        reference_pressure=results.references["south"].pressure,
        station_ids=list(study.sections["south"]["station"].values),
    )
    assert ax.get_xlabel() == "distance along the line (km)"
    assert ax.get_ylabel() == "pressure (dbar)"
    bottom, top = ax.get_ylim()
    assert bottom > top == 0.0, "pressure increases downward"
    assert isinstance(mesh, QuadMesh)
    assert mesh.norm.vmin == -mesh.norm.vmax and mesh.norm(0.0) == pytest.approx(0.5)
    assert mesh.get_cmap().name == "RdBu_r"
    colorbars = [a for a in fig.axes if a.get_ylabel() == "velocity (m s⁻¹)"]
    assert len(colorbars) == 1
    # bottom shaded grey, interfaces contoured, reference levels drawn
    assert any(isinstance(c, PolyCollection) for c in ax.collections)
    # two interfaces and one set of labelled velocity contours
    assert sum(isinstance(c, ContourSet) for c in ax.collections) == 3
    refs = [c for c in ax.collections if isinstance(c, LineCollection)
            and c.get_label() == "reference level"]
    assert len(refs) == 1 and len(refs[0].get_segments()) == op.n_pair
    # station ids on the top axis
    top_axis = ax.child_axes[0]
    labels = [t.get_text() for t in top_axis.get_xticklabels()]
    assert labels[0] == "K1" and labels[-1] == "K5"


def test_adjusted_velocity_adds_each_pairs_adjustment_where_the_reference_reaches(solved):
    study, results = solved
    op = study.operators["north"]
    b = results.estimate[results.layout.pair_slices["north"]]
    initial = F.section_velocity(study, results, "north", adjusted=False)
    adjusted = F.section_velocity(study, results, "north")
    np.testing.assert_allclose(adjusted - initial, op.response * b[:, None], atol=1e-12)


def test_velocity_mesh_spans_each_pair_between_its_two_stations(solved):
    study, _ = solved
    op = study.operators["south"]
    x = F.station_distance(op)
    assert x[0] == 0.0 and x.size == op.n_pair + 1
    np.testing.assert_allclose(np.diff(x), op.pairs["distance"].values / 1e3)
    np.testing.assert_allclose(F.pair_distance(op), 0.5 * (x[:-1] + x[1:]))


def test_interface_is_drawn_once_through_a_density_inversion():
    p = np.arange(0.0, 50.0, 10.0)
    sigma = np.array([[26.0, 26.9, 26.7, 27.2, np.nan]])  # inversion at 20 dbar
    field = F.interface_field(sigma)
    np.testing.assert_allclose(field[0, :4], [26.0, 26.9, 26.9, 27.2])
    assert np.isnan(field[0, 4])
    # first crossing of 26.8: between 0 and 10 dbar, at 10 * 0.8 / 0.9
    np.testing.assert_allclose(F.interface_pressure(field, p, 26.8), [80.0 / 9.0])
    assert np.isnan(F.interface_pressure(field, p, 28.0)[0])


def test_colour_limit_ignores_a_narrow_fast_current():
    v = np.full((10, 100), 0.05)
    v[0] = 1.5  # one pair of a boundary current
    widths = np.full((10, 1), 100e3)
    widths[0] = 10e3
    assert F._symmetric_limit(v, widths) == pytest.approx(0.05)
    assert F._nice_ceiling(0.063) == pytest.approx(0.08)


# ---------------------------------------------------------------- other panels


def test_class_transport_bars_show_initial_and_adjusted_with_errors(solved):
    study, results = solved
    fig = F.transport_figure(study, results)
    ax = fig.axes[0]
    names = [f"volume:{c}" for c in study.operators["south"].layer_names]
    initial, adjusted, error = F.output_block(results, "south", "class_volume_transport")
    heights = [p.get_height() for p in ax.patches]
    np.testing.assert_allclose(heights, np.concatenate([initial, adjusted]))
    assert ax.get_ylabel() == "volume transport (Sv)"
    assert [t.get_text() for t in ax.get_xticklabels()] == ["upper", "mid", "deep water"]
    np.testing.assert_allclose(error, [results.error("south", n) for n in names])
    bars = [c for c in ax.containers if isinstance(c, BarContainer)]
    assert [b.get_label() for b in bars] == ["initial", "adjusted ± 1σ"]
    assert bars[0].errorbar is None and bars[1].errorbar is not None


def test_overturning_in_depth_and_density(solved):
    study, results = solved
    fig = F.overturning_figure(study, results)
    ax_z, ax_r = fig.axes[:2]
    assert ax_z.get_ylabel() == "pressure (dbar)"
    assert ax_z.get_xlabel() == "overturning streamfunction (Sv)"
    assert ax_z.get_ylim()[0] > ax_z.get_ylim()[1]
    op = study.operators["south"]
    psi = [results.value("south", f"psi_depth:{k}") for k in range(op.pressure.size)]
    (adjusted_line,) = [line for line in ax_z.lines
                        if line.get_label().startswith("south adjusted")]
    np.testing.assert_allclose(adjusted_line.get_xdata(), psi)
    labels = [t.get_text() for t in ax_r.get_yticklabels()]
    assert labels[0] == "top" and labels[-1] == "all" and len(labels) == 4
    assert ax_r.get_ylabel() == "class interface (light → dense)"


def test_station_map_is_labelled_in_degrees(solved):
    study, _ = solved
    fig = F.map_figure(study)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "longitude (degrees)"
    assert ax.get_ylabel() == "latitude (degrees)"
    assert F._lon_text(-40.0) == "40°W" and F._lat_text(-12.5) == "12.5°S"
    assert F._lon_text(190.0) == "170°W"
    assert len(ax.collections) >= 2 * len(study.operators)


def test_gauss_markov_resolution_diagonal_is_the_variance_reduction(solved):
    # Gauss-Markov: P = (I - T) R, so diag(T) = 1 - diag(P) / diag(R) for diagonal R
    # (Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3)
    _, results = solved
    inv = results.inverse
    active = inv.system.prior > 0
    expected = 1.0 - np.diag(inv.covariance)[active] / inv.system.prior[active] ** 2
    np.testing.assert_allclose(inv.resolution_diagonal[active], expected, atol=1e-9)


def test_gauss_markov_reports_the_scaled_singular_values_the_svd_solver_uses():
    # W^-1 E S has the same singular values whichever solver is fitted to it (Wunsch 1996, ch. 3)
    svd = make_study({"solver": "svd"}).solve().inverse
    gm = make_study({"solver": "gauss-markov"}).solve().inverse
    np.testing.assert_allclose(gm.scaled_singular_values, svd.solver.singular_values_,
                               rtol=1e-9, atol=1e-12)


def test_inverse_diagnostics_show_singular_values_residuals_and_resolution(solved):
    study, results = solved
    fig = F.inverse_figure(study, results)
    titles = [a.get_title() for a in fig.axes]
    assert titles[0].startswith("scaled singular values")
    assert titles[1] == "constraint residuals" and titles[2] == "resolution of pair adjustments"
    ax = fig.axes[1]
    assert [t.get_text() for t in ax.get_yticklabels()] == [
        r[1].replace(":", ", ").replace("_", " ") for r in results.inverse.system.rows]
    after = ax.collections[-1].get_offsets()[:, 0]
    np.testing.assert_allclose(after, results.inverse.normalized_residuals)
    assert F.inverse_figure(study, study.solve(inverse=False)) is None


# ---------------------------------------------------------------- files


def test_batch_run_writes_every_figure_as_png_and_pdf(written):
    out, files = written
    names = {str(f) for f in files}
    stems = ["velocity_south", "velocity_north", "class_transports", "overturning",
             "station_map", "inverse_diagnostics"]
    for stem in stems:
        png = out / "figures" / f"{stem}.png"
        pdf = out / "figures" / f"{stem}.pdf"
        assert f"figures/{stem}.png" in names and f"figures/{stem}.pdf" in names
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert pdf.read_bytes()[:5] == b"%PDF-"
    assert (out / "tables.tex").is_file() and (out / "tables.md").is_file()
    assert b"Software" not in (out / "figures" / "station_map.png").read_bytes()
    assert b"CreationDate" not in (out / "figures" / "station_map.pdf").read_bytes()


def test_figures_are_identical_across_runs_and_leave_pyplot_alone(solved, written, tmp_path):
    study, results = solved
    out, _ = written
    before = None
    if "matplotlib.pyplot" in sys.modules:
        before = sys.modules["matplotlib.pyplot"].get_fignums()
    with mpl.rc_context(F.STYLE):
        again = {
            "velocity_south": F.velocity_figure(study, results, "south"),
            "inverse_diagnostics": F.inverse_figure(study, results),
        }
        files = [p for stem, fig in again.items() for p in F._save(fig, tmp_path, stem)]
    if before is None:
        assert "matplotlib.pyplot" not in sys.modules
    else:
        assert sys.modules["matplotlib.pyplot"].get_fignums() == before
    for path in files:
        assert path.read_bytes() == (out / "figures" / path.name).read_bytes(), path.name


def test_without_inverse_there_is_no_diagnostics_figure():
    study = make_study(None)
    figures = F.build_figures(study, study.solve())
    assert sorted(figures) == ["class_transports", "overturning", "station_map",
                               "velocity_north", "velocity_south"]
    assert "no inverse" in figures["velocity_south"].axes[0].get_title(loc="left")


# ---------------------------------------------------------------- figures that stand alone


def _texts(fig) -> str:
    """Every text a reader sees: titles, axis labels, tick labels, legends, colour bars."""
    out = [t.get_text() for t in fig.texts]
    for ax in fig.axes:
        out += [ax.get_title(loc) for loc in ("left", "center", "right")]
        out += [ax.get_xlabel(), ax.get_ylabel()]
        out += [t.get_text() for t in ax.get_xticklabels() + ax.get_yticklabels()]
        out += [t.get_text() for t in ax.texts]
        for child in ax.child_axes:
            out += [t.get_text() for t in child.get_xticklabels()]
        legend = ax.get_legend()
        if legend is not None:
            out += [t.get_text() for t in legend.get_texts()]
    for legend in fig.legends:
        out += [t.get_text() for t in legend.get_texts()]
    return "\n".join(out)


def test_sign_convention_is_stated_in_words_tied_to_each_line(solved):
    # the invented lines run west to east (longitude increasing with station order): positive
    # transport, to the left of increasing station order, is northward (DESIGN.md §4)
    study, results = solved
    ds = study.sections["south"]
    assert np.all(np.diff(ds["lon"].values) > 0)
    first, last = str(ds["station"].values[0]), str(ds["station"].values[-1])
    phrase = f"positive = northward across {first}→{last}"
    figs = F.build_figures(study, results)
    assert phrase in _texts(figs["velocity_south"])
    assert phrase in _texts(figs["class_transports"])
    assert "+ northward across" in _texts(figs["overturning"])
    assert "positive:" in _texts(figs["overturning"])


def test_positive_direction_of_a_line_in_compass_words():
    from sectionkit.geometry import positive_direction

    # to the left of the direction of travel (DESIGN.md §4): west->east counts northward
    assert positive_direction([-30.0, -10.0], [24.0, 24.0]) == "northward"
    assert positive_direction([-10.0, -30.0], [24.0, 24.0]) == "southward"
    assert positive_direction([-20.0, -20.0], [10.0, 30.0]) == "westward"
    assert positive_direction([-20.0, -20.0], [30.0, 10.0]) == "eastward"


def test_velocity_colour_scale_reaches_the_fastest_current():
    # a narrow boundary jet 30 times faster than the interior: the scale must reach it
    # (no saturation) while the interior keeps a linear colour range
    v = np.full((10, 100), 0.05)
    v[0] = 1.5
    widths = np.full((10, 1), 100e3)
    widths[0] = 10e3
    norm = F.velocity_norm(v, widths)
    assert norm.vmax >= 1.5 and norm.vmin == -norm.vmax
    assert float(norm(0.0)) == pytest.approx(0.5)
    # the interior speed still spans a visible part of the colour range (>= 1/8 of each half)
    assert float(norm(0.05)) - 0.5 > 0.5 / 8
    levels = F.velocity_contour_levels(norm)
    assert 1.0 in levels and -1.0 in levels and 0.0 not in levels


def test_velocity_contours_are_labelled_in_m_per_s(solved):
    study, results = solved
    fig = F.velocity_figure(study, results, "south")
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.texts]
    numbers = [float(t) for t in labels if t.replace(".", "").replace("-", "").isdigit()]
    assert numbers, labels  # clabel texts of the velocity contours
    assert any(t.startswith("σ₀ 26.8") or t.startswith("σ₂ 36.9") for t in labels)


def test_station_labels_have_a_constant_stride_and_do_not_crowd():
    keep = F.station_label_indices(47, most=16)
    assert keep[0] == 0 and len(keep) <= 16
    assert np.all(np.diff(keep) == keep[1] - keep[0])
    np.testing.assert_array_equal(F.station_label_indices(5), np.arange(5))
    # stations 10 km apart near the ends, 100 km in the interior: one stride throughout,
    # wide enough that neighbouring labels keep 0.55 of an even share of the width apart
    x = np.concatenate([np.arange(5) * 10.0, 40 + np.arange(1, 20) * 100.0])
    x = np.concatenate([x, x[-1] + np.arange(1, 5) * 10.0])
    keep = F.station_label_indices(x.size, positions=x)
    assert np.all(np.diff(keep) == keep[1] - keep[0])
    assert np.min(np.diff(x[keep])) >= 0.55 * (x[-1] - x[0]) / F.MAX_STATION_LABELS


def test_overturning_error_bars_of_different_series_do_not_overlap(solved):
    study, results = solved
    fig = F.overturning_figure(study, results)
    ax_r = fig.axes[1]
    ys = [tuple(np.round(line.get_ydata(), 6)) for line in ax_r.lines
          if len(line.get_ydata()) == 4]
    # south, north x initial, adjusted: each series (line, caps) sits at its own height
    assert len(set(ys)) == 4


def test_inverse_diagnostics_are_titled_with_the_solver_name(solved):
    study, results = solved
    fig = F.inverse_figure(study, results)
    assert fig._suptitle.get_text().startswith("Gauss–Markov")


def test_every_axis_of_every_figure_has_labels_with_units(solved):
    study, results = solved
    for stem, fig in F.build_figures(study, results).items():
        for ax in fig.axes:
            if not ax.get_visible() or not ax.has_data():
                continue
            assert ax.get_xlabel() or ax.get_ylabel(), stem
        text = _texts(fig)
        assert "_" not in text.replace("velocity_", ""), (stem, [t for t in text.split("\n")
                                                               if "_" in t])
    units = {"velocity_south": "(m s⁻¹)", "class_transports": "(Sv)", "overturning": "(Sv)",
             "station_map": "(degrees)"}
    figs = F.build_figures(study, results)
    for stem, unit in units.items():
        assert unit in _texts(figs[stem]) + "\n".join(
            a.get_ylabel() for a in figs[stem].axes), stem
