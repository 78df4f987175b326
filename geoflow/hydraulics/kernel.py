"""Compiled (numba) kernels of the solver on the packed level tables of a reach (``packed``).

Everything numba compiles lives in this one module on purpose: numba's on-disk cache
(``cache=True``) is invalidated by changes to the file of the function it compiled, not by
changes to functions it calls from other files (numba documentation, "Notes on caching"), so
splitting the kernel over several files could run stale code after an edit. For the same
reason the constants shared with ``step`` and ``packed`` are written out here and checked
equal by the tests.

The algorithms are those of the numpy reference (``lookup``, ``critical``, ``step``,
``roots``, ``geometry._assemble``), written as scalar loops over events and sections:
- evaluation: the exact interval polynomials of ``lookup`` on the interval that holds w, with
  K_s = A_s (A_s/N_s)^(2/3) (Manning with the composite n), alpha = (A^2/K^3) sum K_s^3/A_s^2,
  beta = (A/K^2) sum K_s^2/A_s (Chow 1959, Open-Channel Hydraulics, ch. 2 and 6, from memory);
- standard step (Chow 1959, ch. 10, from memory): the trial grid of ``step._grid`` is walked
  outward from critical WSE and the walk stops at its first sign change, which is the bracket
  ``step.solve_step`` takes from the full sorted grid; Illinois refinement as
  ``roots.bracketed_root`` (Dowell & Jarratt 1971, BIT 11:168-174, from memory);
- critical WSE: minimum of specific energy as ``critical.critical_many``; a local minimum
  whose lower bound exceeds the lowest refined energy so far is left unrefined when that
  cannot change the count of distinct minima (it could not be the critical one).
"""
from __future__ import annotations

from typing import Any

import numpy as np
from numba import njit

JIT: dict[str, Any] = dict(cache=True, error_model="numpy", nogil=True)
THALWEG, TOP, WIDTH, Z_LEFT, Z_RIGHT = 0, 1, 2, 3, 4     # columns of Reach.scalars
OK, CRITICAL, NO_CONVERGENCE = 0, 1, 2                   # as step
ABOVE = np.array([1e-4, 1e-3, 1e-2, 0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 1.5, 2.0, 4.0, 10.0])
BELOW = np.array([1e-4, 1e-3, 3e-3, 0.01, 0.03, 0.06, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5, 0.6,
                  0.7, 0.8, 0.9, 0.95, 0.99, 1.0])
RULES = ("average_conveyance", "arithmetic", "geometric", "harmonic")
O_G, O_CONTRACTION, O_EXPANSION, O_TOL, O_ITER, O_RULE = range(6)  # slots of ``opt``
K_ENERGY, K_HEAD, K_Q, K_CONV, K_PQ = 0, 1, 2, 3, 4                # slots of ``known``
P_AREA, P_TOP, P_PERIM, P_CONV, P_ALPHA, P_BETA, P_MOMENT, P_PART_A, P_PART_K, P_OUT = (
    0, 1, 2, 3, 4, 5, 6, 7, 10, 13)                                # slots of ``properties_at``
N_PROPS = 14
N_FAR = 16  # far levels 2^-3 .. 2^12 times a height scale above the highest table level


# ---- evaluation of the level tables ------------------------------------------------------

@njit(**JIT)
def locate(reach, i, w):
    """Interval k of section i with start_k < w <= start_k+1 (0 below the thalweg), as
    ``lookup._locate`` (``searchsorted`` from the left)."""
    s0 = reach.s_off[i]
    lo, hi = 0, reach.s_off[i + 1] - s0
    while lo < hi:
        mid = (lo + hi) >> 1
        if reach.start[s0 + mid] < w:
            lo = mid + 1
        else:
            hi = mid
    return lo - 1 if lo > 0 else 0


@njit(**JIT)
def near(reach, i, w, k):
    """``locate`` with a guess k: k itself when w lies in interval k."""
    s0, last = reach.s_off[i], reach.s_off[i + 1] - reach.s_off[i] - 1
    if 0 <= k <= last and (k == 0 or reach.start[s0 + k] < w) and (
            k == last or w <= reach.start[s0 + k + 1]):
        return k
    return locate(reach, i, w)


