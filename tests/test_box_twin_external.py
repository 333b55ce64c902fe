"""A mass-and-salt box twin whose truth and Gauss–Markov solution are built here, not by the engine.

Everything the engine computes is rebuilt in this file with gsw and numpy only:
dynamic height (gsw.geo_strf_dyn_height), geostrophic velocity v = dPsi / (f L)
(DESIGN.md §4, as gsw.geostrophic_velocity), pair widths (gsw.distance), depths
(gsw.z_from_p), density (gsw.rho), Preformed Salinity (gsw.Sstar_from_SA), class
membership by the pair-mean potential density at each interface's own reference
pressure, and the class integrals (sub-sampled midpoint rule on the linear
interpolants, not the engine's fractional-cell weights). The box budget is the
layered model (Wunsch 1996, *The Ocean Circulation Inverse Problem*, ch. 2;
Ganachaud 2003, J. Geophys. Res.): per class, mass inflow + known inflow +
W_{i-1} - W_i = 0, and salt-anomaly inflow relative to the box-class mean plus the
transfers carrying the mean of their two classes = 0. The estimate is the
Gauss–Markov solution written out (Wunsch 1996, ch. 3).

A known 6 Sv inflow of upper water and none leaving forces the box to convert
several Sv from the upper to the deeper classes, so the transfers are large.
"""

from __future__ import annotations

import gsw
import numpy as np
import pytest
from _synthetic import canonical_section

from sectionkit.config import parse_config
from sectionkit.study import Study
from sectionkit.tables import unknowns_table

RHO0 = 1025.0  # kg m^-3 (DESIGN.md §4)
DP = 20.0
P = np.arange(0.0, 3000.0 + DP / 2, DP)
FACES = ((26.6, 0.0), (36.6, 2000.0))  # (sigma, p_ref)
NAMES = ["upper", "middle", "deep"]
LINES = {  # name: (n stations, latitude, thermocline tilt m, spice contrast g/kg)
    "south": (9, 30.0, 200.0, 1.2),
    "north": (8, 31.0, 200.0, 0.6),
}
# known flows: 6 Sv of upper water enter through a strait, 6 Sv of deep water leave
# through an overflow: the box must convert them across both interfaces
KNOWN = {"upper": 6.0, "deep": -6.0}
KNOWN_NOISE = 0.1
PRIOR_V, PRIOR_W = 0.1, 4.0
NOISE_MASS, NOISE_TOTAL = [0.3, 0.3, 0.3], 0.3
NOISE_SALT = [0.1, 0.05, 0.03]
SUB = 40  # sub-samples per grid segment


def _fields(n, tilt, contrast):
    """Thermocline deepening eastward, and an eastward salty and warm (spicy) upper ocean,
    density-compensated to first order so salt anomalies have leverage on the salt rows."""
    x = np.linspace(0.0, 1.0, n)[:, None]
    spice = contrast * x * np.exp(-P / 600.0)
    ct = 2.0 + 18.0 * np.exp(-P / (700.0 + tilt * x)) + 3.5 * spice
    sa = 34.9 + 1.2 * np.exp(-P / 900.0) + spice
    return sa, ct


def _positions(n, lat):
    return np.linspace(-40.0, -32.0, n), np.full(n, lat)


