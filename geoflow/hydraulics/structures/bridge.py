"""Bridges: headwater for low flow, pressure flow and flow over the deck.

Geometry and coefficients: ``opening.py``; low-flow methods: ``lowflow.py``.

Low flow. ``Bridge.low_flow_method`` picks the energy, momentum or Yarnell method; the default
"highest" computes every method that applies (Yarnell and the pier drag need piers and their
coefficients) and keeps the highest headwater. The methods capture different losses (energy:
friction and abutment contraction; momentum: pier drag and contraction forces; Yarnell:
piers from flume tests), none is best everywhere, and taking the highest is common practice
for flood levels (conservative; common practice, no source).

High flow (Bradley 1978, Hydraulics of Bridge Waterways, FHWA HDS-1; forms from memory).
Pressure flow starts when the low-flow energy level at the upstream face reaches the low
chord, and it applies where its own upstream energy level reaches the low chord too. E is
the energy level at the upstream face, A the net opening area below the low chord, Z = A/T
of that area (so the mean bed of the opening is low_chord - Z):
- upstream face submerged, tailwater below the low chord (sluice-gate form):
  Q = Cd A [2g (E - bed - Z/2)]^0.5, Cd default 0.5 (Bradley gives 0.27-0.5, rising with the
  upstream depth over Z; lower it when the upstream depth is close to Z);
- tailwater at or above the low chord (orifice form): Q = C A [2g (E - TW)]^0.5, C default 0.8
  (0.7-0.9). The sluice form still applies where it gives the higher headwater, so a rising
  tailwater never lowers the headwater.
- over the deck and the road: weir flow over the crest max(ground, high_chord) along the
  upstream face, split into horizontal pieces and summed (HDS-5 2001, Eq 8, sag-curve
  segments), Q = sum C dx (E - z)^1.5 with Villemonte's (1947) reduction per piece for the
  tailwater above it. Pressure and weir flows add; E is the root of Q_open(E) + Q_weir(E) = Q
  (both increase with E). The headwater is the WSE at the upstream face with that energy.
Once pressure flow applies, the headwater is the higher of the high-flow level and the
low-flow level capped at the low chord (the low-flow methods have no deck, so their level is
not trusted above it). Both rise with the discharge, so the headwater never falls as the
discharge rises, and it is continuous where the high-flow level is the lower one at the
onset of pressure flow (otherwise it steps up there, as the flow does).

A tailwater below critical depth at the downstream face cannot control the flow through the
bridge; every regime then starts from the critical WSE there (as a free outfall would).

Flags (per event):
- "critical_in_opening": a low-flow method found no subcritical solution inside the bridge
  (the opening chokes, Bradley's class B); the level upstream is set by critical depth in the
  opening and the flow downstream may be supercritical. Check the downstream regime (mixed).
- "yarnell_out_of_range": Yarnell was used with alpha > 0.4 or Fr > 0.8 downstream.
- "low_chord_reached": the low-flow energy reached the low chord but the pressure-flow level
  was lower; the headwater is the low-flow level capped at the low chord (the water touches
  the deck). Check the sluice / orifice coefficients (Bradley's Cd is lowest there).
- "deck_weir_submerged": the tailwater is above the deck crest while the deck overtops.
- "approach_critical": the upstream face cannot carry the flow subcritically at the computed
  energy; the headwater is its critical WSE.
- "tailwater_below_critical": the given tailwater is below critical depth at the downstream
  face (supercritical tailwater); it cannot control the bridge, and the computation used the
  critical WSE there instead. Check the regime of the downstream profile.
- "no_yarnell_coefficient" / "no_drag_coefficient": the "highest" rule left out Yarnell /
  momentum because the pier shape has no published coefficient; give one to include it.
"""
from __future__ import annotations

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.critical import critical_wse
from geoflow.hydraulics.geometry import SectionTable, properties
from geoflow.hydraulics.structures.common import (
    G,
    StructureResult,
    event_arrays,
    flags_per_event,
    root_above,
    submergence_ratio,
    velocity_head,
    villemonte_factor,
    wse_from_energy,
)
from geoflow.hydraulics.structures.lowflow import YARNELL_RANGE, energy_method, momentum_method, yarnell_method
from geoflow.hydraulics.structures.opening import Bridge, build_faces

DECK_PIECES = 400