@njit(**JIT)
def _interval(reach, i, k, w):
    """(plane size, first coefficient index of interval k, d = w - start_k, subdivisions)."""
    ns = reach.nsub[i]
    plane = (reach.s_off[i + 1] - reach.s_off[i]) * ns
    return plane, reach.c_off[i] + k * ns, w - reach.start[reach.s_off[i] + k], ns


@njit(**JIT)
def flow_on(reach, i, k, w):
    """(area, conveyance, alpha, part conveyance x3) of section i at w on interval k:
    ``lookup.flow_terms``."""
    plane, c, d, ns = _interval(reach, i, k, w)
    cf = reach.coef
    p0 = reach.p_off[i] - c
    a_t = k_t = s3 = pk0 = pk1 = pk2 = 0.0
    for s in range(c, c + ns):
        sub_a = cf[s] + d * (cf[s + plane] + 0.5 * cf[s + 2 * plane] * d)
        nsum = cf[s + 3 * plane] + cf[s + 4 * plane] * d
        a_t += sub_a
        if nsum > 0 and sub_a > 0:
            sub_k = sub_a * (sub_a / nsum) ** (2.0 / 3.0)
            v = sub_k / sub_a
            s3 += sub_k * v * v
            k_t += sub_k
            part = reach.sub_part[p0 + s]
            if part == 0:
                pk0 += sub_k
            elif part == 1:
                pk1 += sub_k
            else:
                pk2 += sub_k
    alpha = s3 / k_t * (a_t / k_t) ** 2 if k_t > 0 else 1.0
    return a_t, k_t, alpha, pk0, pk1, pk2


@njit(**JIT)
def flow_at(reach, i, w):
    """``flow_on`` on the interval that holds w."""
    return flow_on(reach, i, locate(reach, i, w), w)


@njit(**JIT)
def flow_at_start(reach, i, k):
    """The cached flow terms of section i at its interval start k >= 1 (a table level)."""
    row = reach.s_off[i] + k
    lf = reach.level_flow
    return lf[row, 0], lf[row, 1], lf[row, 2], lf[row, 3], lf[row, 4], lf[row, 5]


@njit(**JIT)
def slopes_on(reach, i, k, w):
    """(A, alpha, T, d alpha/dw) of section i at w on interval k: ``lookup.slopes_in_windows``
    (dK_s/dw = K_s (5/3 T_s/A_s - 2/3 v_s/N_s); d alpha/dw = alpha (2T/A + S'/S - 3K'/K) with
    S = sum K_s^3/A_s^2)."""
    plane, c, d, ns = _interval(reach, i, k, w)
    cf = reach.coef
    s1 = ds1 = area = top = k_t = dk_t = 0.0
    for s in range(c, c + ns):
        sub_a = cf[s] + d * (cf[s + plane] + 0.5 * cf[s + 2 * plane] * d)
        sub_t = cf[s + plane] + cf[s + 2 * plane] * d
        nsum = cf[s + 3 * plane] + cf[s + 4 * plane] * d
        area += sub_a
        top += sub_t
        if nsum > 0 and sub_a > 0:
            inv_a, inv_n = 1.0 / sub_a, 1.0 / nsum
            sub_k = sub_a * (sub_a * inv_n) ** (2.0 / 3.0)
            dk = sub_k * (5.0 / 3.0 * sub_t * inv_a - 2.0 / 3.0 * cf[s + 4 * plane] * inv_n)
            v2 = (sub_k * inv_a) ** 2
            s1 += sub_k * v2
            ds1 += v2 * (3.0 * dk - 2.0 * sub_k * sub_t * inv_a)
            k_t += sub_k
            dk_t += dk
    alpha = area * area * s1 / k_t ** 3
    return area, alpha, top, alpha * (2.0 * top / area + ds1 / s1 - 3.0 * dk_t / k_t)