def _section_integrals(name):
    """Per pair and class: area (m^2), relative mass and salt transports (m^3/s, g/kg m^3/s),
    and area integrals of S* (for class means); own geostrophy and own class split."""
    n, lat0, tilt, contrast = LINES[name]
    sa, ct = _fields(n, tilt, contrast)
    lon, lat = _positions(n, lat0)
    psi = gsw.geo_strf_dyn_height(sa.T, ct.T, P, p_ref=0.0, axis=0, max_dp=1.0).T  # m^2 s^-2
    width = gsw.distance(lon, lat)  # m
    lat_mid = 0.5 * (lat[:-1] + lat[1:])
    f = gsw.f(lat_mid)
    v = (psi[1:] - psi[:-1]) / (f * width)[:, None]  # relative to the surface
    v = v - v[:, -1:]  # level of no motion at the flat bottom, 3000 dbar
    pm = lambda a: 0.5 * (a[1:] + a[:-1])  # noqa: E731  pair mean of station values
    rho = pm(gsw.rho(sa, ct, P))
    sstar = pm(gsw.Sstar_from_SA(sa, P, lon[:, None], lat[:, None]))
    sig = [pm(gsw.rho(sa, ct, pr) - 1000.0) for _, pr in FACES]
    n_pair = n - 1
    out = {k: np.zeros((n_pair, 3)) for k in ("area", "mass", "salt", "s_area")}
    t = (np.arange(SUB) + 0.5) / SUB
    for j in range(n_pair):
        z = -gsw.z_from_p(P, lat_mid[j])
        dz = np.diff(z)

        def sub(a, j=j):  # linear interpolant at the sub-sample midpoints, (segment, SUB)
            return a[j, :-1, None] + t[None, :] * (a[j, 1:] - a[j, :-1])[:, None]

        cls = sum((sub(s) > value).astype(int) for s, (value, _) in zip(sig, FACES, strict=True))
        h = np.broadcast_to(dz[:, None] / SUB, cls.shape)
        r, s, vv = sub(rho), sub(sstar), sub(v)
        for i in range(3):
            m = cls == i
            out["area"][j, i] = width[j] * h[m].sum()
            out["mass"][j, i] = width[j] * (h * r * vv / RHO0)[m].sum()
            out["salt"][j, i] = width[j] * (h * r * s * vv / RHO0)[m].sum()
            out["s_area"][j, i] = width[j] * (h * s)[m].sum()
        # the reference velocity moves rho/rho0 of mass per unit area
        out.setdefault("mass_area", np.zeros((n_pair, 3)))
        out.setdefault("salt_area", np.zeros((n_pair, 3)))
        for i in range(3):
            m = cls == i
            out["mass_area"][j, i] = width[j] * (h * r / RHO0)[m].sum()
            out["salt_area"][j, i] = width[j] * (h * r * s / RHO0)[m].sum()
    return out


def _own_system():
    """E, initial, noise, prior of the layered box written out here (Sv, Sv g/kg)."""
    parts = {name: _section_integrals(name) for name in LINES}
    sign = {"south": 1.0, "north": -1.0}  # south enters, north leaves
    s_area = sum(p["s_area"].sum(axis=0) for p in parts.values())
    area = sum(p["area"].sum(axis=0) for p in parts.values())
    s_mean = s_area / area  # box-class mean S*
    n_b = sum(p["area"].shape[0] for p in parts.values())
    e = np.zeros((7, n_b + 2))
    initial = np.zeros(7)
    col = 0
    for name, p in parts.items():
        k = p["area"].shape[0]
        for i in range(3):
            e[i, col:col + k] = sign[name] * p["mass_area"][:, i] / 1e6
            e[4 + i, col:col + k] = sign[name] * (p["salt_area"][:, i]
                                                  - s_mean[i] * p["mass_area"][:, i]) / 1e6
            initial[i] += sign[name] * p["mass"][:, i].sum() / 1e6
            initial[4 + i] += sign[name] * (p["salt"][:, i].sum()
                                            - s_mean[i] * p["mass"][:, i].sum()) / 1e6
        col += k
    e[3, :n_b] = e[:3, :n_b].sum(axis=0)
    known = np.array([KNOWN.get(name, 0.0) for name in NAMES])
    initial[:3] += known
    initial[3] = initial[:3].sum()
    # transfers: W_n leaves class n, enters n + 1 (mass); in salt-anomaly rows it carries
    # k_n = (S_n + S_{n+1}) / 2, written out per class
    for n in range(2):
        k = 0.5 * (s_mean[n] + s_mean[n + 1])
        e[n, n_b + n], e[n + 1, n_b + n] = -1.0, 1.0
        e[4 + n, n_b + n] = -(k - s_mean[n])
        e[4 + n + 1, n_b + n] = k - s_mean[n + 1]
    known_var = np.array([KNOWN_NOISE**2 if name in KNOWN else 0.0 for name in NAMES])
    noise = np.sqrt(np.array([*(np.square(NOISE_MASS) + known_var),
                              NOISE_TOTAL**2 + known_var.sum(), *np.square(NOISE_SALT)]))
    prior = np.array([PRIOR_V] * n_b + [PRIOR_W] * 2)
    return e, initial, noise, prior, n_b


