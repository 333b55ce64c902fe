"""TEOS-10 specific volume as a compiled kernel: the 75-term polynomial in (SA, CT, p).

Specific volume of seawater from Absolute Salinity, Conservative Temperature
and sea pressure by the computationally efficient polynomial of TEOS-10:
Roquet, F., G. Madec, T. J. McDougall and P. M. Barker, 2015: Accurate
polynomial expressions for the density and specific volume of seawater using
the TEOS-10 standard. Ocean Modelling, 90, 29-43; IOC, SCOR and IAPSO, 2010:
The international thermodynamic equation of seawater - 2010, Manuals and
Guides No. 56, UNESCO. It is the expression gsw.specvol evaluates, and
gsw.rho is its reciprocal.

The polynomial is in the scaled variables

    x = sqrt(SFAC SA + OFFSET),  y = CT / 40 degC,  z = p / 10^4 dbar,

as a sum of 75 terms ``c x^i y^j z^k``. It is evaluated in
nested Horner form: in z outermost, then in y, then in x innermost, each
polynomial's constant term added last. That is the order in which the
TEOS-10 reference code (and so gsw) evaluates it, and a kernel compiled
without fast-math keeps it operation by operation (no fused multiply-add): the
results equal gsw's bit for bit on the machines checked (tests/test_eos.py
compares them over the whole oceanographic range). The per-point function is
inlined into the array kernels and its square root is the IEEE instruction,
so the compiler evaluates several points at once (SIMD), each exactly as alone.

Numerics on plain arrays only; callers (thermo, layers) own the fields.
"""

from __future__ import annotations

import numpy as np

from sectionkit.compiled import ieee_sqrt, kernel

#: Salinity scale of the polynomial, 1 / (40 g/kg uPS), (g/kg)^-1, with uPS = SSO / 35
#: (TEOS-10: Roquet et al. 2015).
SFAC = 0.0248826675584615
#: Salinity offset of the polynomial, 24 g/kg times SFAC (TEOS-10: Roquet et al. 2015).
OFFSET = 5.971840214030754e-1
#: Conservative Temperature scale, degC^-1 (y = CT / 40 degC).
CT_SCALE = 0.025
#: Pressure scale, dbar^-1 (z = p / 10^4 dbar).
P_SCALE = 1e-4

# Coefficients of the 75-term specific volume polynomial, m^3 kg^-1: the published TEOS-10
# values (Roquet et al. 2015, Ocean Modelling 90, appendix; IOC, SCOR and IAPSO 2010).
# _Z<k>[j] holds the coefficients of x^0, x^1, ... of the term in y^j z^k.
_Z0 = (
    (1.0769995862e-3, -3.1038981976e-4, 6.6928067038e-4, -8.5047933937e-4,
     5.8086069943e-4, -2.1092370507e-4, 3.1932457305e-5),
    (-1.5649734675e-5, 3.5009599764e-5, -4.3592678561e-5, 3.4532461828e-5,
     -1.1959409788e-5, 1.3864594581e-6),
    (2.7762106484e-5, -3.7435842344e-5, 3.5907822760e-5, -1.8698584187e-5,
     3.8595339244e-6),
    (-1.6521159259e-5, 2.4141479483e-5, -1.4353633048e-5, 2.2863324556e-6),
    (6.9111322702e-6, -8.7595873154e-6, 4.3703680598e-6),
    (-8.0539615540e-7, -3.3052758900e-7),
    (2.0543094268e-7,),
)
_Z1 = (
    (-6.0799143809e-5, 2.4262468747e-5, -3.4792460974e-5, 3.7470777305e-5,
     -1.7322218612e-5, 3.0927427253e-6),
    (1.8505765429e-5, -9.5677088156e-6, 1.1100834765e-5, -9.8447117844e-6,
     2.5909225260e-6),
    (-1.1716606853e-5, -2.3678308361e-7, 2.9283346295e-6, -4.8826139200e-7),
    (7.9279656173e-6, -3.4558773655e-6, 3.1655306078e-7),
    (-3.4102187482e-6, 1.2956717783e-6),
    (5.0736766814e-7,),
)
_Z2 = (
    (9.9856169219e-6, -5.8484432984e-7, -4.8122251597e-6, 4.9263106998e-6,
     -1.7811974727e-6),
    (-1.1736386731e-6, -5.5699154557e-6, 5.4620748834e-6, -1.3544185627e-6),
    (2.1305028740e-6, 3.9137387080e-7, -6.5731104067e-7),
    (-4.6132540037e-7, 7.7618888092e-9),
    (-6.3352916514e-8,),
)
_Z3 = (
    (-1.1309361437e-6, 3.6310188515e-7, 1.6746303780e-8),
    (-3.6527006553e-7, -2.7295696237e-7),
    (2.8695905159e-7,),
)
_Z4 = (
    (1.0531153080e-7, -1.1147125423e-7),
    (3.1454099902e-7,),
)
_Z5 = ((-1.2647261286e-8,),)
_Z6 = ((1.9613503930e-9,),)
_TERMS = (_Z0, _Z1, _Z2, _Z3, _Z4, _Z5, _Z6)


#: Number of terms (75).
N_TERMS = sum(len(by_x) for by_y in _TERMS for by_x in by_y)


@kernel(inline=True)
def _in_x(x: float, c: tuple) -> float:
    """Horner's rule in x for the coefficients ``c`` of x^0, x^1, ...: c[0] + x (c[1] + ...)."""
    value = c[len(c) - 1]
    for i in range(len(c) - 2, -1, -1):
        value = c[i] + x * value
    return value