@njit(**JIT)
def properties_at(reach, i, w, out):
    """Properties of section i at w into ``out`` (N_PROPS,) at the P_* slots: the values of
    ``geometry.fast_properties``."""
    k = locate(reach, i, w)
    plane, c, d, ns = _interval(reach, i, k, w)
    cf = reach.coef
    out[:] = 0.0
    p0 = reach.p_off[i] - c
    s2 = s3 = 0.0
    for s in range(c, c + ns):
        a0, t0, tr = cf[s], cf[s + plane], cf[s + 2 * plane]
        sub_a = a0 + d * (t0 + 0.5 * tr * d)
        sub_p = cf[s + 5 * plane] + cf[s + 6 * plane] * d
        part = reach.sub_part[p0 + s]
        out[P_AREA] += sub_a
        out[P_TOP] += t0 + tr * d
        out[P_PERIM] += sub_p
        out[P_MOMENT] += cf[s + 7 * plane] + d * (a0 + d * (0.5 * t0 + tr * d / 6.0))
        out[P_PART_A + part] += sub_a
        nsum = cf[s + 3 * plane] + cf[s + 4 * plane] * d
        if sub_a > 0 and sub_p > 0 and nsum > 0:             # N = 0: storage, no conveyance
            sub_k = sub_a * (sub_a / nsum) ** (2.0 / 3.0)
            v = sub_k / sub_a
            s2 += sub_k * v
            s3 += sub_k * v * v
            out[P_CONV] += sub_k
            out[P_PART_K + part] += sub_k
    a_t, k_t = out[P_AREA], out[P_CONV]
    if k_t > 0:
        out[P_ALPHA], out[P_BETA] = s3 / k_t * (a_t / k_t) ** 2, s2 / k_t * (a_t / k_t)
    else:
        out[P_ALPHA] = out[P_BETA] = 1.0
    out[P_OUT] = 1.0 if (w > reach.scalars[i, Z_LEFT] or w > reach.scalars[i, Z_RIGHT]) else 0.0


@njit(**JIT)
def properties_reach(reach, wse, out):
    """``properties_at`` of section i at wse[e, i] into out[e, i] (E, N, N_PROPS)."""
    for i in range(wse.shape[1]):
        for e in range(wse.shape[0]):
            properties_at(reach, i, wse[e, i], out[e, i])


@njit(**JIT)
def specific_force_at(reach, i, w, q, g, out):
    """Specific force beta Q^2/(g A) + A ybar of section i at w (``geometry.specific_force``)."""
    properties_at(reach, i, w, out)
    return out[P_BETA] * q * q / (g * out[P_AREA]) + out[P_MOMENT]


# ---- standard step -----------------------------------------------------------------------

@njit(**JIT)
def known_state(reach, i, w, q, g, known):
    """Fill ``known`` (7,) with the state of section i at w (``step.section_state``)."""
    area, conv, alpha, pk0, pk1, pk2 = flow_at(reach, i, w)
    head = alpha * q * q / (2.0 * g * area * area)
    known[K_ENERGY], known[K_HEAD], known[K_Q], known[K_CONV] = w + head, head, q, conv
    if conv > 0:
        known[K_PQ], known[K_PQ + 1], known[K_PQ + 2] = pk0 / conv * q, pk1 / conv * q, pk2 / conv * q
    else:
        known[K_PQ] = known[K_PQ + 1] = known[K_PQ + 2] = q / 3.0


@njit(**JIT)
def friction_slope(q1, k1, q2, k2, rule):
    """Mean friction slope of a reach by rule code (``step.mean_friction_slope``)."""
    if rule == 0:
        return ((q1 + q2) / (k1 + k2)) ** 2
    s1, s2 = (q1 / k1) ** 2, (q2 / k2) ** 2
    if rule == 1:
        return 0.5 * (s1 + s2)
    if rule == 2:
        return np.sqrt(s1 * s2)
    return 2.0 * s1 * s2 / (s1 + s2)


@njit(**JIT)
def balance(w, flow, q, known, ln, up, opt):
    """Energy-balance residual at trial WSE w of the unknown section with flow terms ``flow``
    (area, K, alpha, part K x3): ``step._balance_terms`` for one trial. ``up`` > 0 when the
    unknown section is upstream (a float, so numba compiles one version for both ways)."""
    area, conv, alpha, pk0, pk1, pk2 = flow
    head = alpha * q * q / (2.0 * opt[O_G] * area * area)
    share = q / conv if conv > 0 else 0.0
    if conv > 0:
        s0, s1, s2 = pk0 * share, pk1 * share, pk2 * share
    else:
        s0 = s1 = s2 = q / 3.0
    m0 = 0.5 * (known[K_PQ] + s0)
    m1 = 0.5 * (known[K_PQ + 1] + s1)
    m2 = 0.5 * (known[K_PQ + 2] + s2)
    length = (m0 * ln[0] + m1 * ln[1] + m2 * ln[2]) / (m0 + m1 + m2)
    sf = friction_slope(known[K_Q], known[K_CONV], q, conv, int(opt[O_RULE]))
    kh = known[K_HEAD]
    head_up, head_dn = (head, kh) if up > 0 else (kh, head)
    coef = opt[O_CONTRACTION] if head_dn > head_up else opt[O_EXPANSION]
    loss = length * sf + coef * abs(head_dn - head_up)
    target = known[K_ENERGY] + loss if up > 0 else known[K_ENERGY] - loss
    r = w + head - target
    return np.inf if np.isnan(r) else r  # no flow area: far too much energy (step.solve_step)


