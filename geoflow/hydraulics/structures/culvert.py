"""Culverts: headwater by FHWA HDS-5 inlet and outlet control, with flow over the road crest.

Sources: Normann, Houghtalen & Johnston (2001), Hydraulic Design of Highway Culverts, 2nd ed.,
FHWA-NHI-01-020 (HDS-5), Eqs 5-8 and Appendix A; Schall et al. (2012), 3rd ed.

- Inlet control: ``inlets.py`` (form 1 / form 2 unsubmerged, submerged, Hermite transition).
- Outlet control (HDS-5 2001, Eqs 5-7), full-barrel losses:
  H = [1 + ke + Ku n^2 L / R^1.33] V^2/2g, Ku = 19.63 (SI), V and R of the full barrel;
  ho = max(TW, (dc + D)/2), TW the tailwater depth above the outlet invert;
  HWo = ho + H - S L, above the inlet invert. Valid down to HWo of about 0.75 D (HDS-5).
- The higher of HWi and HWo governs; ``control`` says which.
- Several identical barrels share the flow equally.
- Road overtopping (HDS-5 2001, Eq 8): Qr = C L HWr^1.5 (SI coefficient C = 0.552 x the US
  value; default 1.66, about 3.0 in US units for deep overtopping, HDS-5 Figure III-11, read
  from memory), HWr the headwater above the crest. A tailwater above the crest reduces it by
  Villemonte's factor [1 - (H2/H1)^1.5]^0.385 (Villemonte 1947). HDS-5's own submergence chart
  keeps the full discharge up to about H2/H1 = 0.8, so this reduction gives the higher
  headwater. The barrel flow Qb is the root of Qb + Qr(HW(Qb)) = Q on [0, Q] (the left side
  increases with Qb because HW does), solved for all events at once by regula falsi.
- The headwater ignores the approach velocity head (HDS-5 practice, conservative).

Flags (per event):
- "outlet_low_head": outlet control governs with HWo < 0.75 D, below the range where HDS-5
  supports the full-barrel outlet-control equation. Check the level with a backwater profile
  through the barrel (not computed here).
- "inlet_transition": inlet control governs on the transition curve between the unsubmerged
  and the submerged forms (3.5 < X < 4.0), where HDS-5's charts are least certain.
- "adverse_slope": the outlet invert is above the inlet invert; HDS-5 assumes a falling
  barrel. Check the inverts.
- "road_weir_submerged": the tailwater is above the road crest while the road overtops;
  Villemonte's reduction was applied (conservative against HDS-5's chart).
- "road_weir_drowned": tailwater head over the crest >= 0.9 of the headwater head: the road
  hardly controls the level. Check the level with a model of the flow across the road.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.roots import bracketed_root
from geoflow.hydraulics.structures.barrel import SHAPES, Barrel
from geoflow.hydraulics.structures.common import (
    DROWNED_RATIO,
    G,
    StructureResult,
    choice,
    event_arrays,
    finite,
    flags_per_event,
    positive,
    submergence_ratio,
    villemonte_factor,
)
from geoflow.hydraulics.structures.inlets import INLETS, KU_INLET, InletCoefficients, InletCurve

KU_OUTLET = 19.63
LOW_HEAD_RATIO = 0.75
ROAD_COEFFICIENT = 1.66


@dataclass(frozen=True)
class Culvert:
    """A culvert under a road. ``shape`` "circular" (``diameter``) or "box" (``span``,
    ``rise``), all in m; ``barrels`` identical barrels of ``length`` (m) between ``invert_up``
    and ``invert_down`` (m); Manning ``n`` of the barrel; ``inlet`` a name of ``INLETS`` (or
    ``inlet_coefficients`` for other published constants); ``ke`` overrides the inlet's
    entrance loss. ``crest`` (m), ``crest_length`` (m) and ``crest_coefficient`` (SI C of
    Q = C L H^1.5) describe the road over it; without ``crest`` the road never overtops."""

    shape: str
    length: float
    invert_up: float
    invert_down: float
    n: float
    inlet: str = ""
    diameter: float | None = None
    span: float | None = None
    rise: float | None = None
    barrels: int = 1
    ke: float | None = None
    inlet_coefficients: InletCoefficients | None = None
    crest: float | None = None
    crest_length: float | None = None
    crest_coefficient: float = ROAD_COEFFICIENT
    name: str = "culvert"

    def __post_init__(self):
        what = f"culvert {self.name!r}"
        choice(what, "shape", self.shape, SHAPES)
        sizes = ("diameter",) if self.shape == "circular" else ("span", "rise")
        for key in sizes:
            if getattr(self, key) is None:
                raise HydraulicsError(f"{what}: a {self.shape} barrel needs {key} (m)")
            positive(what, key, getattr(self, key))
        positive(what, "length", self.length)
        positive(what, "n", self.n)
        up = finite(what, "invert_up", self.invert_up)
        down = finite(what, "invert_down", self.invert_down)
        if not (isinstance(self.barrels, (int, np.integer)) and self.barrels >= 1):
            raise HydraulicsError(f"{what}: barrels must be a whole number >= 1 "
                                  f"(got {self.barrels!r})")
        if self.ke is not None and not (np.isfinite(self.ke) and 0 <= self.ke <= 2):
            raise HydraulicsError(f"{what}: ke must be in [0, 2] (got {self.ke!r})")
        coef = self.coefficients
        if coef.shape != self.shape:
            raise HydraulicsError(f"{what}: inlet {self.inlet!r} is for {coef.shape} barrels, "
                                  f"not {self.shape}; pick a {self.shape} inlet")
        if self.crest is not None:
            crest = finite(what, "crest", self.crest)
            if self.crest_length is None:
                raise HydraulicsError(f"{what}: a road crest needs crest_length (m)")
            positive(what, "crest_length", self.crest_length)
            positive(what, "crest_coefficient", self.crest_coefficient)
            if max(up, down) > crest:
                raise HydraulicsError(f"{what}: invert_up/invert_down ({max(up, down)}) are above "
                                      f"the road crest ({crest}); check the inverts and the crest")
            crown = up + self.barrel.rise
            if crown > crest:
                raise HydraulicsError(f"{what}: the barrel crown at the inlet ({crown:.3f}) is "
                                      f"above the road crest ({crest}); check rise and crest")
        object.__setattr__(self, "_curve", InletCurve(coef, self.slope, self._hc_ratio, self.name))

    @property
    def coefficients(self) -> InletCoefficients:
        """The inlet-control constants (custom ones, or the named inlet's)."""
        if self.inlet_coefficients is not None:
            return self.inlet_coefficients
        return INLETS[choice(f"culvert {self.name!r}", "inlet", self.inlet, INLETS)]

    @property
    def barrel(self) -> Barrel:
        """The geometry of one barrel."""
        if self.shape == "circular":
            return Barrel("circular", float(self.diameter or 0.0), float(self.diameter or 0.0))
        return Barrel("box", float(self.span or 0.0), float(self.rise or 0.0))

    @property
    def slope(self) -> float:
        """Barrel slope S = (invert_up - invert_down) / length."""
        return (self.invert_up - self.invert_down) / self.length

    @property
    def entrance_loss(self) -> float:
        """ke: the override, or the inlet's value."""
        return self.coefficients.ke if self.ke is None else float(self.ke)

    def intensity(self, q_barrel):
        """X = Ku Q/(A D^0.5) per barrel discharge, Ku = 1.811 (SI)."""
        b = self.barrel
        return KU_INLET * np.asarray(q_barrel, dtype=float) / (b.area * np.sqrt(b.rise))

    def _hc_ratio(self, x, g: float = G):
        b = self.barrel
        q = np.asarray(x, dtype=float) * b.area * np.sqrt(b.rise) / KU_INLET
        return b.critical_head(q, g) / b.rise


def inlet_control_headwater(q_barrel, culvert: Culvert, g: float = G):
    """HWi (m above the inlet invert) per barrel discharge, and the regime (0 unsubmerged,
    1 transition, 2 submerged)."""
    x = culvert.intensity(q_barrel)
    curve = culvert.__dict__["_curve"] if g == G else InletCurve(
        culvert.coefficients, culvert.slope, lambda xx: culvert._hc_ratio(xx, g), culvert.name)
    ratio, regime = curve.ratio(x)
    return ratio * culvert.barrel.rise, regime


def outlet_control_headwater(q_barrel, tailwater_depth, culvert: Culvert, g: float = G):
    """HWo = ho + H - S L (m above the inlet invert), with H the full-barrel losses and
    ho = max(TW, (dc + D)/2) (HDS-5 2001, Eqs 5-7; module docstring)."""
    b = culvert.barrel
    q = np.asarray(q_barrel, dtype=float)
    v = q / b.area
    friction = KU_OUTLET * culvert.n ** 2 * culvert.length / b.hydraulic_radius ** 1.33
    losses = (1.0 + culvert.entrance_loss + friction) * v * v / (2.0 * g)
    dc = b.critical_depth(q, g)
    ho = np.maximum(np.asarray(tailwater_depth, dtype=float), 0.5 * (dc + b.rise))
    return ho + losses - culvert.slope * culvert.length


def barrel_headwater(q_barrel_total, tailwater_wse, culvert: Culvert, g: float = G):
    """Headwater (m above the inlet invert) for the flow through all barrels: the higher of
    inlet and outlet control. Returns (hw, hw_inlet, hw_outlet, inlet_regime)."""
    q = np.asarray(q_barrel_total, dtype=float) / culvert.barrels
    hwi, regime = inlet_control_headwater(q, culvert, g)
    hwo = outlet_control_headwater(q, np.asarray(tailwater_wse) - culvert.invert_down, culvert, g)
    return np.maximum(hwi, hwo), hwi, hwo, regime


def road_discharge(headwater_wse, tailwater_wse, culvert: Culvert):
    """Flow over the road crest (m3/s): C L HWr^1.5 times Villemonte's factor; 0 without a crest."""
    if culvert.crest is None:
        return np.zeros(np.shape(headwater_wse))
    h1 = np.maximum(np.asarray(headwater_wse, dtype=float) - culvert.crest, 0.0)
    h2 = np.asarray(tailwater_wse, dtype=float) - culvert.crest
    free = culvert.crest_coefficient * float(culvert.crest_length or 0.0) * h1 ** 1.5
    return free * villemonte_factor(submergence_ratio(h1, h2))


def _split(q, tw, culvert: Culvert, g: float, f_hi):
    """Barrel discharge Qb in (0, Q] with Qb + Qr(HW(Qb)) = Q (regula falsi on all events)."""
    def fun(qb, idx):
        hw = barrel_headwater(qb, tw[idx], culvert, g)[0]
        return qb + road_discharge(culvert.invert_up + hw, tw[idx], culvert) - q[idx]

    qb, _ = bracketed_root(fun, np.zeros(q.size), q.copy(), -q, f_hi, xtol=1e-12 * q.max(),
                           ftol=1e-10 * q.min(), maxiter=200)
    return qb


def culvert_headwater(discharge, tailwater_wse, culvert: Culvert, g: float = G) -> StructureResult:
    """Headwater WSE upstream of ``culvert`` for each event (discharge and tailwater WSE (E,)).
    ``detail`` holds hw_inlet / hw_outlet (m above the inlet invert, for the barrel flow),
    barrel_control ("inlet" / "outlet") and the discharge intensity X."""
    q, tw = event_arrays(discharge, tailwater_wse, f"culvert {culvert.name!r}")
    hw, hwi, hwo, regime = barrel_headwater(q, tw, culvert, g)
    qb = q.copy()
    over = np.zeros(q.size, dtype=bool)
    if culvert.crest is not None:
        f_hi = road_discharge(culvert.invert_up + hw, tw, culvert)
        over = f_hi > 0
        idx = np.flatnonzero(over)
        if idx.size:
            qb[idx] = _split(q[idx], tw[idx], culvert, g, f_hi[idx])
            hw[idx], hwi[idx], hwo[idx], regime[idx] = barrel_headwater(qb[idx], tw[idx],
                                                                        culvert, g)
    hw_wse = culvert.invert_up + hw
    # The split closes the balance to the root tolerance in the headwater; the crest carries the rest
    # exactly, so barrel + crest = Q (a drowned crest makes Q_road very sensitive to the headwater).
    q_road = np.where(over, np.maximum(q - qb, 0.0), road_discharge(hw_wse, tw, culvert))
    inlet = hwi >= hwo
    barrel_control = np.where(inlet, "inlet", "outlet")
    ratio = submergence_ratio(hw_wse - (culvert.crest or 0.0), tw - (culvert.crest or 0.0))
    flags = flags_per_event(q.size, [
        ("outlet_low_head", ~inlet & (hwo < LOW_HEAD_RATIO * culvert.barrel.rise)),
        ("inlet_transition", inlet & (regime == 1)),
        ("adverse_slope", culvert.slope < 0),
        ("road_weir_submerged", over & (ratio > 0)),
        ("road_weir_drowned", over & (ratio >= DROWNED_RATIO))])
    return StructureResult(
        kind="culvert", discharge=q, headwater_wse=hw_wse, tailwater_wse=tw,
        control=np.where(over, "overtopping", barrel_control), q_through=qb, q_over_crest=q_road,
        flags=flags,
        detail={"hw_inlet": hwi, "hw_outlet": hwo, "barrel_control": barrel_control,
                "intensity": culvert.intensity(qb / culvert.barrels), "inlet_regime": regime})
