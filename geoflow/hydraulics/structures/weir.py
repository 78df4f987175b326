"""Broad- and sharp-crested weirs: headwater for a given discharge and tailwater.

Free flow, Q = C L H^1.5 (SI), H the head over the crest (the energy head when an approach
section is given, else the water-level head). The coefficient is a number given by the user
or a published rule:
- broad-crested default C = 1.70: critical depth over a level crest without losses,
  C = (2/3)^1.5 g^0.5 = 1.705 (Bos 1989, Discharge Measurement Structures, ILRI Publ. 20,
  ch. 1; Chow 1959, ch. 14; from memory);
- "bos" (broad-crested, needs ``crest_breadth`` along the flow): Q = Cd (2/3) (2g/3)^0.5 L H^1.5
  with Cd = 0.93 + 0.10 H/breadth, about valid for 0.08 <= H/breadth <= 0.5 (Bos 1989; the
  Cd law from memory);
- sharp-crested default C = 1.84 (Francis 1883, 3.33 in US units x 0.552; from memory);
- "rehbock" (sharp-crested, needs ``crest_height`` P above the approach bed):
  Q = Cd (2/3) (2g)^0.5 L h^1.5, Cd = 0.611 + 0.08 h/P (Rehbock 1929; from memory);
- "kindsvater_carter" (sharp-crested full-width weir, needs P): Q = Ce (2/3) (2g)^0.5
  (L + kb)(h + kh)^1.5, Ce = 0.602 + 0.075 h/P, kh = 0.001 m, kb = -0.0009 m (USBR 2001,
  Water Measurement Manual, ch. 7, eqs 7-1 and 7-2; kh source found, Ce and kb from memory).
  The Rehbock and Kindsvater-Carter coefficients already hold the approach velocity, so they
  take no approach section.

Submergence: when the tailwater is above the crest, Q = Q_free [1 - (H2/H1)^n]^0.385 with n
= 1.5 (Villemonte 1947), H2 the tailwater head over the crest. A tailwater at or below the
crest is a free overfall (factor 1). For a given Q and tailwater the upstream head is the root
of this increasing function of H1, so the headwater rises monotonically with Q.

Flags (per event):
- "submerged": the tailwater is above the crest; the Villemonte reduction was applied. It was
  derived on sharp-crested weirs; broad crests keep their free discharge up to a higher
  submergence, so the headwater is on the high side. Check if the level matters.
- "drowned": H2/H1 >= 0.9; the weir hardly controls the level and the result depends on the
  reduction formula. Check the level with an energy-loss (expansion) computation instead.
- "approach_critical": the approach section cannot carry the flow subcritically at the weir's
  energy; the headwater is its critical WSE. Check the approach section and the crest level.
- "coefficient_out_of_range": H/P > 1 (Rehbock, Kindsvater-Carter) or H/breadth outside
  0.08-0.5 (Bos): the coefficient rule is extrapolated. Use a coefficient from a rating.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import SectionTable
from geoflow.hydraulics.structures.common import (
    DROWNED_RATIO,
    G,
    StructureResult,
    choice,
    event_arrays,
    finite,
    flags_per_event,
    positive,
    root_above,
    submergence_ratio,
    velocity_head,
    villemonte_factor,
    wse_from_energy,
)

KINDS = ("broad_crested", "sharp_crested")
RULES = {"broad_crested": ("bos",), "sharp_crested": ("rehbock", "kindsvater_carter")}
DEFAULT_COEFFICIENT = {"broad_crested": 1.70, "sharp_crested": 1.84}
KC_KH, KC_KB = 0.001, -0.0009  # m, Kindsvater-Carter head and length corrections


@dataclass(frozen=True)
class Weir:
    """A weir across the flow. ``crest`` (m) and ``crest_length`` (m, normal to the flow);
    ``coefficient``: SI C of Q = C L H^1.5, a rule name of ``RULES`` or None (the default
    of ``kind``); ``crest_height`` P (m, crest above the approach bed) and ``crest_breadth``
    (m, along the flow) for the rules that need them; ``submergence_exponent`` n of
    Villemonte's reduction."""

    crest: float
    crest_length: float
    kind: str = "broad_crested"
    coefficient: float | str | None = None
    crest_height: float | None = None
    crest_breadth: float | None = None
    submergence_exponent: float = 1.5
    name: str = "weir"

    def __post_init__(self):
        what = f"weir {self.name!r}"
        finite(what, "crest", self.crest)
        positive(what, "crest_length", self.crest_length)
        choice(what, "kind", self.kind, KINDS)
        positive(what, "submergence_exponent", self.submergence_exponent)
        c = self.coefficient
        if isinstance(c, str):
            choice(what, f"coefficient rule for a {self.kind} weir", c, RULES[self.kind])
            need = "crest_breadth" if c == "bos" else "crest_height"
            if getattr(self, need) is None:
                raise HydraulicsError(f"{what}: coefficient {c!r} needs {need} (m)")
        elif c is not None:
            positive(what, "coefficient", c)
        for key in ("crest_height", "crest_breadth"):
            if getattr(self, key) is not None:
                positive(what, key, getattr(self, key))

    @property
    def rule(self) -> str | float:
        """The coefficient rule name, or the SI coefficient C."""
        c = self.coefficient
        return DEFAULT_COEFFICIENT[self.kind] if c is None else c


