"""Compiled inner loops of the density classes: deciding densities, class levels, class integrals.

Each kernel is one pass over ``(row, level)`` arrays, a row being one pair
(or one station) of one leading index: callers reshape ``(..., pair, level)``
to ``(row, level)``. The arithmetic of every grid point is that of the numpy
formulas these kernels replaced, in the same order (see the callers,
:func:`sectionkit.layers.deciding_densities`,
:func:`sectionkit.layers.class_levels` and
:func:`sectionkit.operator._class_integrals`); the only difference is the
order of the sums of :func:`class_integral_pass` (level by level instead of
numpy's pairwise sums), which changes results by round-off only.

The TEOS-10 densities themselves are not computed here: callers evaluate
them with gsw on the points these kernels select.
"""

from __future__ import annotations

import math

import numpy as np

from sectionkit.compiled import kernel


# ---------------------------------------------------------------- deciding densities
@kernel
def block_bounds(sa, ct, stride, n_blk, sa_lo, sa_hi, ct_lo, ct_hi, dsa, dct, rounding):
    """How far potential density can move from its value at the top of each block.

    Parameters
    ----------
    sa, ct : ndarray (row, level)
        Absolute Salinity (g/kg) and Conservative Temperature (degC) of each
        station; NaN below its bottom.
    stride : int
        Levels per block; block ``b`` spans levels ``b stride`` to
        ``(b + 1) stride``, both included.
    n_blk : int
        Number of blocks, ``n_blk stride < level``.
    sa_lo, sa_hi, ct_lo, ct_hi : float
        Range of SA (g/kg) and CT (degC) where the derivative bounds hold.
    dsa, dct : float
        Bounds of |d rho / d SA| (kg m^-3 per g/kg) and |d rho / d CT| (kg m^-3 per degC).
    rounding : float
        Round-off allowance, kg m^-3.

    Returns
    -------
    reach : ndarray (row, block)
        ``dsa max|SA - SA_top| + dct max|CT - CT_top| + rounding``, kg m^-3,
        where ``full``; NaN elsewhere.
    full : ndarray (row, block) of bool
        Data on every level of the block, all of it inside the range.
    empty : ndarray (row, block) of bool
        No SA on any level of the block (below the station's bottom).
    top_sa, top_ct : ndarray (row, block)
        SA (g/kg) and CT (degC) at the top level of each block (contiguous: gsw
        evaluates them faster than a strided view).
    """
    n_row = sa.shape[0]
    reach = np.empty((n_row, n_blk))
    tops_sa = np.empty((n_row, n_blk))
    tops_ct = np.empty((n_row, n_blk))
    full = np.zeros((n_row, n_blk), dtype=np.bool_)
    empty = np.zeros((n_row, n_blk), dtype=np.bool_)
    for r in range(n_row):
        for b in range(n_blk):
            k0 = b * stride
            top_sa = sa[r, k0]
            top_ct = ct[r, k0]
            tops_sa[r, b] = top_sa
            tops_ct[r, b] = top_ct
            sa_min = np.inf
            sa_max = -np.inf
            ct_min = np.inf
            ct_max = -np.inf
            gap = False  # a missing SA or CT somewhere in the block
            data = False  # SA somewhere in the block
            for k in range(k0, k0 + stride + 1):
                s = sa[r, k]
                c = ct[r, k]
                if math.isnan(s):
                    gap = True
                else:
                    data = True
                    sa_min = min(sa_min, s)
                    sa_max = max(sa_max, s)
                if math.isnan(c):
                    gap = True
                else:
                    ct_min = min(ct_min, c)
                    ct_max = max(ct_max, c)
            empty[r, b] = not data
            reach[r, b] = np.nan
            if gap or not (sa_min >= sa_lo and sa_max <= sa_hi and ct_min >= ct_lo
                           and ct_max <= ct_hi):
                continue
            value = (dsa * max(sa_max - top_sa, top_sa - sa_min)
                     + dct * max(ct_max - top_ct, top_ct - ct_min) + rounding)
            if math.isfinite(value):
                reach[r, b] = value
                full[r, b] = True
    return reach, full, empty, tops_sa, tops_ct


