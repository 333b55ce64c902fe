"""Paper tables (tables.tex, tables.md): rounding, captions, rows, escaping, determinism.

The ocean here is invented: two lines of stations over a smooth
stratification (warm salty surface over cold deep water), built in memory.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest
from _synthetic import invented_line

from sectionkit import paper
from sectionkit.config import parse_config
from sectionkit.paper import (
    error_decimals,
    format_fixed,
    format_with_error,
    latex_escape,
    round_with_error,
    write_paper_tables,
)
from sectionkit.report import tables
from sectionkit.study import Study

# ---------------------------------------------------------------- invented study


CONFIG = {
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
    "inverse": {
        "noise_class": [1.0, 1.0, 1.0],
        "known": [{"name": "strait", "transport": 0.8, "noise": 0.2, "class": "upper"}],
    },
}


def make_study(inverse: bool = True) -> Study:
    cfg = dict(CONFIG)
    if not inverse:
        cfg.pop("inverse")
    sections = {"south": invented_line(5, 25.0), "north": invented_line(6, 40.0)}
    return Study.from_config(parse_config(cfg), sections=sections)


@pytest.fixture(scope="module")
def solved():
    study = make_study()
    return study, study.solve()


@pytest.fixture(scope="module")
def unsolved():
    study = make_study(inverse=False)
    return study, study.solve()


def md_tables(text: str) -> list[list[list[str]]]:
    """Body rows of every Markdown pipe table (header and rule dropped), cells unescaped."""
    blocks: list[list[str]] = []
    previous = False
    for line in text.splitlines():
        is_row = line.startswith("| ")
        if is_row and not previous:
            blocks.append([])
        if is_row:
            blocks[-1].append(line)
        previous = is_row
    return [
        [[c.strip().replace("\\_", "_") for c in re.split(r"(?<!\\)\|", row)[1:-1]]
         for row in block[2:]]
        for block in blocks
    ]


# ---------------------------------------------------------------- rounding


def test_value_is_quoted_to_the_first_significant_digit_of_its_error():
    assert round_with_error(12.3456, 0.234) == ("12.3", "0.2")
    assert round_with_error(-0.0249, 0.0184) == ("-0.025", "0.018")
    assert round_with_error(1234.5, 23.0) == ("1230", "20")
    assert format_with_error(12.3456, 0.234) == "12.3 ± 0.2"


def test_error_starting_with_one_keeps_two_digits():
    assert round_with_error(12.3456, 0.134) == ("12.35", "0.13")
    assert round_with_error(28.687, 1.0927) == ("28.7", "1.1")
    # 0.0996 rounds to 0.10 at two significant digits: a leading 1
    assert round_with_error(3.14159, 0.0996) == ("3.14", "0.10")
    assert error_decimals(0.96) == 1  # 9.6e-1: one decimal, error prints as 1.0
    assert round_with_error(5.0, 0.96) == ("5.0", "1.0")


def test_error_digits_come_from_the_unrounded_error():
    # the rule is applied to the error as computed: 0.019993 starts with 1, so two significant
    # digits (0.020), not one digit of the already rounded 0.02
    assert round_with_error(0.5, 0.019993) == ("0.500", "0.020")
    assert error_decimals(0.019993) == 3
    assert round_with_error(0.5, 0.0996) == ("0.50", "0.10")


def test_rounding_is_half_away_from_zero_on_the_printed_decimal():
    # binary floats would round 0.15 and 2.675 down
    assert format_fixed(0.15, 1) == "0.2"
    assert format_fixed(2.675, 2) == "2.68"
    assert format_fixed(-2.675, 2) == "-2.68"


def test_values_that_round_to_zero_carry_no_minus_sign():
    assert format_fixed(-0.0004, 3) == "0.000"
    assert round_with_error(-0.0004, 0.01) == ("0.000", "0.010")


def test_value_without_error_uses_the_fixed_precision_of_its_unit():
    assert round_with_error(31.00707, None, "Sv") == ("31.0", None)
    assert round_with_error(3.083587, float("nan"), "PW") == ("3.08", None)
    assert round_with_error(-0.960052, None, "freshwater Sv") == ("-0.96", None)
    assert round_with_error(207.445, None, "km2") == ("207", None)
    assert round_with_error(0.0123, 0.0, "m/s") == ("0.012", None)
    assert round_with_error(float("nan"), 0.3) == ("", None)


def test_latex_special_characters_in_names_are_escaped():
    assert latex_escape("deep_water & 50% #2") == r"deep\_water \& 50\% \#2"
    assert latex_escape("a{b}~c^d\\") == (
        r"a\{b\}\textasciitilde{}c\textasciicircum{}d\textbackslash{}"
    )


# ---------------------------------------------------------------- files


def test_latex_has_booktabs_rules_errors_and_captions(solved, tmp_path):
    study, results = solved
    write_paper_tables(study, results, tmp_path)
    tex = (tmp_path / "tables.tex").read_text()
    # the four §7 tables plus the inverse's transfers and Ekman adjustments
    for rule in (r"\toprule", r"\midrule", r"\bottomrule"):
        assert tex.count(rule) == 5
    assert tex.count(r"\caption{") == 5
    assert r"$\pm$" in tex
    assert "S[table-format=" in tex
    for unit in (r"km$^{2}$", r"m\,s$^{-1}$", "(Sv)", "(PW)"):
        assert unit in tex
    note = tex.split(r"\paragraph{Note on the tables.}")[1]
    assert "level of no motion at 2000 dbar with 1 pair override" in note
    assert "Bottom triangles: velocity held constant" in note
    assert "Inverse: Gauss--Markov estimate conserving mass and salt" in note
    assert r"0.02 m\,s$^{-1}$ (reference velocity)" in note
    assert "deep water" in tex and "deep_water" not in tex  # class names without underscores
    assert not re.search(r"\d\.\d{5,}", tex), "no raw float noise in the tables"


def test_caption_says_when_no_inverse_ran(unsolved, tmp_path):
    study, results = unsolved
    write_paper_tables(study, results, tmp_path)
    tex = (tmp_path / "tables.tex").read_text()
    md = (tmp_path / "tables.md").read_text()
    assert tex.count("No inverse: initial budgets") == 1  # said once, in the note
    assert md.count("No inverse: initial budgets") == 1
    assert "±" not in md  # no errors anywhere


def test_study_setup_is_said_once_under_the_tables(solved, tmp_path):
    study, results = solved
    write_paper_tables(study, results, tmp_path)
    md = (tmp_path / "tables.md").read_text()
    assert md.count("level of no motion at 2000 dbar") == 1
    assert md.index("**Note on the tables.**") > md.rindex("**Table ")


def test_run_without_inverse_omits_inverse_only_tables_and_columns(unsolved, tmp_path):
    study, results = unsolved
    write_paper_tables(study, results, tmp_path)
    md = (tmp_path / "tables.md").read_text()
    assert md.count("**Table ") == 3  # classes, pairs, section totals: no box, no unknowns
    assert "box constraints" not in md.lower()
    assert "Adjust" not in md  # no adjusted column and no adjustment column


def test_pair_table_names_both_stations_and_adjustments_in_cm_per_s(solved, tmp_path):
    study, results = solved
    write_paper_tables(study, results, tmp_path)
    md = (tmp_path / "tables.md").read_text()
    pairs = md_tables(md)[1]
    df = tables(study, results)["pair_adjustments.csv"]
    assert [r[2] for r in pairs] == [f"{a}–{b}" for a, b in
                                     zip(df.first_station, df.second_station, strict=True)]
    assert "Adjustment (cm s⁻¹)" in md
    # 1 m s^-1 = 100 cm s^-1 (definition); the printed value is the CSV value x 100
    assert [r[-1] for r in pairs] == [
        format_with_error(100 * v, 100 * e, "cm/s")
        for v, e in zip(df.adjustment_m_s, df.adjustment_err_m_s, strict=True)]


def test_class_bounds_are_lighter_and_denser_and_names_have_no_underscores(solved, tmp_path):
    study, results = solved
    write_paper_tables(study, results, tmp_path)
    md = (tmp_path / "tables.md").read_text()
    assert "Lighter bound" in md and "Denser bound" in md and "Upper bound" not in md
    assert "deep water" in md and "deep_water" not in md.replace("deep\\_water", "deep_water")


def test_transfer_rows_name_their_interface_and_prior_std(solved, tmp_path):
    study, results = solved
    write_paper_tables(study, results, tmp_path)
    md = (tmp_path / "tables.md").read_text()
    assert "W across σ₂ 36.9" in md and "W across σ₀ 26.8" in md
    assert "Prior std" in md


def test_markdown_rows_match_the_csv_tables(solved, tmp_path):
    study, results = solved
    write_paper_tables(study, results, tmp_path)
    md = (tmp_path / "tables.md").read_text()
    classes, pairs, box, summary, unknowns = md_tables(md)
    frames = tables(study, results)

    df = frames["inverse_unknowns.csv"]
    df = df[df.kind != "reference_velocity"]
    assert len(unknowns) == len(df)
    assert [r[3] for r in unknowns] == [
        format_with_error(v, e, "1" if k == "ekman_fraction" else "Sv")
        for v, e, k in zip(df.estimate, df.posterior_std, df.kind, strict=True)
    ]

    df = frames["class_transports.csv"]
    assert [(r[0], r[1]) for r in classes] == list(
        zip(df.section, [c.replace("_", " ") for c in df["class"]], strict=True))
    assert [r[-1] for r in classes] == [
        format_with_error(v, e) for v, e in zip(df.adjusted_sv, df.adjusted_err_sv, strict=True)
    ]

    df = frames["pair_adjustments.csv"]
    assert [(r[0], int(r[1])) for r in pairs] == list(zip(df.section, df.pair, strict=True))
    kinds = {"pressure": "pressure", "bottom": "deepest common"}
    assert [r[6] for r in pairs] == [kinds[k] for k in df.ref_kind]
    assert [float(r[7]) for r in pairs] == pytest.approx(list(df.ref_pressure), abs=0.5)

    df = frames["box_budget.csv"]
    assert [(r[0], r[1]) for r in box] == [
        (b, c.replace(":", ", ").replace("_", " ")) for b, c in zip(df.box, df.constraint,
                                                                   strict=True)]
    assert [float(r[6]) for r in box] == pytest.approx(list(df.normalized_residual), abs=0.006)
    # adjusted over the posterior residual std (Wunsch 1996, ch. 3), as in box_budget.csv
    assert [float(r[7]) for r in box] == pytest.approx(list(df.posterior_normalized_residual),
                                                      abs=0.006)

    df = frames["section_summary.csv"]
    assert [r[0] for r in summary] == list(df.section)
    assert [r[1] for r in summary] == [
        format_with_error(v, e) for v, e in zip(df.net_sv, df.net_err_sv, strict=True)
    ]
    assert [r[2] for r in summary] == [  # net mass / rho0 with its error too
        format_with_error(v, e) for v, e in zip(df.net_mass_sv, df.net_mass_err_sv, strict=True)
    ]
    assert [r[3] for r in summary] == [
        format_with_error(v, e, "PW") for v, e in zip(df.heat_pw, df.heat_err_pw, strict=True)
    ]


def test_tables_are_byte_identical_across_runs(solved, tmp_path):
    study, results = solved
    write_paper_tables(study, results, tmp_path / "a")
    again = study.solve()
    write_paper_tables(study, again, tmp_path / "b")
    for name in ("tables.tex", "tables.md"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


def test_long_tables_become_longtables(solved, monkeypatch):
    study, results = solved
    monkeypatch.setattr(paper, "LONG_TABLE_ROWS", 5)
    tex = paper.to_latex(paper.paper_tables(study, results))
    assert r"\begin{longtable}" in tex and r"\endfirsthead" in tex
    assert tex.count(r"\begin{longtable}") == 3  # layers (6), pairs (9), box (7 rows)


@pytest.mark.skipif(
    shutil.which("pdflatex") is None or shutil.which("kpsewhich") is None,
    reason="pdflatex not installed",
)
def test_latex_compiles(solved, unsolved, tmp_path, monkeypatch):
    have = subprocess.run(["kpsewhich", "siunitx.sty", "booktabs.sty", "longtable.sty"],
                          capture_output=True, text=True).stdout.split()
    if len(have) < 3:
        pytest.skip("siunitx, booktabs or longtable missing")
    monkeypatch.setattr(paper, "LONG_TABLE_ROWS", 8)  # exercise a longtable too
    for tag, (study, results) in (("inv", solved), ("initial", unsolved)):
        write_paper_tables(study, results, tmp_path / tag)
    doc = tmp_path / "doc.tex"
    doc.write_text(
        "\\documentclass{article}\n\\usepackage[T1]{fontenc}\n\\usepackage{booktabs}\n"
        "\\usepackage{siunitx}\n\\usepackage{longtable}\n\\begin{document}\n"
        "\\input{inv/tables.tex}\n\\clearpage\n\\input{initial/tables.tex}\n\\end{document}\n"
    )
    run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", doc.name],
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout[-2000:]
    assert Path(tmp_path / "doc.pdf").stat().st_size > 1000
