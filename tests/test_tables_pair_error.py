"""pair_adjustments.csv: the error column of a fully resolved adjustment."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import xarray as xr

from sectionkit.tables import pair_table


def test_variance_rounded_a_hair_below_zero_gives_error_zero_not_nan():
    # a fully resolved adjustment has posterior variance 0; rounding in the update
    # (prior minus explained, common practice) can leave -1e-20, whose square root is NaN
    pairs = xr.Dataset({"lon": ("pair", [10.0, 11.0]), "lat": ("pair", [40.0, 40.0]),
                        "distance": ("pair", [85e3, 85e3])})
    study = SimpleNamespace(operators={"line": SimpleNamespace(pairs=pairs, n_pair=2)},
                            sections={})
    results = SimpleNamespace(
        estimate=np.array([0.01, -0.02]),
        covariance=np.diag([-1e-20, 4e-6]),
        inverse=SimpleNamespace(resolution_diagonal=np.array([1.0, 0.5])),
        layout=SimpleNamespace(pair_slices={"line": slice(0, 2)}),
        references={"line": SimpleNamespace(kinds=["pressure", "pressure"],
                                            pressure=np.array([1000.0, 1000.0]))},
    )
    df = pair_table(study, results)
    assert df["adjustment_err_m_s"].tolist() == [0.0, 2e-3]  # sqrt(4e-6) = 2e-3 by hand
