"""Bridge low flow (free surface through the opening): energy, momentum and Yarnell methods.

Sections: 2 = the downstream face section (``down.full``, tailwater), BD / BU = just inside
the downstream / upstream faces (``net`` opening tables), 3 = the upstream face section
(``up.full``, headwater). Each method returns the WSE at section 3 per event.

- Energy (standard step 2 -> BD -> BU -> 3 with ``step.solve_step``, the reach solver's energy
  balance): expansion loss between BD and 2, friction only over the bridge length between BD
  and BU (no eddy loss inside the opening), contraction loss between BU and 3 (coefficient
  times the change of velocity head; typical bridge values 0.3 / 0.5, USACE 1993,
  EM 1110-2-1416, from memory). Where a step has no subcritical solution the WSE there is
  critical (the opening chokes: Bradley 1978 class B). Where nothing obstructs a face below
  the water level, crossing it changes nothing and the level is carried over unchanged (the
  switching eddy-loss rule would otherwise touch zero there without crossing it).
- Momentum (specific force M = A ybar + beta Q^2/(gA), Chow 1959 ch. 3; balance form from
  memory): 2 -> BD: A_full ybar_full(w_BD) + beta Q^2/(g A_net) = M_2 (the water pushes on the
  downstream ends of piers and abutments with the hydrostatic force of the obstructed area);
  BD -> BU: M_BU = M_BD + A_mean Sf L - A_mean S0 L (friction and weight); BU -> 3:
  M_3 - 1/2 C_D A_p(w_3) Q^2/(g A_3^2) = A_full ybar_full(w_BU) + beta Q^2/(g A_net(w_BU)),
  with C_D the pier drag coefficient and A_p the pier area at section 3. Each balance is solved
  on the subcritical branch; where none exists the opening chokes and the WSE is critical.
- A tailwater at critical depth (the bridge module raises a lower one to it) is a free
  outfall: both balances then put critical depth at BD (the limit of a subcritical tailwater
  falling to critical; the step's root at critical is kept rather than a second root above).
- Yarnell (1934): rise dy = K (K + 5 Fr^2 - 0.6)(alpha + 15 alpha^4) Fr^2 y of the water
  level between downstream and upstream of the piers; y the hydraulic depth (A/T) and Fr the
  Froude number at section 2, alpha the pier area over the flow area at section 2. Piers only
  (no abutments); tested by Yarnell for subcritical flow; ``YARNELL_RANGE`` gives the limits
  flagged here (alpha <= 0.4, Fr < 0.8; common practice, no source).
"""
from __future__ import annotations

import numpy as np

from geoflow.hydraulics.critical import critical_wse
from geoflow.hydraulics.geometry import properties
from geoflow.hydraulics.solver import SolverOptions
from geoflow.hydraulics.step import OK, section_state, solve_step
from geoflow.hydraulics.structures.common import root_above

YARNELL_RANGE = (0.4, 0.8)  # largest alpha, largest Froude number


def yarnell_rise(k, alpha, velocity, depth, g: float):
    """Yarnell (1934) water-level rise across piers, m: K (K + 5Fr^2 - 0.6)(a + 15a^4) Fr^2 y,
    Fr^2 = V^2/(g y), with V and y downstream of the piers."""
    fr2 = np.asarray(velocity, dtype=float) ** 2 / (g * np.asarray(depth, dtype=float))
    a = np.asarray(alpha, dtype=float)
    return k * (k + 5.0 * fr2 - 0.6) * (a + 15.0 * a ** 4) * fr2 * depth


def energy_method(q, tw, up, down, bridge, g: float, free_outfall=None):
    """Energy method: (wse_3, choked, wse_3_at_critical) per event (module docstring). Where
    ``free_outfall`` is set (the tailwater is at critical), the WSE at BD is critical."""
    faces = SolverOptions(g=g, contraction=bridge.contraction, expansion=bridge.expansion,
                          tolerance=1e-5)
    inside = SolverOptions(g=g, contraction=0.0, expansion=0.0, tolerance=1e-5)
    known = section_state(down.full, tw, q, g)
    choked = np.zeros(q.size, dtype=bool)
    steps = ((down.net, np.zeros(3), faces), (up.net, np.full(3, float(bridge.length)), inside),
             (up.full, np.zeros(3), faces))
    for table, lengths, opts in steps:
        wc = critical_wse(table, q, g=g).wse
        w, _, status = solve_step(table, q, known, lengths, wc, True, opts)
        if table is not up.net:  # a face step: no obstruction at the level means no step
            face = down if table is down.net else up
            same = _unobstructed(face, known.wse)
            w, status = np.where(same, known.wse, w), np.where(same, OK, status)
        if table is down.net and free_outfall is not None:
            w = np.where(free_outfall, wc, w)
            status = np.where(free_outfall, OK + 1, status)
        if table is not up.full:
            choked |= status != OK
        known = section_state(table, w, q, g)
    return known.wse, choked, status != OK