def free_discharge(head, weir: Weir, g: float = G):
    """Free-overfall discharge (m3/s) for heads ``head`` (m) over the crest (rules in the
    module docstring); 0 where the head is <= 0."""
    h = np.maximum(np.asarray(head, dtype=float), 0.0)
    rule, length = weir.rule, weir.crest_length
    if rule == "rehbock":
        cd = 0.611 + 0.08 * h / weir.crest_height
        return cd * (2.0 / 3.0) * np.sqrt(2.0 * g) * length * h ** 1.5
    if rule == "kindsvater_carter":
        ce = 0.602 + 0.075 * h / weir.crest_height
        q = ce * (2.0 / 3.0) * np.sqrt(2.0 * g) * (length + KC_KB) * (h + KC_KH) ** 1.5
        return np.where(h > 0, q, 0.0)
    if rule == "bos":
        cd = 0.93 + 0.10 * h / weir.crest_breadth
        return cd * (2.0 / 3.0) * np.sqrt(2.0 * g / 3.0) * length * h ** 1.5
    return float(rule) * length * h ** 1.5


def weir_discharge(head_up, head_down, weir: Weir, g: float = G):
    """Discharge over the crest with upstream head ``head_up`` and tailwater head
    ``head_down`` (both m above the crest): free discharge times Villemonte's factor."""
    r = submergence_ratio(head_up, head_down)
    return free_discharge(head_up, weir, g) * villemonte_factor(r, weir.submergence_exponent)


def head_for_discharge(discharge, head_down, weir: Weir, g: float = G):
    """Upstream head H1 (m above the crest) that passes ``discharge`` with tailwater head
    ``head_down`` (arrays (E,)); the root is unique because the discharge increases with H1."""
    q = np.asarray(discharge, dtype=float).ravel()
    h2 = np.maximum(np.asarray(head_down, dtype=float).ravel(), 0.0)
    free = (q / (DEFAULT_COEFFICIENT[weir.kind] * weir.crest_length)) ** (2.0 / 3.0)

    def fun(h1, idx):
        return weir_discharge(h1, h2[idx], weir, g) - q[idx]

    h1, found = root_above(fun, h2, np.maximum(free, 1e-6), f_lo=-q)
    if not np.all(found):
        raise HydraulicsError(f"weir {weir.name!r}: no head passes the discharge; "
                              "check crest_length and coefficient")
    return h1


def weir_headwater(discharge, tailwater_wse, weir: Weir, approach: SectionTable | None = None,
                   g: float = G) -> StructureResult:
    """Headwater WSE upstream of ``weir`` for each event (discharge and tailwater WSE (E,)).

    With ``approach`` (the section just upstream), the head over the crest is the energy head
    WSE + alpha V^2/2g - crest, and the WSE is found on the subcritical branch of that
    section; without it the approach velocity head is neglected."""
    what = f"weir {weir.name!r}"
    q, tw = event_arrays(discharge, tailwater_wse, what)
    if approach is not None and weir.rule in ("rehbock", "kindsvater_carter"):
        raise HydraulicsError(f"{what}: the {weir.rule} coefficient already includes the "
                              "approach velocity; call without an approach section")
    h2 = tw - weir.crest
    h1 = head_for_discharge(q, h2, weir, g)
    ratio = submergence_ratio(h1, h2)
    at_critical = np.zeros(q.size, dtype=bool)
    if approach is None:
        hw = weir.crest + h1
        energy = hw
    else:
        energy = weir.crest + h1
        hw, at_critical = wse_from_energy(approach, energy, q, g)
        energy = np.maximum(energy, hw + velocity_head(approach, hw, q, g))
    flags = flags_per_event(q.size, [
        ("submerged", h2 > 0),
        ("drowned", ratio >= DROWNED_RATIO),
        ("approach_critical", at_critical),
        ("coefficient_out_of_range", _out_of_range(h1, weir))])
    return StructureResult(
        kind="weir", discharge=q, headwater_wse=hw, tailwater_wse=tw,
        control=np.full(q.size, "weir"), q_through=q.copy(), q_over_crest=np.zeros(q.size),
        flags=flags, detail={"head_over_crest": h1, "submergence": ratio,
                             "headwater_energy": energy})


def _out_of_range(h1, weir: Weir):
    rule = weir.rule
    if rule in ("rehbock", "kindsvater_carter"):
        return h1 / weir.crest_height > 1.0
    if rule == "bos":
        r = h1 / weir.crest_breadth
        return (r < 0.08) | (r > 0.5)
    return np.zeros(np.shape(h1), dtype=bool)
