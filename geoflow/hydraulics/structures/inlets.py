"""Culvert inlet control after FHWA HDS-5 (Normann, Houghtalen & Johnston 2001, Hydraulic
Design of Highway Culverts, 2nd ed., FHWA-NHI-01-020, Appendix A; Schall et al. 2012, 3rd
ed., FHWA-HIF-12-026, Appendix A).

With D the barrel rise, A the full barrel area, S the barrel slope and the discharge
intensity X = Ku Q/(A D^0.5), Ku = 1.811 in SI (X is then the US-unit value of Q/(A D^0.5)):
- unsubmerged form 1:  HWi/D = Hc/D + K X^M + Ks S   (Hc = dc + Vc^2/2g)
- unsubmerged form 2:  HWi/D = K X^M                 (no slope term)
- submerged:           HWi/D = c X^2 + Y + Ks S
Ks = -0.5, or +0.7 for inlets mitered to the slope. The unsubmerged form applies for
X <= 3.5, the submerged one for X >= 4.0 (HDS-5 2012, Appendix A).

Transition 3.5 < X < 4.0: HDS-5 draws the curve "between and tangent to" the two forms. Here
it is the cubic Hermite curve that joins the unsubmerged value and slope at X = 3.5 to the
submerged value and slope at X = 4.0: tangent to both (continuous with a continuous slope),
so the headwater has no corner in Q. It is monotone when the Fritsch-Carlson condition holds
(Fritsch & Carlson 1980, SIAM J. Numer. Anal. 17:238-246): with the secant
d = (HW_sub(4.0) - HW_unsub(3.5))/0.5 > 0 and a, b the end slopes over d, a^2 + b^2 <= 9.
Where a custom inlet breaks it, both end slopes are scaled by 3/sqrt(a^2 + b^2), which keeps
the curve monotone (and continuous) at the cost of tangency. A linear blend in X over
3.5-4.0, also used in practice, is monotone only when the submerged curve lies above the
unsubmerged one and has corners at both ends; it was not chosen.

Inlet names (plain words of this project) map to HDS-5 2001 Table 9 / 2012 Table A.1
constants; the entrance loss ke is from HDS-5 2001 Table 12 (0.9 thin-edge projecting and 0.2
bevels / groove ends found in the source; the rest from memory).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.errors import HydraulicsError

KU_INLET = 1.811
X_UNSUBMERGED, X_SUBMERGED = 3.5, 4.0


@dataclass(frozen=True)
class InletCoefficients:
    """HDS-5 inlet-control constants of one inlet: ``form`` 1 or 2, K, M (unsubmerged),
    c, Y (submerged), Ks (slope term), the entrance loss ``ke`` and the barrel ``shape``."""

    shape: str
    form: int
    k: float
    m: float
    c: float
    y: float
    ks: float
    ke: float
    label: str = "custom inlet"

    def __post_init__(self):
        if self.form not in (1, 2):
            raise HydraulicsError(f"inlet {self.label!r}: form must be 1 or 2 (got {self.form!r})")
        for key in ("k", "m", "c", "y"):
            v = getattr(self, key)
            if not (np.isfinite(v) and v > 0):
                raise HydraulicsError(f"inlet {self.label!r}: {key} must be finite and > 0 "
                                      f"(got {v!r})")
        if not (np.isfinite(self.ke) and 0 <= self.ke <= 2):
            raise HydraulicsError(f"inlet {self.label!r}: ke must be in [0, 2] (got {self.ke!r})")


def _c(form, k, m, c, y, ks, ke, label, shape="circular"):
    return InletCoefficients(shape, form, k, m, c, y, ks, ke, label)


INLETS = {
    "concrete_square_edge_headwall": _c(1, 0.0098, 2.0, 0.0398, 0.67, -0.5, 0.5,
                                        "circular concrete, square edge with headwall"),
    "concrete_groove_end_headwall": _c(1, 0.0018, 2.0, 0.0292, 0.74, -0.5, 0.2,
                                       "circular concrete, groove end with headwall"),
    "concrete_groove_end_projecting": _c(1, 0.0045, 2.0, 0.0317, 0.69, -0.5, 0.2,
                                         "circular concrete, groove end projecting"),
    "cmp_headwall": _c(1, 0.0078, 2.0, 0.0379, 0.69, -0.5, 0.5,
                       "corrugated metal pipe, headwall"),
    "cmp_mitered": _c(1, 0.0210, 1.33, 0.0463, 0.75, 0.7, 0.7,
                      "corrugated metal pipe, mitered to slope"),
    "cmp_projecting": _c(1, 0.0340, 1.50, 0.0553, 0.54, -0.5, 0.9,
                         "corrugated metal pipe, projecting"),
    "beveled_ring_45": _c(1, 0.0018, 2.50, 0.0300, 0.74, -0.5, 0.2,
                          "circular, beveled ring 45 degrees"),
    "beveled_ring_33_7": _c(1, 0.0018, 2.50, 0.0243, 0.83, -0.5, 0.2,
                            "circular, beveled ring 33.7 degrees"),
    "box_wingwall_30_to_75": _c(1, 0.026, 1.0, 0.0347, 0.81, -0.5, 0.4,
                                "concrete box, wingwall flare 30 to 75 degrees", "box"),
    "box_wingwall_90_or_15": _c(1, 0.061, 0.75, 0.0400, 0.80, -0.5, 0.5,
                                "concrete box, wingwall flare 90 or 15 degrees", "box"),
    "box_wingwall_0": _c(1, 0.061, 0.75, 0.0423, 0.82, -0.5, 0.7,
                         "concrete box, wingwall flare 0 degrees", "box"),
    "box_headwall_chamfer_19mm": _c(2, 0.515, 0.667, 0.0375, 0.79, -0.5, 0.5,
                                    "concrete box, 90-degree headwall, 19 mm chamfers", "box"),
    "box_headwall_bevel_45": _c(2, 0.495, 0.667, 0.0314, 0.82, -0.5, 0.2,
                                "concrete box, 90-degree headwall, 45-degree bevels", "box"),
    "box_headwall_bevel_33_7": _c(2, 0.486, 0.667, 0.0252, 0.865, -0.5, 0.2,
                                  "concrete box, 90-degree headwall, 33.7-degree bevels", "box"),
}


def unsubmerged_form1_ratio(x, hc_ratio, k, m, ks, slope):
    """HDS-5 unsubmerged form 1: HWi/D = Hc/D + K X^M + Ks S."""
    return np.asarray(hc_ratio) + k * np.asarray(x, dtype=float) ** m + ks * slope


def unsubmerged_form2_ratio(x, k, m):
    """HDS-5 unsubmerged form 2: HWi/D = K X^M."""
    return k * np.asarray(x, dtype=float) ** m


def submerged_ratio(x, c, y, ks, slope):
    """HDS-5 submerged inlet: HWi/D = c X^2 + Y + Ks S."""
    return c * np.asarray(x, dtype=float) ** 2 + y + ks * slope


class InletCurve:
    """HWi/D as a function of X for one inlet, barrel and slope, with the Hermite transition
    of the module docstring. ``hc_ratio(x)`` gives Hc/D of the barrel at discharge intensity
    x (needed by form 1 only)."""

    def __init__(self, coef: InletCoefficients, slope: float, hc_ratio, name: str = "culvert"):
        self.coef, self.slope, self.hc_ratio = coef, float(slope), hc_ratio
        a, b = X_UNSUBMERGED, X_SUBMERGED
        p0, m0 = self._unsubmerged(np.array([a]))[0], self._unsubmerged_slope(a)
        p1, m1 = submerged_ratio(b, coef.c, coef.y, coef.ks, slope), 2.0 * coef.c * b
        d = (p1 - p0) / (b - a)
        if not d > 0:
            raise HydraulicsError(
                f"culvert {name!r}: inlet {coef.label!r} gives a submerged headwater at X = 4.0 "
                "below the unsubmerged one at X = 3.5; check the inlet coefficients and slope")
        ra, rb = m0 / d, m1 / d
        tau = min(1.0, 3.0 / np.hypot(ra, rb)) if min(ra, rb) >= 0 else 0.0
        self.limited = tau < 1.0
        self.ends = (p0, tau * m0, p1, tau * m1)

    def _unsubmerged(self, x):
        c = self.coef
        if c.form == 2:
            return unsubmerged_form2_ratio(x, c.k, c.m)
        return unsubmerged_form1_ratio(x, self.hc_ratio(x), c.k, c.m, c.ks, self.slope)

    def _unsubmerged_slope(self, x0: float) -> float:
        h = 1e-4
        f = self._unsubmerged(np.array([x0 - h, x0 + h]))
        return float((f[1] - f[0]) / (2.0 * h))

    def ratio(self, x):
        """HWi/D at discharge intensities ``x`` (E,), and the regime per event
        (0 unsubmerged, 1 transition, 2 submerged)."""
        x = np.asarray(x, dtype=float)
        c = self.coef
        out = submerged_ratio(x, c.c, c.y, c.ks, self.slope)
        regime = np.where(x <= X_UNSUBMERGED, 0, np.where(x >= X_SUBMERGED, 2, 1))
        low = regime == 0
        if low.any():
            out[low] = self._unsubmerged(x[low])
        mid = regime == 1
        if mid.any():
            out[mid] = self._hermite(x[mid])
        return out, regime

    def _hermite(self, x):
        p0, m0, p1, m1 = self.ends
        h = X_SUBMERGED - X_UNSUBMERGED
        t = (x - X_UNSUBMERGED) / h
        t2, t3 = t * t, t * t * t
        return ((2 * t3 - 3 * t2 + 1) * p0 + (t3 - 2 * t2 + t) * h * m0
                + (-2 * t3 + 3 * t2) * p1 + (t3 - t2) * h * m1)