def _unobstructed(face, wse):
    """True where the opening of ``face`` holds the whole flow area of the face at ``wse``
    (nothing obstructs the flow below that level, so crossing the face changes nothing)."""
    full = properties(face.full, wse).area
    return full - properties(face.net, wse).area <= 1e-9 * np.maximum(full, 1e-12)


def _force(table, w, q, g):
    p = properties(table, w)
    return p.first_moment, p.beta * q * q / (g * p.area), p


def _solve_force(table, q, residual, g):
    """Subcritical root of ``residual(w, idx)`` above the critical WSE of ``table``; the
    critical WSE where the residual is already >= 0 there (no subcritical root)."""
    wc = critical_wse(table, q, g=g).wse
    r0 = residual(wc, np.arange(q.size))
    w = wc.copy()
    idx = np.flatnonzero(r0 < 0)
    if idx.size:
        scale = np.maximum(wc[idx] - table.thalweg, 0.1)
        x, _ = root_above(lambda xx, sub: residual(xx, idx[sub]), wc[idx], scale, f_lo=r0[idx],
                          xtol=1e-9, ftol=1e-9)
        w[idx] = x
    return w, ~(r0 < 0)


def momentum_method(q, tw, up, down, bridge, drag_coefficient: float, g: float,
                    free_outfall=None):
    """Momentum method: (wse_3, choked, wse_3_at_critical) per event (module docstring). Where
    ``free_outfall`` is set (the tailwater is at critical), the WSE at BD is critical."""
    i2, d2, _ = _force(down.full, tw, q, g)
    m2 = i2 + d2

    def r_bd(w, idx):
        return properties(down.full, w).first_moment + _force(down.net, w, q[idx], g)[1] - m2[idx]

    w_bd, choked = _solve_force(down.net, q, r_bd, g)
    if free_outfall is not None and np.any(free_outfall):
        w_bd = np.where(free_outfall, critical_wse(down.net, q, g=g).wse, w_bd)
        choked = choked | free_outfall
    i_bd, d_bd, p_bd = _force(down.net, w_bd, q, g)
    length = float(bridge.length)
    s0 = (up.net.thalweg - down.net.thalweg) / length if length > 0 else 0.0

    def r_bu(w, idx):
        i, d, p = _force(up.net, w, q[idx], g)
        a_mean = 0.5 * (p.area + p_bd.area[idx])
        sf = (2.0 * q[idx] / (p.conveyance + p_bd.conveyance[idx])) ** 2
        return i + d - (i_bd[idx] + d_bd[idx]) - a_mean * length * (sf - s0)

    w_bu, ch_bu = _solve_force(up.net, q, r_bu, g)
    target = properties(up.full, w_bu).first_moment + _force(up.net, w_bu, q, g)[1]

    def r_3(w, idx):
        i, d, p = _force(up.full, w, q[idx], g)
        drag = 0.5 * drag_coefficient * up.pier_area(w) * q[idx] ** 2 / (g * p.area ** 2)
        return i + d - drag - target[idx]

    w3, at_crit = _solve_force(up.full, q, r_3, g)
    return w3, choked | ch_bu, at_crit


def yarnell_method(q, tw, down, k: float, g: float):
    """Yarnell: (wse_3, alpha, froude) per event with the rise of ``yarnell_rise``."""
    p = properties(down.full, tw)
    alpha = down.pier_area(tw) / p.area
    velocity = q / p.area
    depth = p.hydraulic_depth
    return tw + yarnell_rise(k, alpha, velocity, depth, g), alpha, velocity / np.sqrt(g * depth)