@njit(**JIT)
def _sign(x):
    if x > 0:
        return 1.0
    if x < 0:
        return -1.0
    return x  # 0 or NaN, as numpy.sign


@njit(**JIT)
def refine(reach, i, a, b, fa, fb, q, known, ln, up, opt):
    """Illinois on [a, b] (``roots.bracketed_root``, xtol 1e-10, ftol 1e-3 tolerance); the
    bracket lies in one table interval."""
    xtol, ftol = 1e-10, 1e-3 * opt[O_TOL]
    best_x, best_f = (a, fa) if abs(fa) <= abs(fb) else (b, fb)
    active = abs(best_f) > ftol and abs(b - a) > xtol
    k = locate(reach, i, 0.5 * (a + b))
    for _ in range(int(opt[O_ITER])):
        if not active:
            break
        c = b - fb * (b - a) / (fb - fa)
        if not np.isfinite(c) or c <= min(a, b) or c >= max(a, b):
            c = 0.5 * (a + b)
        fc = balance(c, flow_on(reach, i, near(reach, i, c, k), c), q, known, ln, up, opt)
        if _sign(fc) != _sign(fb):
            a, fa = b, fb
        else:
            fa = 0.5 * fa
        b, fb = c, fc
        if abs(fc) < abs(best_f):
            best_x, best_f = c, fc
        active = abs(fc) > ftol and abs(b - a) > xtol
    return best_x, best_f


@njit(**JIT)
def _finish(reach, i, a, b, fa, fb, wc, r_end, q, known, ln, up, opt):
    """Refine a bracket; (wse, residual, status) as ``step.solve_step``."""
    x, fx = refine(reach, i, a, b, fa, fb, q, known, ln, up, opt)
    if abs(fx) <= opt[O_TOL]:
        return x, fx, OK
    return wc, r_end, NO_CONVERGENCE


@njit(**JIT)
def step_upstream(reach, i, q, known, ln, wc, opt):
    """Subcritical step: the lowest root above critical WSE ``wc`` on the trial grid (table
    levels above wc merged with wc + scale * ABOVE, levels first at ties)."""
    k = locate(reach, i, wc)
    r_wc = balance(wc, flow_on(reach, i, k, wc), q, known, ln, 1.0, opt)
    if not r_wc < 0:
        return wc, r_wc, CRITICAL
    scale = max(known[K_ENERGY] - wc, 1e-3)
    s0, l1 = reach.s_off[i], reach.s_off[i + 1] - reach.s_off[i]
    kl, jr = k + 1, 0  # first level > wc
    px, pr = wc, r_wc
    while kl < l1 or jr < ABOVE.size:
        x_lv = reach.start[s0 + kl] if kl < l1 else np.inf
        x_rel = wc + scale * ABOVE[jr] if jr < ABOVE.size else np.inf
        if x_lv <= x_rel:
            x, r = x_lv, balance(x_lv, flow_at_start(reach, i, kl), q, known, ln, 1.0, opt)
            kl += 1
        else:  # start_kl-1 < x_rel < start_kl: interval kl - 1
            x = x_rel
            r = balance(x, flow_on(reach, i, near(reach, i, x, kl - 1), x), q, known, ln, 1.0, opt)
            jr += 1
        if r >= 0:
            return _finish(reach, i, px, x, pr, r, wc, r_wc, q, known, ln, 1.0, opt)
        px, pr = x, r
    return wc, r_wc, NO_CONVERGENCE