def _low_flow(q, tw, up, down, bridge: Bridge, g, free_outfall):
    """WSE at the upstream face per method (nan where not computed), the chosen WSE and
    method name, and the low-flow flags."""
    k, cd = bridge.piers.coefficients()
    has_piers = bridge.piers.count > 0
    method = bridge.low_flow_method
    nan = np.full(q.size, np.nan)
    out = {"energy": nan.copy(), "momentum": nan.copy(), "yarnell": nan.copy()}
    choked, at_crit, out_of_range = (np.zeros(q.size, dtype=bool) for _ in range(3))
    what = f"bridge {bridge.name!r}"
    if method == "yarnell" and not (has_piers and k is not None):
        raise HydraulicsError(f"{what}: low_flow_method 'yarnell' needs piers with a Yarnell K "
                              "(give piers yarnell_k or a shape with a published K)")
    if method == "momentum" and has_piers and cd is None:
        raise HydraulicsError(f"{what}: low_flow_method 'momentum' needs a pier drag "
                              "coefficient (give piers drag_coefficient)")
    if method in ("highest", "energy"):
        out["energy"], ch, ac = energy_method(q, tw, up, down, bridge, g, free_outfall)
        choked |= ch
        at_crit |= ac
    if method == "momentum" or (method == "highest" and (cd is not None or not has_piers)):
        out["momentum"], ch, ac = momentum_method(q, tw, up, down, bridge, cd or 0.0, g,
                                                  free_outfall)
        choked |= ch
        at_crit |= ac
    if has_piers and k is not None and method in ("highest", "yarnell"):
        out["yarnell"], alpha, froude = yarnell_method(q, tw, down, k, g)
        out_of_range = (alpha > YARNELL_RANGE[0]) | (froude > YARNELL_RANGE[1])
    stacked = np.column_stack([out["energy"], out["momentum"], out["yarnell"]])
    pick = np.argmax(np.where(np.isnan(stacked), -np.inf, stacked), axis=1)
    wse = stacked[np.arange(q.size), pick]
    names = np.array(["energy", "momentum", "yarnell"])[pick]
    flags = [("critical_in_opening", choked),
             ("yarnell_out_of_range", out_of_range & (names == "yarnell")),
             ("no_yarnell_coefficient", method == "highest" and has_piers and k is None),
             ("no_drag_coefficient", method == "highest" and has_piers and cd is None)]
    return out, wse, names, at_crit, flags


def deck_crest(bridge: Bridge, up_full: SectionTable):
    """Horizontal pieces of the crest over the deck and road: (elevation, width) arrays
    (P,), crest = max(ground of the upstream face, high_chord)."""
    x = up_full.station
    edges = np.unique(np.concatenate([x, np.linspace(x[0], x[-1], DECK_PIECES + 1)]))
    mid = 0.5 * (edges[1:] + edges[:-1])
    return np.maximum(np.interp(mid, x, up_full.elevation), bridge.high_chord), np.diff(edges)


def deck_discharge(energy, tailwater_wse, crest, width, bridge: Bridge):
    """Weir flow over the crest pieces (m3/s) at energy levels ``energy`` (E,)."""
    h1 = np.maximum(np.asarray(energy, dtype=float)[:, None] - crest[None, :], 0.0)
    h2 = np.asarray(tailwater_wse, dtype=float)[:, None] - crest[None, :]
    factor = villemonte_factor(submergence_ratio(h1, h2), bridge.submergence_exponent)
    return (bridge.deck_coefficient * width[None, :] * h1 ** 1.5 * factor).sum(axis=1)


def opening_at_low_chord(bridge: Bridge, up_net: SectionTable):
    """(net area A, mean bed elevation low_chord - Z) of the opening below the low chord."""
    p = properties(up_net, bridge.low_chord)
    area, top = float(p.area[0]), float(p.top_width[0])
    return area, bridge.low_chord - area / top


def sluice_discharge(energy, bed: float, low_chord: float, area: float, cd: float, g: float):
    """Sluice-gate form Q = Cd A [2g (E - bed - Z/2)]^0.5, Z = low_chord - bed (Bradley 1978;
    E - bed = Y + alpha V^2/2g with Y the upstream depth above the mean bed)."""
    z = low_chord - bed
    head = np.maximum(np.asarray(energy, dtype=float) - bed - z / 2, 0.0)
    return cd * area * np.sqrt(2.0 * g * head)


def orifice_discharge(energy, tailwater_wse, area: float, c: float, g: float):
    """Orifice form Q = C A [2g (E - TW)]^0.5 (Bradley 1978)."""
    dh = np.asarray(energy, dtype=float) - np.asarray(tailwater_wse, dtype=float)
    return c * area * np.sqrt(2.0 * g * np.maximum(dh, 0.0))


