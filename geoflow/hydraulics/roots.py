"""Vectorised one-dimensional root finding and minimisation on brackets.

Each routine works on arrays of independent problems at once (one per section or event), so a
call to the objective evaluates all still-active problems in one numpy pass.
"""
from __future__ import annotations

import numpy as np


def bracketed_root(fun, a, b, fa, fb, *, xtol=1e-9, ftol=1e-7, maxiter=60):
    """Illinois (modified regula falsi) on brackets [a, b] with fa, fb of opposite sign
    (Dowell & Jarratt 1971, BIT 11:168-174, from memory).

    ``fun(x, idx)`` evaluates the problems ``idx`` at points ``x``. Returns (x, f(x)): the point
    of smallest |f| seen. A bisection step replaces any secant step that is not finite or leaves
    the bracket.
    """
    a, b = np.array(a, dtype=float), np.array(b, dtype=float)
    fa, fb = np.array(fa, dtype=float), np.array(fb, dtype=float)
    best_x = np.where(np.abs(fa) <= np.abs(fb), a, b)
    best_f = np.where(np.abs(fa) <= np.abs(fb), fa, fb)
    active = (np.abs(best_f) > ftol) & (np.abs(b - a) > xtol)
    for _ in range(maxiter):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        ai, bi, fai, fbi = a[idx], b[idx], fa[idx], fb[idx]
        with np.errstate(divide="ignore", invalid="ignore"):
            c = bi - fbi * (bi - ai) / (fbi - fai)
        lo, hi = np.minimum(ai, bi), np.maximum(ai, bi)
        bad = ~np.isfinite(c) | (c <= lo) | (c >= hi)
        c = np.where(bad, 0.5 * (ai + bi), c)
        fc = fun(c, idx)
        flip = np.sign(fc) != np.sign(fbi)
        a[idx] = np.where(flip, bi, ai)
        fa[idx] = np.where(flip, fbi, 0.5 * fai)
        b[idx], fb[idx] = c, fc
        better = np.abs(fc) < np.abs(best_f[idx])
        best_x[idx] = np.where(better, c, best_x[idx])
        best_f[idx] = np.where(better, fc, best_f[idx])
        active[idx] = (np.abs(fc) > ftol) & (np.abs(b[idx] - a[idx]) > xtol)
    return best_x, best_f


def zoom_minimum(fun, a, b, *, xtol=1e-7, points=25, maxiter=30):
    """Bounded minimisation of ``fun(x, idx)`` on each [a, b] by repeated grid zooming: evaluate
    ``points`` equally spaced points, keep the two intervals around the smallest value, repeat
    until the bracket is below ``xtol``, then take one parabolic-interpolation step through the
    three points around the minimum (a vectorised bounded scalar search for unimodal
    functions). Returns (x, f(x))."""
    a, b = np.array(a, dtype=float), np.array(b, dtype=float)
    idx = np.repeat(np.arange(a.size), points)
    t = np.linspace(0.0, 1.0, points)
    rows = np.arange(a.size)
    best_x, best_f = 0.5 * (a + b), np.full(a.size, np.inf)
    for _ in range(maxiter):
        x = a[:, None] + (b - a)[:, None] * t[None, :]
        f = fun(x.ravel(), idx).reshape(x.shape)
        j = np.argmin(np.where(np.isnan(f), np.inf, f), axis=1)
        fj = f[rows, j]
        better = fj < best_f
        best_x, best_f = np.where(better, x[rows, j], best_x), np.where(better, fj, best_f)
        jl, jr = np.maximum(j - 1, 0), np.minimum(j + 1, points - 1)
        a, b = x[rows, jl], x[rows, jr]
        if np.all(b - a <= xtol):
            break
    # final parabolic step through the three points around the grid minimum
    fl, fr = f[rows, jl], f[rows, jr]
    h = 0.5 * (b - a)
    with np.errstate(divide="ignore", invalid="ignore"):
        shift = 0.5 * h * (fl - fr) / (fl - 2.0 * fj + fr)
    xp = np.clip(x[rows, j] + np.where(np.isfinite(shift), shift, 0.0), a, b)
    fp = fun(xp, np.arange(a.size))
    better = fp < best_f
    return np.where(better, xp, best_x), np.where(better, fp, best_f)