@njit(**JIT)
def step_downstream(reach, i, q, known, ln, wc, opt):
    """Supercritical step: the highest root below critical WSE ``wc`` on the trial grid (table
    levels in [lo, wc) merged with thalweg + (wc - thalweg) * BELOW, lo its first point)."""
    k = locate(reach, i, wc)
    r_wc = balance(wc, flow_on(reach, i, k, wc), q, known, ln, -1.0, opt)
    if not r_wc < 0:
        return wc, r_wc, CRITICAL
    thalweg = reach.scalars[i, THALWEG]
    lo = thalweg + (wc - thalweg) * BELOW[0]
    s0 = reach.s_off[i]
    kl, jr = k, BELOW.size - 2  # start_k < wc: the highest level below wc
    px, pr = wc, r_wc
    while (kl >= 1 and reach.start[s0 + kl] >= lo) or jr >= 0:
        x_lv = reach.start[s0 + kl] if (kl >= 1 and reach.start[s0 + kl] >= lo) else -np.inf
        x_rel = thalweg + (wc - thalweg) * BELOW[jr] if jr >= 0 else -np.inf
        if x_rel >= x_lv:
            x = x_rel
            r = balance(x, flow_on(reach, i, near(reach, i, x, kl), x), q, known, ln, -1.0, opt)
            jr -= 1
        else:
            x, r = x_lv, balance(x_lv, flow_at_start(reach, i, kl), q, known, ln, -1.0, opt)
            kl -= 1
        if r >= 0:
            return _finish(reach, i, x, px, r, pr, wc, r_wc, q, known, ln, -1.0, opt)
        px, pr = x, r
    return wc, r_wc, NO_CONVERGENCE


@njit(**JIT)
def march_piece(reach, q, wc, lengths, opt, wse, res, status, i_from, i_to):
    """Solve sections i_from +- 1 .. i_to (inclusive) of every event from the WSE already in
    ``wse[:, i_from]``: upstream (subcritical) when i_to < i_from, else downstream
    (supercritical). Writes wse, res, status (E, N) in place."""
    known = np.empty(7)
    up = i_to < i_from
    step = -1 if up else 1
    for i in range(i_from + step, i_to + step, step):
        k = i - step
        ln = lengths[min(i, k)]
        for e in range(q.shape[0]):
            known_state(reach, k, wse[e, k], q[e, k], opt[O_G], known)
            if up:
                w, r, st = step_upstream(reach, i, q[e, i], known, ln, wc[e, i], opt)
            else:
                w, r, st = step_downstream(reach, i, q[e, i], known, ln, wc[e, i], opt)
            wse[e, i], res[e, i], status[e, i] = w, r, st


@njit(**JIT)
def mixed_overlay(reach, q, wc, lengths, opt, wse, res, status, w_up, has_up, sup, jump, blocked):
    """Overlay supercritical runs on the subcritical result in place (``engine_numpy.mixed``):
    the branch with the larger specific force governs; a supercritical run that loses to a
    solved subcritical section places a jump there. ``w_up`` (E,) is the upstream boundary
    WSE (used when ``has_up``). ``blocked`` (N,): no energy step into section i where True
    (a structure between i-1 and i); a run that reached i-1 ends there, with a jump at i when
    the subcritical level there is solved."""
    known, props = np.empty(7), np.empty(N_PROPS)
    g = opt[O_G]
    first = min(0, q.shape[1])  # not a literal 0: one compiled version of the callees
    for e in range(q.shape[0]):
        if has_up and w_up[e] < wc[e, 0]:
            if status[e, 0] != OK or (specific_force_at(reach, first, w_up[e], q[e, 0], g, props)
                                      > specific_force_at(reach, first, wse[e, 0], q[e, 0], g, props)):
                wse[e, 0], res[e, 0], status[e, 0], sup[e, 0] = w_up[e], 0.0, OK, True
    for i in range(1, q.shape[1]):
        for e in range(q.shape[0]):
            if not (sup[e, i - 1] or status[e, i - 1] != OK):
                continue
            if blocked[i]:
                if sup[e, i - 1] and status[e, i] == OK:
                    jump[e, i] = True
                continue
            known_state(reach, i - 1, wse[e, i - 1], q[e, i - 1], g, known)
            w, r, st = step_downstream(reach, i, q[e, i], known, lengths[i - 1], wc[e, i], opt)
            take = st == OK and (status[e, i] != OK or specific_force_at(
                reach, i, w, q[e, i], g, props) > specific_force_at(reach, i, wse[e, i], q[e, i], g, props))
            if not take and sup[e, i - 1] and status[e, i] == OK:
                jump[e, i] = True
            if take:
                wse[e, i], res[e, i], status[e, i], sup[e, i] = w, r, OK, True