@kernel
def _pair_value(a, b):
    """Pair mean of two station values; the one with data where the other has none."""
    if math.isnan(b):
        return a
    if math.isnan(a):
        return b
    return (a + b) * 0.5


@kernel
def decide_blocks(sig_top, reach, full, empty, values, bounded, stride, out):
    """Pair blocks that every interface leaves on one side, filled with their top's pair mean.

    Parameters
    ----------
    sig_top : ndarray (lead, station, block)
        Potential density anomaly at the top level of each block, kg m^-3.
    reach, full, empty : ndarray (lead, station, block)
        From :func:`block_bounds`.
    values : ndarray (interface,)
        Interface values at this reference pressure, kg m^-3.
    bounded : bool
        The reference pressure lies where the derivative bounds hold; if not,
        every block is undecided.
    stride : int
        Levels per block.
    out : ndarray (lead, pair, level)
        Receives, on every level of each decided pair block, the pair mean of
        the top values (written in place).

    Returns
    -------
    undecided : ndarray (lead, pair, block) of bool
        Pair blocks whose density must be evaluated on every level.
    need : ndarray (lead, station, block) of bool
        Station blocks those pair blocks use.
    """
    n_lead, n_st, n_blk = sig_top.shape
    undecided = np.zeros((n_lead, n_st - 1, n_blk), dtype=np.bool_)
    need = np.zeros((n_lead, n_st, n_blk), dtype=np.bool_)
    for m in range(n_lead):
        for j in range(n_st - 1):
            for b in range(n_blk):
                emp_a = empty[m, j, b]
                emp_b = empty[m, j + 1, b]
                exact = True
                if bounded:
                    lo_a = sig_top[m, j, b] - reach[m, j, b] if full[m, j, b] else np.nan
                    hi_a = sig_top[m, j, b] + reach[m, j, b] if full[m, j, b] else np.nan
                    lo_b = sig_top[m, j + 1, b] - reach[m, j + 1, b] if full[m, j + 1, b] \
                        else np.nan
                    hi_b = sig_top[m, j + 1, b] + reach[m, j + 1, b] if full[m, j + 1, b] \
                        else np.nan
                    if emp_a:
                        lo, hi = lo_b, hi_b
                    elif emp_b:
                        lo, hi = lo_a, hi_a
                    else:
                        lo, hi = 0.5 * (lo_a + lo_b), 0.5 * (hi_a + hi_b)
                    sides = True
                    for v in values:
                        sides = sides and (lo > v or hi <= v)
                    exact = not (sides or (emp_a and emp_b))
                if exact:
                    undecided[m, j, b] = True
                    need[m, j, b] = True
                    need[m, j + 1, b] = True
                else:
                    value = _pair_value(sig_top[m, j, b], sig_top[m, j + 1, b])
                    for k in range(b * stride, (b + 1) * stride):
                        out[m, j, k] = value
    return undecided, need


@kernel
def gather_blocks(sa, ct, need, stride):
    """SA and CT of the station blocks in ``need``, one row each.

    Parameters
    ----------
    sa, ct : ndarray (lead, station, level)
        g/kg and degC.
    need : ndarray (lead, station, block) of bool
        Station blocks to gather.
    stride : int
        Levels per block.

    Returns
    -------
    slot : ndarray (lead, station, block) of int
        Row of each gathered block (-1 where not gathered).
    block_sa, block_ct : ndarray (gathered, stride)
        Their SA (g/kg) and CT (degC).
    """
    n_lead, n_st, n_blk = need.shape
    slot = np.full((n_lead, n_st, n_blk), -1, dtype=np.int64)
    n = 0
    for m in range(n_lead):
        for s in range(n_st):
            for b in range(n_blk):
                if need[m, s, b]:
                    slot[m, s, b] = n
                    n += 1
    block_sa = np.empty((n, stride))
    block_ct = np.empty((n, stride))
    for m in range(n_lead):
        for s in range(n_st):
            for b in range(n_blk):
                i = slot[m, s, b]
                if i >= 0:
                    for k in range(stride):
                        block_sa[i, k] = sa[m, s, b * stride + k]
                        block_ct[i, k] = ct[m, s, b * stride + k]
    return slot, block_sa, block_ct


