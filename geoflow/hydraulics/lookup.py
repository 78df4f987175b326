"""Exact piecewise-polynomial property tables of a section (the fast evaluation path).

For a ground profile that is linear between points, every wet segment's top width and wetted
perimeter are linear in the water-surface elevation w between two consecutive ground
elevations: a segment with ends zlo < zhi is dry below zlo, wet over the width
dx (w - zlo)/(zhi - zlo) in between and fully wet above zhi; a horizontal segment switches
from dry to fully wet when w rises above it; an end wall adds its wet height w - z_end. Hence,
per subdivision s, on each interval (l_k, l_k+1] between consecutive table levels (which
contain every ground elevation):

    T_s(w) = T_s,k + t_s,k d,   P_s(w) = P_s,k + p_s,k d,   N_s(w) = N_s,k + v_s,k d

with d = w - l_k, T top width, P wetted perimeter, N = sum P_i n_i^1.5 (the numerator of the
composite n), and, since dA/dw = T and dM/dw = A for the first moment M about the surface
(Leibniz rule on A = int T dw, M = int int (w - y) dy dx),

    A_s(w) = A_s,k + T_s,k d + t_s,k d^2 / 2,   M_s(w) = M_s,k + A_s,k d + T_s,k d^2/2 + t_s,k d^3/6.

These are exact (to rounding) for any w, so the tables replace the per-segment clipping of
``geometry.wet_segments`` by one binary search and a few multiply-adds per subdivision. The
interval values are accumulated from sums of non-negative terms only (no cancellation).
Interval 0 is a dry sentinel below the thalweg; the last interval extends to +inf.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

FLAT_DZ = 1e-12  # the same threshold as geometry._segment_geometry: flatter segments switch at once


@dataclass(frozen=True, eq=False)
class LevelTable:
    """Interval coefficients of a section. ``start`` (L+1,) holds the interval starts (dry
    sentinel first); ``coef`` (8, L+1, S) holds, per subdivision, the values from the right at
    each start and slopes: planes A, T, t, N, v, P, p, M (the first five give the flow terms).
    ``to_part`` (S, 3) maps
    subdivisions to left floodplain / channel / right floodplain."""

    start: np.ndarray
    coef: np.ndarray
    to_part: np.ndarray


def _pairs(levels, z1, z2):
    """(segment, interval) pairs for every interval inside a segment's partly-wet span, and
    the interval from which each segment is fully wet (indices offset 1 by the sentinel)."""
    zlo, zhi = np.minimum(z1, z2), np.maximum(z1, z2)
    k1 = np.searchsorted(levels, zhi) + 1
    k0 = np.where(zhi - zlo <= FLAT_DZ, k1, np.searchsorted(levels, zlo) + 1)
    count = k1 - k0
    seg = np.repeat(np.arange(count.size), count)
    first = np.repeat(np.cumsum(count) - count, count)
    return seg, k0[seg] + np.arange(seg.size) - first, k1, zlo, zhi


def _accumulate(sub, nsub, nint, k, weight):
    """Sum ``weight`` (q, n) into a (q, nint, nsub) array at rows ``k``, columns ``sub``."""
    size = nint * nsub
    idx = (k * nsub + sub)[None, :] + size * np.arange(weight.shape[0])[:, None]
    flat = np.bincount(idx.ravel(), weights=weight.ravel(), minlength=weight.shape[0] * size)
    return flat.reshape(weight.shape[0], nint, nsub)


def _linear_parts(station, elevation, n15, sub, nsub, levels, out):
    """Fill planes T, t, N, v, P, p of ``out`` (8, L+1, S): values from the right at the
    interval starts and slopes. Returns the interval starts (L+1,)."""
    z1, z2 = elevation[:-1], elevation[1:]
    dx = np.diff(station)
    full = np.vstack([dx, np.hypot(dx, z2 - z1), np.hypot(dx, z2 - z1) * n15])
    start = np.concatenate([[levels[0] - 1.0], levels])
    nint = start.size
    seg, k, k1, zlo, zhi = _pairs(levels, z1, z2)
    inv = 1.0 / (zhi[seg] - zlo[seg])
    wet = full[:, seg]
    part = _accumulate(sub[seg], nsub, nint, k, np.vstack([wet * ((start[k] - zlo[seg]) * inv),
                                                           wet * inv]))
    out[[1, 5, 3]] = np.cumsum(_accumulate(sub, nsub, nint, k1, full), axis=1) + part[:3]
    out[[2, 6, 4]] = part[3:]
    # a sloping segment flatter than FLAT_DZ switches to fully wet at zhi with its trapezoid
    # area dx (w - zmid) and moment (geometry.wet_segments): jumps dx dz/2 and dx dz^2/6 there
    dz = np.where(zhi - zlo <= FLAT_DZ, zhi - zlo, 0.0)
    out[[0, 7]] = _accumulate(sub, nsub, nint, k1, np.vstack([dx * dz / 2, dx * dz * dz / 6]))
    for end, s, n_end in ((elevation[0], sub[0], n15[0]), (elevation[-1], sub[-1], n15[-1])):
        wall = np.maximum(start - end, 0.0)
        rate = (start >= end).astype(float)
        out[5, :, s] += wall
        out[6, :, s] += rate
        out[3, :, s] += n_end * wall
        out[4, :, s] += n_end * rate
    return start


def build_level_table(station, elevation, n15, sub, to_part, levels) -> LevelTable:
    """Coefficient table on ``levels`` (ascending, containing every ground elevation)."""
    nsub = to_part.shape[0]
    coef = np.zeros((8, levels.size + 1, nsub))
    start = _linear_parts(station, elevation, n15, sub, nsub, levels, coef)
    top, t_rate = coef[1, :-1], coef[2, :-1]
    h = np.diff(start)[:, None]
    coef[0] = np.cumsum(coef[0], axis=0)          # area jumps, then the integral of T
    coef[0, 1:] += np.cumsum(top * h + 0.5 * t_rate * h * h, axis=0)
    area = coef[0, :-1]
    coef[7] = np.cumsum(coef[7], axis=0)          # moment jumps, then the integral of A
    coef[7, 1:] += np.cumsum(area * h + top * h * h / 2.0 + t_rate * h ** 3 / 6.0, axis=0)
    coef[:, 0] = 0.0  # the sentinel interval is dry
    return LevelTable(start, coef, to_part)


def _locate(start, w):
    """Interval index k with start[k] < w <= start[k+1] (0 below the thalweg) and d = w - start[k]."""
    k = np.maximum(np.searchsorted(start, w) - 1, 0)
    return k, (w - start[k])[:, None]


def _polynomials(c, d):
    """Per-subdivision area, top width, wetted perimeter, N and first moment from gathered
    interval rows ``c`` (8, k, S) at offsets ``d`` (k, 1) (module docstring equations)."""
    a0, t0, tr = c[0], c[1], c[2]
    top = t0 + tr * d
    area = a0 + d * (t0 + 0.5 * tr * d)
    moment = c[7] + d * (a0 + d * (0.5 * t0 + tr * d / 6.0))
    return area, top, c[5] + c[6] * d, c[3] + c[4] * d, moment


def _flow(c, d):
    """Total area, conveyance, alpha and subdivision conveyance (k, S). Manning with the
    composite n (N_s/P_s)^(2/3) gives K_s = A_s (A_s/P_s)^(2/3) / (N_s/P_s)^(2/3)
    = A_s (A_s/N_s)^(2/3); alpha = A^2 sum(K_s^3/A_s^2) / K^3 in the scale-free form of
    ``geometry`` (Chow 1959, ch. 2)."""
    sub_a = c[0] + d * (c[1] + 0.5 * c[2] * d)
    nsum = c[3] + c[4] * d
    ratio = np.divide(sub_a, nsum, out=np.zeros_like(sub_a), where=nsum > 0)
    sub_k = sub_a * np.cbrt(ratio) ** 2
    a_t, k_t = sub_a.sum(axis=1), sub_k.sum(axis=1)
    vel = np.divide(sub_k, sub_a, out=np.zeros_like(sub_a), where=sub_k > 0)
    with np.errstate(divide="ignore", invalid="ignore"):  # the same scale-free form
        v = vel * (a_t / k_t)[:, None]
        alpha = ((sub_k / k_t[:, None]) * v * v).sum(axis=1)
    alpha[~(k_t > 0)] = 1.0
    return a_t, k_t, alpha, sub_k


def evaluate(lt: LevelTable, wse):
    """Per-subdivision (k, S) area, top width, wetted perimeter, N = sum P n^1.5 and first
    moment at water-surface elevations ``wse`` (k,), from the interval polynomials above."""
    w = np.asarray(wse, dtype=float).ravel()
    k, d = _locate(lt.start, w)
    return _polynomials(lt.coef[:, k], d)


def flow_terms(lt: LevelTable, wse):
    """Total area A, conveyance K, kinetic-energy coefficient alpha (k,) and part conveyances
    (k, 3) at ``wse`` (k,): the lean evaluation used by the solver's inner loops."""
    w = np.asarray(wse, dtype=float).ravel()
    k, d = _locate(lt.start, w)
    a_t, k_t, alpha, sub_k = _flow(lt.coef[:5, k], d)
    return a_t, k_t, alpha, sub_k @ lt.to_part