def _truth(e, initial, prior):
    """The ocean: reference velocities and transfers, minimum norm in the prior's metric,
    that close every mass and salt row exactly (the truth conserves mass and salt)."""
    r = np.diag(prior**2)
    lam, *_ = np.linalg.lstsq(e @ r @ e.T, -initial, rcond=1e-12)
    return r @ e.T @ lam


def _engine_config():
    return parse_config({
        "sections": [{"name": "south", "file": "s.nc"},
                     {"name": "north", "file": "n.nc", "into_box": False}],
        "reference": {"pressure": 3000.0},
        "layers": {"interfaces": [{"sigma": s, "p_ref": pr} for s, pr in FACES],
                   "names": NAMES},
        "inverse": {"conserve": ["mass", "salt"], "prior_velocity": PRIOR_V,
                    "prior_diapycnal": PRIOR_W, "prior_ekman": 0.0,
                    "noise_layer": NOISE_MASS, "noise_total": NOISE_TOTAL,
                    "noise_salt": NOISE_SALT,
                    "known": [{"name": f"known_{layer}", "transport": value,
                               "noise": KNOWN_NOISE, "layer": layer}
                              for layer, value in KNOWN.items()]},
    })


def _sections():
    out = {}
    for name, (n, lat0, tilt, contrast) in LINES.items():
        sa, ct = _fields(n, tilt, contrast)
        lon, lat = _positions(n, lat0)
        out[name] = canonical_section(sa, ct, P, lon, lat, np.full(n, 3000.0), name=name)
    return out


def _gauss_markov(e, y, noise, prior):
    """Wunsch 1996, ch. 3: x = R E^T (E R E^T + N)^-1 y, P = R - R E^T (E R E^T + N)^-1 E R."""
    r = np.diag(prior**2)
    c = e @ r @ e.T + np.diag(noise**2)
    return r @ e.T @ np.linalg.solve(c, y), r - r @ e.T @ np.linalg.solve(c, e @ r)


@pytest.fixture(scope="module")
def twin():
    e, initial, noise, prior, n_b = _own_system()
    x_true = _truth(e, initial, prior)
    # from the level of no motion (x = 0) the box is out of balance by -E x_true
    x_own, p_own = _gauss_markov(e, -initial, noise, prior)
    study = Study.from_config(_engine_config(), sections=_sections())
    results = study.solve()
    return dict(e=e, initial=initial, x_true=x_true, x_own=x_own, p_own=p_own,
                study=study, results=results, n_b=n_b)


def test_the_truth_conserves_mass_and_salt_with_several_sverdrups_converted(twin):
    np.testing.assert_allclose(twin["initial"] + twin["e"] @ twin["x_true"], 0.0, atol=1e-9)
    w_true = twin["x_true"][twin["n_b"]:]
    assert w_true[0] > 4.0  # several Sv from the upper to the middle class


def test_engine_box_rows_match_the_rows_written_out_here(twin):
    system = twin["results"].inverse.system
    # the difference is the engine's trapezoid of nodal products against the midpoint
    # rule of the linear interpolants here, and its fractional cells against sub-samples
    # (measured: 2e-3 Sv or Sv g/kg in the data, 2e-3 of a row's largest coefficient)
    np.testing.assert_allclose(system.initial, twin["initial"], atol=5e-3)
    scale = np.abs(twin["e"]).max(axis=1, keepdims=True)
    np.testing.assert_allclose(system.matrix / scale, twin["e"] / scale, atol=5e-3)


def test_engine_estimate_matches_the_written_out_gauss_markov_solution(twin):
    results = twin["results"]
    sd_own = np.sqrt(np.diag(twin["p_own"]))
    diff = (results.estimate - twin["x_own"]) / sd_own
    # transfers and pair adjustments agree to a small fraction of their posterior std
    assert np.max(np.abs(diff)) < 0.03, np.max(np.abs(diff))  # measured 0.012
    table = unknowns_table(twin["study"], results)
    np.testing.assert_allclose(table["posterior_std"], sd_own, rtol=0.02)


def test_engine_transfers_recover_the_truth_within_their_posterior_std(twin):
    table = unknowns_table(twin["study"], twin["results"])
    w = table[table["kind"] == "diapycnal_transfer"]
    assert list(w["unknown"]) == ["box:W0", "box:W1"]
    w_true = twin["x_true"][twin["n_b"]:]
    assert np.all(np.abs(w["estimate"] - w_true) < 2 * w["posterior_std"])