def pressure_discharge(energy, tailwater_wse, bridge: Bridge, area: float, bed: float, g: float):
    """Flow through the opening under pressure (sluice form; orifice form where the
    tailwater is at or above the low chord and gives less flow), m3/s."""
    tw = np.asarray(tailwater_wse, dtype=float)
    sluice = sluice_discharge(energy, bed, bridge.low_chord, area, bridge.sluice_coefficient, g)
    orifice = orifice_discharge(energy, tw, area, bridge.orifice_coefficient, g)
    return np.where(tw >= bridge.low_chord, np.minimum(sluice, orifice), sluice)


def _high_flow(q, tw, up, bridge: Bridge, g):
    """Energy level at the upstream face with pressure + deck flow = Q, and the deck flow."""
    area, bed = opening_at_low_chord(bridge, up.net)
    crest, width = deck_crest(bridge, up.full)
    lo = np.full(q.size, bed + 0.5 * (bridge.low_chord - bed))
    lo = np.where(tw >= bridge.low_chord, np.maximum(lo, tw), lo)

    def fun(e, idx):
        return (pressure_discharge(e, tw[idx], bridge, area, bed, g)
                + deck_discharge(e, tw[idx], crest, width, bridge) - q[idx])

    energy, found = root_above(fun, lo, max(bridge.low_chord - bed, 1.0), f_lo=-q,
                               xtol=1e-10, ftol=1e-9 * q.min())
    if not np.all(found):
        raise HydraulicsError(f"bridge {bridge.name!r}: no upstream level passes the discharge "
                              "under pressure; check the chords and the face sections")
    return energy, deck_discharge(energy, tw, crest, width, bridge), crest.min()


def bridge_headwater(discharge, tailwater_wse, bridge: Bridge, upstream_face: SectionTable,
                     downstream_face: SectionTable, g: float = G) -> StructureResult:
    """Headwater WSE at the upstream face of ``bridge`` for each event (discharge and tailwater
    WSE at the downstream face, (E,)). The face sections are ``SectionTable``s of the ground
    just outside each face, in a common station frame."""
    q, tw = event_arrays(discharge, tailwater_wse, f"bridge {bridge.name!r}")
    up, down = build_faces(bridge, upstream_face, downstream_face)
    wc_down = critical_wse(down.full, q, g=g).wse
    below = tw <= wc_down
    tw_eff = np.maximum(tw, wc_down)  # a tailwater below critical does not control the bridge
    per_method, wse_low, names, at_crit, flags = _low_flow(q, tw_eff, up, down, bridge, g, below)
    e_low = wse_low + velocity_head(up.full, wse_low, q, g)
    high = e_low >= bridge.low_chord
    wse_high, q_deck = np.full(q.size, np.nan), np.zeros(q.size)
    hw = wse_low.copy()
    use_high = np.zeros(q.size, dtype=bool)
    crest_min = np.inf
    idx = np.flatnonzero(high)
    if idx.size:
        e_high, qd, crest_min = _high_flow(q[idx], tw_eff[idx], up, bridge, g)
        w_high, crit = wse_from_energy(up.full, e_high, q[idx], g)
        wse_high[idx] = w_high
        floor = np.minimum(wse_low[idx], bridge.low_chord)
        take = (w_high > floor) & (e_high >= bridge.low_chord)
        use_high[idx] = take
        hw[idx] = np.where(take, w_high, floor)
        q_deck[idx[take]] = qd[take]
        at_crit[idx[take]] = crit[take]
    energy = hw + velocity_head(up.full, hw, q, g)
    control = np.where(use_high, np.where(q_deck > 0, "overtopping", "pressure"), "free_surface")
    low_flags = [(word, np.asarray(mask) & ~use_high) for word, mask in flags]
    flags = flags_per_event(q.size, low_flags + [
        ("low_chord_reached", high & ~use_high),
        ("deck_weir_submerged", (q_deck > 0) & (tw > crest_min)),
        ("approach_critical", at_crit),
        ("tailwater_below_critical", below)])
    detail = {"headwater_energy_method": per_method["energy"],
              "headwater_momentum_method": per_method["momentum"],
              "headwater_yarnell": per_method["yarnell"], "low_flow_method": names,
              "headwater_low_flow": wse_low, "headwater_high_flow": wse_high,
              "headwater_energy": energy}
    return StructureResult(kind="bridge", discharge=q, headwater_wse=hw, tailwater_wse=tw,
                           control=control, q_through=q - q_deck, q_over_crest=q_deck,
                           flags=flags, detail=detail)