@kernel
def scatter_blocks(block_sigma, slot, undecided, stride, out):
    """Pair means of the exact station-block densities into the undecided pair blocks.

    Parameters
    ----------
    block_sigma : ndarray (gathered, stride)
        Potential density anomaly of the gathered station blocks, kg m^-3.
    slot : ndarray (lead, station, block) of int
        From :func:`gather_blocks`.
    undecided : ndarray (lead, pair, block) of bool
        From :func:`decide_blocks`.
    stride : int
        Levels per block.
    out : ndarray (lead, pair, level)
        Written in place on the levels of the undecided pair blocks, kg m^-3.
    """
    n_lead, n_pair, n_blk = undecided.shape
    for m in range(n_lead):
        for j in range(n_pair):
            for b in range(n_blk):
                if undecided[m, j, b]:
                    ia = slot[m, j, b]
                    ib = slot[m, j + 1, b]
                    for k in range(stride):
                        out[m, j, b * stride + k] = _pair_value(block_sigma[ia, k],
                                                                block_sigma[ib, k])


# ---------------------------------------------------------------- class levels
#: Most interfaces :func:`class_level_pass` takes (one bit of an int64 each).
MAX_INTERFACES = 62


@kernel
def class_level_pass(faces, values, thickness, width, tail, use_tail, n_class, level_class,
                     level_weight, column, crossed):
    """Class, depth weight and full-column weight of every level, and the crossed cells.

    Parameters
    ----------
    faces : tuple of ndarray (row, level)
        Pair-mean potential density anomaly at each interface's reference
        pressure, kg m^-3; NaN (in the first) where a level has no data.
        At most ``MAX_INTERFACES``.
    values : ndarray (interface,)
        Interface values, kg m^-3.
    thickness, width : ndarray (trow, level - 1)
        Segment thickness (m) and width fraction (1); row ``r`` uses row
        ``r % trow`` (a table of pairs shared by the leading indices).
    tail : ndarray (row,)
        Thickness below the last level with data, m.
    use_tail : bool
        Add ``tail`` to that level.
    n_class : int
        Number of classes, ``interface + 1``.
    level_class : ndarray (row, level) of int8
        Receives the number of interfaces each level is denser than;
        ``n_class`` where it has no data.
    level_weight : ndarray (row, level)
        Receives the half-cell weights (m) of the segments no interface
        crosses, and the tail.
    column : ndarray (row, level)
        Receives the half-cell weights (m) of every segment, and the tail.
    crossed : ndarray (row, level - 1) of bool
        Receives: the segment has data at both ends and an interface crosses it.

    The outputs are the caller's (numpy's allocator backs large arrays with
    huge pages where the system allows: far fewer page faults than fresh
    pages allocated in the kernel).
    """
    n_if = len(faces)
    n_row, n_lev = faces[0].shape
    t_rows = thickness.shape[0]
    w_rows = width.shape[0]
    masks = np.empty(n_lev, dtype=np.int64)  # bit n: denser than interface n
    counts = np.empty(n_lev, dtype=np.int8)  # interfaces denser than
    for r in range(n_row):
        tr = r % t_rows
        wr = r % w_rows
        masks[:] = 0
        counts[:] = 0
        for n in range(n_if):  # one interface at a time: a plain loop over the row
            face = faces[n][r]
            value = values[n]
            for k in range(n_lev):
                above = face[k] > value
                masks[k] |= np.int64(above) << n
                counts[k] += np.int8(above)
        first = faces[0][r]
        last = -1
        prev_finite = False
        for k in range(n_lev):
            finite = math.isfinite(first[k])
            mask = masks[k]
            level_class[r, k] = counts[k] if finite else n_class
            level_weight[r, k] = 0.0
            column[r, k] = 0.0
            if k > 0:
                crossed[r, k - 1] = False
            if k > 0 and finite and prev_finite:  # segment k - 1 has data at both ends
                half = 0.5 * (thickness[tr, k - 1] * width[wr, k - 1])
                column[r, k - 1] += half
                column[r, k] = half
                if mask == masks[k - 1]:
                    level_weight[r, k - 1] += half
                    level_weight[r, k] = half
                else:
                    crossed[r, k - 1] = True
            if finite:
                last = k
            prev_finite = finite
        if use_tail and last >= 0:
            level_weight[r, last] += tail[r]
            column[r, last] += tail[r]


