"""Salt and heat rows of the diapycnal transfers against hand-written layered box budgets.

Source of the rule: the layered box budget (Wunsch 1996, *The Ocean Circulation
Inverse Problem*, ch. 2; Ganachaud 2003, J. Geophys. Res.): transfer W_n, from
class n to class n + 1, carries k_n = (C_n + C_{n+1}) / 2, the mean of the two
class means it joins.
"""

from __future__ import annotations

import numpy as np
import pytest
from _synthetic import thermocline_section

from sectionkit.config import parse_config
from sectionkit.inverse import assemble, box_class_means, transfer_anomaly
from sectionkit.operator import CP0, RHO0
from sectionkit.study import Study


def _dia(n_class: int) -> np.ndarray:
    """Mass coefficients of n_class - 1 transfers: -1 leaving class n, +1 entering n + 1."""
    dia = np.zeros((n_class, n_class - 1))
    for n in range(n_class - 1):
        dia[n, n] = -1.0
        dia[n + 1, n] = 1.0
    return dia


def test_three_class_salt_rows_match_the_hand_check_of_the_issue():
    # hand calculation (issue 10): S = [36.5, 35.4, 35.1] g/kg, k_0 = 35.95, k_1 = 35.25;
    # W_0: class 0 gets -(35.95 - 36.5) = 0.55, class 1 gets +(35.95 - 35.4) = 0.55;
    # W_1: class 1 gets -(35.25 - 35.4) = 0.15, class 2 gets +(35.25 - 35.1) = 0.15
    dia = np.array([[-1.0, 0.0], [1.0, -1.0], [0.0, 1.0]])
    out = transfer_anomaly(dia, np.array([36.5, 35.4, 35.1]))
    np.testing.assert_allclose(out, [[0.55, 0.0], [0.55, 0.15], [0.0, 0.15]], atol=1e-12)


def _hand_budget(class_mean: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Anomaly brought into each class by the transfers, written class by class.

    Class i gains W_{i-1} of water at k_{i-1} and loses W_i of water at k_i;
    the anomaly is relative to its own mean C_i, so the class gains
    W_{i-1} (k_{i-1} - C_i) - W_i (k_i - C_i).
    """
    n_class = class_mean.size
    out = np.zeros(n_class)
    for i in range(n_class):
        if i > 0:
            k_above = (class_mean[i - 1] + class_mean[i]) / 2
            out[i] += w[i - 1] * (k_above - class_mean[i])
        if i < n_class - 1:
            k_below = (class_mean[i] + class_mean[i + 1]) / 2
            out[i] -= w[i] * (k_below - class_mean[i])
    return out


@pytest.mark.parametrize("n_class", [3, 5])
def test_salt_rows_of_transfers_equal_a_hand_written_layered_budget(n_class):
    # hand-written layered salt budget (Wunsch 1996, ch. 2); salinities and transfers
    # invented, of the size of a subtropical box (g/kg, Sv)
    s_mean = np.array([36.6, 35.9, 35.1, 34.95, 34.89])[:n_class]
    w = np.array([4.0, -2.5, 1.5, 0.7])[: n_class - 1]
    np.testing.assert_allclose(transfer_anomaly(_dia(n_class), s_mean) @ w,
                               _hand_budget(s_mean, w), atol=1e-12)


@pytest.mark.parametrize("n_class", [3, 5])
def test_heat_rows_of_transfers_equal_a_hand_written_layered_budget(n_class):
    # the same budget with Conservative Temperature (degC), hand-written
    ct_mean = np.array([22.0, 12.5, 4.1, 2.3, 1.2])[:n_class]
    w = np.array([3.0, 1.0, -0.8, 2.2])[: n_class - 1]
    np.testing.assert_allclose(transfer_anomaly(_dia(n_class), ct_mean) @ w,
                               _hand_budget(ct_mean, w), atol=1e-12)


def test_a_transfer_moves_its_carried_salt_from_one_class_to_the_next():
    # conservation (common practice): anomaly row + class mean x mass row is the full
    # salt a transfer moves; it leaves class n with -k_n and enters class n + 1 with +k_n,
    # and every other class sees nothing, so salt is conserved across the box
    s_mean = np.array([36.6, 35.9, 35.1, 34.95, 34.89])
    dia = _dia(5)
    full = transfer_anomaly(dia, s_mean) + s_mean[:, None] * dia
    for n in range(4):
        k = (s_mean[n] + s_mean[n + 1]) / 2
        expected = np.zeros(5)
        expected[n], expected[n + 1] = -k, k
        np.testing.assert_allclose(full[:, n], expected, atol=1e-12)


FACES = [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 36.9, "p_ref": 2000.0}]
NAMES = ["upper", "intermediate", "deep"]


def test_assembled_salt_and_heat_rows_hold_the_layered_budget_transfer_coefficients():
    # the assembled box system carries, in each W_n column, exactly the hand-written
    # coefficients of the layered budget (Wunsch 1996, ch. 2) built from the box's
    # class means: salt -(k_n - S_n), +(k_n - S_{n+1}); heat the same times rho0 c_p0
    config = parse_config({
        "sections": [{"name": "south", "file": "s.nc"}, {"name": "north", "file": "n.nc"}],
        "boxes": [{"name": "box", "enters": ["south"], "leaves": ["north"]}],
        "reference": {"pressure": 2000.0},
        "layers": {"interfaces": FACES, "names": NAMES},
        "inverse": {"noise_layer": [0.5, 0.5, 0.5], "conserve": ["mass", "salt", "heat"]},
    })
    sections = {"south": thermocline_section(n=6, dp=20.0, lat0=26.0, name="south"),
                "north": thermocline_section(n=6, dp=20.0, lat0=38.0, tilt=100.0,
                                             name="north")}
    study = Study.from_config(config, sections=sections)
    layout = study.layout()
    refs = study.references()
    system = assemble(study.operators, {n: r.offset for n, r in refs.items()}, study.ekman(),
                      config.effective_boxes(), config.inverse, layout, config.layer_names,
                      study.velocity_prior(layout))
    sa, _, ct, _ = box_class_means(config.effective_boxes()[0], study.operators)
    h = RHO0 * CP0 * 1e6 / 1e15  # PW per (Sv degC)
    for n in range(2):
        col = layout.diapycnal[("box", n)]
        for mean, kind, scale in ((sa, "salt", 1.0), (ct, "heat", h)):
            k = (mean[n] + mean[n + 1]) / 2
            expected = np.zeros(3)
            expected[n] = -(k - mean[n]) * scale
            expected[n + 1] = (k - mean[n + 1]) * scale
            got = [system.matrix[system.rows.index(("box", f"{kind}:{name}")), col]
                   for name in NAMES]
            # the section part of a row does not touch transfer columns
            np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-15)
