"""The workbench's colour scale and tick values: stable while dragging, round numbers."""

from __future__ import annotations

import numpy as np
import pytest

from sectionkit.workbench.render import ColourScale


def test_colour_scale_spans_the_97th_percentile_of_speed():
    values = np.linspace(-100.0, 100.0, 2001)
    # |v| is uniform on [0, 100]: its 97th percentile is 97 (hand calculation)
    assert ColourScale().update(values, dragging=False) == pytest.approx(97.0, rel=1e-3)


def test_colour_scale_is_fixed_while_a_control_is_dragged():
    scale = ColourScale()
    first = scale.update(np.array([-10.0, 10.0]), dragging=False)
    assert scale.update(np.array([-50.0, 50.0]), dragging=True) == first
    assert scale.update(np.array([-50.0, 50.0]), dragging=False) == pytest.approx(50.0)


def test_a_locked_colour_scale_changes_only_on_request():
    scale = ColourScale()
    first = scale.update(np.array([-10.0, 10.0]), dragging=False)
    scale.locked = True
    assert scale.update(np.array([-50.0, 50.0]), dragging=False) == first
    assert scale.reset(np.array([-50.0, 50.0])) == pytest.approx(50.0)
    assert scale.update(np.array([-1.0, 1.0]), dragging=False) == pytest.approx(50.0)


def test_tick_values_are_round_numbers():
    from sectionkit.workbench.plots import nice_ticks

    np.testing.assert_allclose(nice_ticks(0.0, 2953.0), [0, 500, 1000, 1500, 2000, 2500])
    np.testing.assert_allclose(nice_ticks(-6.0, 5686.0), [0, 1000, 2000, 3000, 4000, 5000])
    np.testing.assert_allclose(nice_ticks(144.9, 182.1), [150, 160, 170, 180])