@kernel
def split_cells(faces, values, thickness, width, crossed_row, crossed_seg, n_class):
    """Weights of each class at both ends of each crossed cell (exact for linear fields).

    Within a cell the densities are linear in the fraction ``t`` of the cell;
    the cell is cut at every interface crossing, and the sub-interval
    ``[a, b]`` of class ``i`` gives the cell's two levels the weights
    ``(b - a) - (b^2 - a^2) / 2`` and ``(b^2 - a^2) / 2`` times the cell's
    thickness times width.

    Parameters
    ----------
    faces, values, thickness, width, n_class
        As for :func:`class_level_pass`.
    crossed_row, crossed_seg : ndarray (crossed,) of int
        The crossed cells, from :func:`class_level_pass`.

    Returns
    -------
    upper, lower : ndarray (crossed, class)
        Weight of each class at the cell's upper (``seg``) and lower
        (``seg + 1``) level, m.
    """
    n_if = len(faces)
    n_c = crossed_row.size
    t_rows = thickness.shape[0]
    w_rows = width.shape[0]
    upper = np.empty((n_c, n_class))
    lower = np.empty((n_c, n_class))
    c0 = np.empty(n_if)
    c1 = np.empty(n_if)
    bp = np.empty(n_if + 2)
    alpha = np.empty(n_class)
    beta = np.empty(n_class)
    for i in range(n_c):
        r = crossed_row[i]
        k = crossed_seg[i]
        w = thickness[r % t_rows, k] * width[r % w_rows, k]
        bp[0] = 0.0
        for n in range(n_if):
            c0[n] = faces[n][r, k] - values[n]
            c1[n] = faces[n][r, k + 1] - values[n]
            t = c0[n] / (c0[n] - c1[n]) if (c0[n] > 0) != (c1[n] > 0) else 0.0
            if t < 0.0:  # clipped to [0, 1]; NaN stays NaN (sorted last, as numpy does)
                t = 0.0
            elif t > 1.0:
                t = 1.0
            bp[n + 1] = t
        bp[n_if + 1] = 1.0
        for n in range(1, n_if + 2):  # insertion sort, NaN last
            x = bp[n]
            m = n - 1
            while m >= 0 and (bp[m] > x or (math.isnan(bp[m]) and not math.isnan(x))):
                bp[m + 1] = bp[m]
                m -= 1
            bp[m + 1] = x
        alpha[:] = 0.0
        beta[:] = 0.0
        for s in range(n_if + 1):
            a = bp[s]
            b = bp[s + 1]
            tm = 0.5 * (a + b)
            cls = 0
            for n in range(n_if):
                if c0[n] + tm * (c1[n] - c0[n]) > 0:
                    cls += 1
            alpha[cls] += b - a
            beta[cls] += 0.5 * (b * b - a * a)
        for c in range(n_class):
            upper[i, c] = (alpha[c] - beta[c]) * w
            lower[i, c] = beta[c] * w
    return upper, lower


# ---------------------------------------------------------------- class integrals
#: Fields of :func:`class_integral_pass`, in order.
INTEGRAL_FIELDS = ("v", "v m", "v m S", "v h", "r", "r m", "r m S", "r h",
                   "1", "S", "S^2", "CT", "CT^2")