@dataclass(frozen=True, eq=False)
class Windows:
    """A few consecutive intervals of several sections' tables, for evaluations across
    sections: window q covers the intervals whose starts are ``start[q, :-1]``, with
    flow coefficients ``coef[:, q]`` (5, Q, width, S_max), zero-padded subdivisions;
    ``start[q, -1]`` ends the window (+inf past a table's last interval)."""

    start: np.ndarray
    coef: np.ndarray


def windows(lookups, sec, low, width: int = 3) -> Windows:
    """For each query q, the ``width`` intervals of table ``lookups[sec[q]]`` from the one that
    holds ``low[q]`` (from the left, as ``_locate``) upwards."""
    s_max = max(lookups[i].coef.shape[2] for i in np.unique(sec))
    start = np.full((sec.size, width + 1), np.inf)
    coef = np.zeros((5, sec.size, width, s_max))
    span = np.arange(width + 1)
    for i in np.unique(sec):
        q = np.flatnonzero(sec == i)
        lt = lookups[i]
        last = lt.start.size - 1
        k = np.maximum(np.searchsorted(lt.start, low[q]) - 1, 0)[:, None] + span
        start[q] = np.where(k <= last, lt.start[np.minimum(k, last)], np.inf)
        coef[:, q, :, :lt.coef.shape[2]] = lt.coef[:5, np.minimum(k[:, :-1], last)]
    return Windows(start, coef)