# ---- critical WSE ------------------------------------------------------------------------

@njit(**JIT)
def _scan(reach, i, q_max, g, lv, depth, area, kin):
    """Scan levels of section i (table levels above the thalweg, then N_FAR far levels, as
    ``critical._scan``) into lv; depth, area and kin = alpha / (2 g A^2) there (so that
    E = depth + kin Q^2). Returns their number."""
    s0, l1 = reach.s_off[i], reach.s_off[i + 1] - reach.s_off[i]
    thalweg = reach.scalars[i, THALWEG]
    scale = max(reach.scalars[i, TOP] - thalweg, 1.0,
                (q_max ** 2 / (g * reach.scalars[i, WIDTH] ** 2)) ** (1 / 3))
    m = 0
    for k in range(1, l1 + N_FAR):
        if k < l1:
            w = reach.start[s0 + k]
            if not w > thalweg:
                continue
            a, al = reach.level_flow[s0 + k, 0], reach.level_flow[s0 + k, 2]
        else:
            w = reach.start[s0 + l1 - 1] + scale * 2.0 ** (k - l1 - 3)
            a, _, al, _, _, _ = flow_on(reach, i, l1 - 1, w)
        lv[m], depth[m], area[m], kin[m] = w, w - thalweg, a, al / (2.0 * g * (a * a))
        if np.isnan(kin[m]):  # E = inf where undefined, as critical_many
            kin[m] = np.inf
        m += 1
    return m


@njit(**JIT)
def _slope(reach, i, k, x, head):
    """(dE/dw, E) at x on interval k: dE/dw = 1 + Q^2/(2g) (alpha'/A^2 - 2 alpha T/A^3), -1
    where undefined (dry); E = depth + alpha Q^2/(2 g A^2)."""
    a, al, t, dal = slopes_on(reach, i, k, x)
    f = 1.0 + head * (dal / (a * a) - 2.0 * al * t / a ** 3)
    return (-1.0 if np.isnan(f) else f), (x - reach.scalars[i, THALWEG]) + head * al / (a * a)


@njit(**JIT)
def _half_minimum(reach, i, left, right, head):
    """(x, E(x)) where dE/dw turns from - to + on (left, right] (Illinois on dE/dw as
    ``roots.bracketed_root``, xtol 1e-10, ftol 1e-12), else the end taken by
    ``critical._slope_minimum``. (left, right] lies in one table interval."""
    a = left + 1e-9 * (right - left)
    k = locate(reach, i, right)
    fb, eb = _slope(reach, i, k, right, head)
    if fb <= 0:  # E still falls at the right end (whatever the left end does)
        return right, eb
    fa, ea = _slope(reach, i, k, a, head)
    if not fa < 0:
        return a, ea
    best_x, best_f, best_e = (a, fa, ea) if abs(fa) <= abs(fb) else (right, fb, eb)
    b = right
    active = abs(best_f) > 1e-12 and abs(b - a) > 1e-10
    for _ in range(60):
        if not active:
            break
        c = b - fb * (b - a) / (fb - fa)
        if not np.isfinite(c) or c <= min(a, b) or c >= max(a, b):
            c = 0.5 * (a + b)
        fc, ec = _slope(reach, i, k, c, head)
        if _sign(fc) != _sign(fb):
            a, fa = b, fb
        else:
            fa = 0.5 * fa
        b, fb = c, fc
        if abs(fc) < abs(best_f):
            best_x, best_f, best_e = c, fc, ec
        active = abs(fc) > 1e-12 and abs(b - a) > 1e-10
    return best_x, best_e


@njit(**JIT)
def _refined(reach, i, lo, mid, hi, q, g):
    """(x, E) of the minimum on (lo, hi] around table level mid (``critical._slope_minimum``)."""
    head = q * q / (2.0 * g)
    x1, e1 = _half_minimum(reach, i, lo, mid, head)
    x2, e2 = _half_minimum(reach, i, max(mid, lo), hi, head)
    return (x1, e1) if not e2 < e1 else (x2, e2)