@kernel(inline=True)
def specvol_point(sa: float, ct: float, p: float) -> float:
    """Specific volume of one parcel, m^3 kg^-1 (TEOS-10 75-term polynomial, gsw's order).

    Parameters
    ----------
    sa : float
        Absolute Salinity, g/kg.
    ct : float
        Conservative Temperature, degC.
    p : float
        Sea pressure, dbar.

    Returns
    -------
    float
        Specific volume, m^3 kg^-1; NaN where any input is NaN or SA is below
        -OFFSET / SFAC (the square root of a negative number), as gsw.
    """
    x = ieee_sqrt(SFAC * sa + OFFSET)
    y = ct * CT_SCALE
    z = p * P_SCALE
    # the coefficient of each z^k, nested in y (Horner), each y^j's coefficient nested in x
    z0 = _in_x(x, _Z0[0]) + y * (_in_x(x, _Z0[1]) + y * (_in_x(x, _Z0[2]) + y * (
        _in_x(x, _Z0[3]) + y * (_in_x(x, _Z0[4]) + y * (_in_x(x, _Z0[5])
                                                       + y * _in_x(x, _Z0[6]))))))
    z1 = _in_x(x, _Z1[0]) + y * (_in_x(x, _Z1[1]) + y * (_in_x(x, _Z1[2]) + y * (
        _in_x(x, _Z1[3]) + y * (_in_x(x, _Z1[4]) + y * _in_x(x, _Z1[5])))))
    z2 = _in_x(x, _Z2[0]) + y * (_in_x(x, _Z2[1]) + y * (_in_x(x, _Z2[2]) + y * (
        _in_x(x, _Z2[3]) + y * _in_x(x, _Z2[4]))))
    z3 = _in_x(x, _Z3[0]) + y * (_in_x(x, _Z3[1]) + y * _in_x(x, _Z3[2]))
    z4 = _in_x(x, _Z4[0]) + y * _in_x(x, _Z4[1])
    z5 = _in_x(x, _Z5[0])
    z6 = _in_x(x, _Z6[0])
    return z0 + z * (z1 + z * (z2 + z * (z3 + z * (z4 + z * (z5 + z * z6)))))


@kernel
def _specvol_rows(sa: np.ndarray, ct: np.ndarray, p: np.ndarray, out: np.ndarray) -> None:
    """Specific volume of every (row, column), ``p`` per column."""
    for r in range(sa.shape[0]):
        for c in range(sa.shape[1]):
            out[r, c] = specvol_point(sa[r, c], ct[r, c], p[c])


@kernel
def _density_rows(sa: np.ndarray, ct: np.ndarray, p: np.ndarray, offset: float,
                  out: np.ndarray) -> None:
    """``1 / v - offset`` of every (row, column), ``p`` per column (gsw.rho's reciprocal)."""
    for r in range(sa.shape[0]):
        for c in range(sa.shape[1]):
            out[r, c] = 1.0 / specvol_point(sa[r, c], ct[r, c], p[c]) - offset


def _evaluate(sa: np.ndarray, ct: np.ndarray, p: np.ndarray | float, density: bool,
              offset: float) -> np.ndarray:
    """Broadcast SA, CT and p, and run the kernel with p along the trailing axes."""
    sa = np.asarray(sa, dtype=float)
    ct = np.asarray(ct, dtype=float)
    p = np.asarray(p, dtype=float)
    shape = np.broadcast_shapes(sa.shape, ct.shape, p.shape)
    # p's axes are the trailing axes of the result (numpy's broadcasting), or the last one
    trailing = shape[len(shape) - max(p.ndim, 1):] if shape else ()
    n = int(np.prod(trailing))
    if n == 0 or 0 in shape:
        return np.empty(shape)
    p = np.ascontiguousarray(np.broadcast_to(p, trailing)).reshape(n)
    sa, ct = (np.ascontiguousarray(a if a.shape == shape else np.broadcast_to(a, shape))
              .reshape(-1, n) for a in (sa, ct))
    out = np.empty(sa.shape)
    if density:
        _density_rows(sa, ct, p, offset, out)
    else:
        _specvol_rows(sa, ct, p, out)
    return out.reshape(shape)


def specific_volume(sa: np.ndarray, ct: np.ndarray, p: np.ndarray | float) -> np.ndarray:
    """Specific volume of seawater (TEOS-10 75-term polynomial; gsw.specvol).

    Parameters
    ----------
    sa : ndarray (..., level)
        Absolute Salinity, g/kg.
    ct : ndarray (..., level)
        Conservative Temperature, degC (broadcast with ``sa``).
    p : float or ndarray
        Sea pressure, dbar (broadcast with ``sa``: one value, or one per
        position along the trailing axes).

    Returns
    -------
    ndarray (..., level)
        Specific volume, m^3 kg^-1; NaN where an input is NaN.
    """
    return _evaluate(sa, ct, p, False, 0.0)


def density_anomaly(sa: np.ndarray, ct: np.ndarray, p: np.ndarray | float,
                    offset: float = 1000.0) -> np.ndarray:
    """Density minus ``offset`` as the reciprocal of the specific volume (gsw.rho - offset).

    At a reference pressure this is potential density anomaly (``p`` = p_ref).

    Parameters
    ----------
    sa : ndarray (..., level)
        Absolute Salinity, g/kg.
    ct : ndarray (..., level)
        Conservative Temperature, degC (broadcast with ``sa``).
    p : float or ndarray
        Sea pressure or reference pressure, dbar (broadcast with ``sa``: one
        value, or one per position along the trailing axes).
    offset : float
        Subtracted from the density, kg m^-3 (0 for density itself).

    Returns
    -------
    ndarray (..., level)
        1 / specific volume - offset, kg m^-3; NaN where an input is NaN.
    """
    return _evaluate(sa, ct, p, True, float(offset))