def flow_in_windows(win: Windows, q, wse):
    """Total area, conveyance and alpha (k,) at ``wse`` (k,) inside windows ``q`` (k,); every
    point must lie in its window (start[q, 0], start[q, -1]] or at its lower end."""
    w = np.asarray(wse, dtype=float).ravel()
    st = win.start[q]
    k = np.count_nonzero(w[:, None] > st[:, 1:-1], axis=1)
    d = (w - st[np.arange(w.size), k])[:, None]
    return _flow(win.coef[:, q, k], d)[:3]


def slopes_in_windows(win: Windows, q, wse):
    """Area A, alpha, top width T = dA/dw and d alpha/dw (k,) at ``wse`` inside windows ``q``.
    With K_s = A_s^(5/3) N_s^(-2/3): dK_s/dw = K_s (5/3 T_s/A_s - 2/3 v_s/N_s); with
    S = sum K_s^3/A_s^2, alpha = A^2 S / K^3 and
    d alpha/dw = alpha (2 T/A + S'/S - 3 K'/K), S' = sum(3 K_s^2 K_s'/A_s^2 - 2 K_s^3 T_s/A_s^3)."""
    w = np.asarray(wse, dtype=float).ravel()
    st = win.start[q]
    k = np.count_nonzero(w[:, None] > st[:, 1:-1], axis=1)
    d = (w - st[np.arange(w.size), k])[:, None]
    c = win.coef[:, q, k]
    sub_a = c[0] + d * (c[1] + 0.5 * c[2] * d)
    sub_t = c[1] + c[2] * d
    nsum = c[3] + c[4] * d
    wet = (nsum > 0) & (sub_a > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        sub_k = np.where(wet, sub_a * np.cbrt(sub_a / nsum) ** 2, 0.0)
        dk = np.where(wet, sub_k * (5.0 / 3.0 * sub_t / sub_a - 2.0 / 3.0 * c[4] / nsum), 0.0)
        a_s2 = np.where(wet, sub_a * sub_a, 1.0)
        s1 = (sub_k ** 3 / a_s2).sum(axis=1)
        ds1 = (3.0 * sub_k ** 2 * dk / a_s2 - 2.0 * sub_k ** 3 * sub_t / (a_s2 * np.where(
            wet, sub_a, 1.0))).sum(axis=1)
        area, top, k_t, dk_t = sub_a.sum(axis=1), sub_t.sum(axis=1), sub_k.sum(axis=1), dk.sum(axis=1)
        alpha = area * area * s1 / k_t ** 3
        dalpha = alpha * (2.0 * top / area + ds1 / s1 - 3.0 * dk_t / k_t)
    return area, alpha, top, dalpha