@kernel
def class_integral_pass(level_class, level_weight, v, response, rho, salinity, ct,
                        split_row, split_class, split_level, split_weight, n_class, rho0, cp0):
    """Depth integrals over every class of the 13 fields of the operator, per row.

    Fields (``INTEGRAL_FIELDS``): with ``m = rho / rho0`` and
    ``h = rho cp0 CT``, ``v``, ``v m``, ``v m S``, ``v h``, the same four with
    the response ``r`` instead of ``v``, then ``1``, ``S``, ``S^2``, ``CT``,
    ``CT^2``. Each level adds ``level_weight`` times the fields to its class
    (a level where ``v``, ``r`` or ``rho`` is NaN, or of class ``n_class``,
    to none); a run of levels of one class is summed level by level, then
    added to its class; the split cells are added last, in their order.

    Parameters
    ----------
    level_class : ndarray (row, level) of int8
        Class of each level (``n_class``: none).
    level_weight : ndarray (row, level)
        Weight of each level in its class, m.
    v, response, rho, salinity, ct : ndarray (row, level)
        Velocity (m s^-1), response (1), in-situ density (kg m^-3), salinity
        (g/kg) and CT (degC).
    split_row, split_class, split_level : ndarray (split,) of int
        Row, class and level of each split-cell weight.
    split_weight : ndarray (split,)
        The weights, m.
    n_class : int
        Number of classes.
    rho0 : float
        Reference density, kg m^-3.
    cp0 : float
        Heat capacity, J kg^-1 K^-1.

    Returns
    -------
    ndarray (row, class, 13)
        Integrals, field unit times m.
    """
    n_row, n_lev = v.shape
    out = np.zeros((n_row, n_class, 13))
    acc = np.empty(13)
    for r in range(n_row):
        run = -1  # class of the run being summed (-1: none yet)
        first = True
        for k in range(n_lev + 1):
            c = n_class
            if k < n_lev:
                vv = v[r, k]
                rr = response[r, k]
                rh = rho[r, k]
                if not (math.isnan(vv) or math.isnan(rr) or math.isnan(rh)):
                    c = level_class[r, k]
            if c != run or k == n_lev:
                if 0 <= run < n_class:
                    for f in range(13):
                        out[r, run, f] += acc[f]
                run = c
                first = True
            if c >= n_class:
                continue
            tw = level_weight[r, k]
            ss = salinity[r, k]
            cc = ct[r, k]
            mass = rh / rho0
            salt = mass * ss
            heat = rh * cp0
            heat = heat * cc
            y0 = tw * vv
            y4 = tw * rr
            y9 = tw * ss
            y11 = tw * cc
            if first:
                acc[0] = y0
                acc[1] = y0 * mass
                acc[2] = y0 * salt
                acc[3] = y0 * heat
                acc[4] = y4
                acc[5] = y4 * mass
                acc[6] = y4 * salt
                acc[7] = y4 * heat
                acc[8] = tw
                acc[9] = y9
                acc[10] = y9 * ss
                acc[11] = y11
                acc[12] = y11 * cc
                first = False
            else:
                acc[0] += y0
                acc[1] += y0 * mass
                acc[2] += y0 * salt
                acc[3] += y0 * heat
                acc[4] += y4
                acc[5] += y4 * mass
                acc[6] += y4 * salt
                acc[7] += y4 * heat
                acc[8] += tw
                acc[9] += y9
                acc[10] += y9 * ss
                acc[11] += y11
                acc[12] += y11 * cc
    for i in range(split_weight.size):
        r = split_row[i]
        k = split_level[i]
        c = split_class[i]
        w = split_weight[i]
        rh = rho[r, k]
        sa = salinity[r, k]
        cc = ct[r, k]
        mm = rh / rho0
        ss = mm * sa
        hh = rh * cp0 * cc
        vv = v[r, k] * w
        rr = response[r, k] * w
        sa_w = sa * w
        ct_w = cc * w
        out[r, c, 0] += vv
        out[r, c, 1] += vv * mm
        out[r, c, 2] += vv * ss
        out[r, c, 3] += vv * hh
        out[r, c, 4] += rr
        out[r, c, 5] += rr * mm
        out[r, c, 6] += rr * ss
        out[r, c, 7] += rr * hh
        out[r, c, 8] += w
        out[r, c, 9] += sa_w
        out[r, c, 10] += sa_w * sa
        out[r, c, 11] += ct_w
        out[r, c, 12] += ct_w * cc
    return out