@njit(**JIT)
def _minimum_at(reach, i, j, m, lv, area, e, q, g, limit):
    """(x, E) of grid minimum j: refined on (lo, hi] unless the lower bound of E there,
    (lo - thalweg) + Q^2/(2 g A(hi)^2), exceeds ``limit`` (``critical._refine``)."""
    thalweg = reach.scalars[i, THALWEG]
    lo = lv[j - 1] if j > 0 else thalweg
    hi, a_hi = (lv[j + 1], area[j + 1]) if j + 1 < m else (lv[m - 1], area[m - 1])
    bound = (lo - thalweg) + (1.0 - 1e-9) * (q * q) / (2.0 * g * (a_hi * a_hi))
    if bound > limit:
        return lv[j], e[j]
    xz, ez = _refined(reach, i, lo, lv[j], hi, q, g)
    return (xz, ez) if ez <= e[j] else (lv[j], e[j])


@njit(**JIT)
def _insert(mins, n, j):
    """Insert j into the ascending mins[:n] unless present; returns the new length."""
    at = n
    while at > 0 and mins[at - 1] >= j:
        if mins[at - 1] == j:
            return n
        at -= 1
    for b in range(n, at, -1):
        mins[b] = mins[b - 1]
    mins[at] = j
    return n + 1


@njit(**JIT)
def _grid_minima(lv, depth, kin, m, q, e, mins):
    """Energies e on the scan levels, the grid minima (ascending) into mins; returns
    (number of minima, index of the lowest energy)."""
    q2 = q * q
    for j in range(m):
        e[j] = depth[j] + kin[j] * q2
    j_min, n = 0, 0
    before = np.inf
    for j in range(m):
        ej = e[j]
        if ej < e[j_min]:
            j_min = j
        after = e[j + 1] if j + 1 < m else np.inf
        if ej <= before and ej < after:
            mins[n] = j
            n += 1
        before = ej
    return _insert(mins, n, j_min), j_min  # the grid minimum always counts


@njit(**JIT)
def _row(reach, i, q, g, lv, depth, area, kin, m, e, mins, xs):
    """Critical WSE and the number of distinct minima (gaps > 1e-4 m) of one event. Minima
    brackets (lo, hi] are ordered, so two minima whose brackets are more than 1e-4 apart are
    distinct whatever their refinement; a minimum closer than that to a neighbour gets the
    refinement rule of ``critical._refine`` (bound vs the lowest grid energy) so that its x
    is the reference one; others are refined only if they could hold the lowest energy."""
    n, j_min = _grid_minima(lv, depth, kin, m, q, e, mins)
    best_x, best_e = _minimum_at(reach, i, j_min, m, lv, area, e, q, g, np.inf)
    e_grid, j_best, count = e[j_min], j_min, 1
    for a in range(n):
        j = mins[a]
        lo = lv[j - 1] if j > 0 else -np.inf
        hi = lv[j + 1] if j + 1 < m else lv[m - 1]
        close_prev = a > 0 and lo - (lv[mins[a - 1] + 1] if mins[a - 1] + 1 < m else lv[m - 1]) <= 1e-4
        close_next = a + 1 < n and lv[mins[a + 1] - 1] - hi <= 1e-4
        if j == j_min:
            x = best_x
        else:
            x, ex = _minimum_at(reach, i, j, m, lv, area, e, q, g,
                                e_grid if (close_prev or close_next) else best_e)
            if ex < best_e or (ex == best_e and j < j_best):
                best_x, best_e, j_best = x, ex, j
        xs[a] = x
        if a > 0 and (not close_prev or abs(x - xs[a - 1]) > 1e-4):
            count += 1
    return best_x, count


@njit(**JIT)
def critical_reach(reach, q, g, wse, minima):
    """Critical WSE and number of distinct local minima of specific energy (E, N), in place."""
    size = N_FAR
    for i in range(q.shape[1]):
        size = max(size, reach.s_off[i + 1] - reach.s_off[i] + N_FAR)
    lv, depth, area, kin = np.empty(size), np.empty(size), np.empty(size), np.empty(size)
    e, xs, mins = np.empty(size), np.empty(size), np.empty(size, dtype=np.int64)
    for i in range(q.shape[1]):
        q_max = q[0, i]
        for ev in range(q.shape[0]):
            q_max = max(q_max, q[ev, i])
        m = _scan(reach, i, q_max, g, lv, depth, area, kin)
        for ev in range(q.shape[0]):
            wse[ev, i], minima[ev, i] = _row(reach, i, q[ev, i], g, lv, depth, area, kin, m,
                                             e, mins, xs)
