"""Culvert barrel geometry: circular and box (rectangular) barrels, flow area and top width
of a partly full barrel, critical depth and the critical head Hc = dc + Vc^2/2g.

Circular barrel of diameter D at depth y (closed-form circular segment): central angle
theta = 2 arccos(1 - 2y/D), A = D^2 (theta - sin theta)/8, T = D sin(theta/2) (Chow 1959,
Open-Channel Hydraulics, ch. 2, from memory). Critical depth satisfies Q^2 T/(g A^3) = 1;
g A^3/(Q^2 T) rises monotonically from 0 at y = 0 to infinity at y = D, so the root is unique
and is found on ln(g A^3/(Q^2 T)) by bracketed regula falsi. Box barrel of span B:
dc = (q^2/g)^(1/3), q = Q/B. HDS-5 caps dc at the barrel rise (Normann et al. 2001, ch. III).
"""
from __future__ import annotations

import numpy as np

from geoflow.hydraulics.roots import bracketed_root

SHAPES = ("circular", "box")


def circle_area_top(diameter: float, depth):
    """Flow area (m2) and top width (m) of a circular barrel at ``depth`` (0..D)."""
    y = np.clip(np.asarray(depth, dtype=float), 0.0, diameter)
    theta = 2.0 * np.arccos(1.0 - 2.0 * y / diameter)
    area = diameter ** 2 * (theta - np.sin(theta)) / 8.0
    return area, diameter * np.sin(theta / 2.0)


def critical_depth_circular(discharge, diameter: float, g: float):
    """Critical depth (m) in a circular barrel for each discharge (> 0), below D."""
    q = np.atleast_1d(np.asarray(discharge, dtype=float)).ravel()

    def fun(y, idx):
        a, t = circle_area_top(diameter, y)
        with np.errstate(divide="ignore"):
            return np.log(g * a ** 3) - np.log(q[idx] ** 2 * t)

    lo = np.full(q.size, diameter * 1e-9)
    hi = np.full(q.size, diameter * (1.0 - 1e-12))
    idx = np.arange(q.size)
    y, _ = bracketed_root(fun, lo, hi, fun(lo, idx), np.full(q.size, np.inf), xtol=1e-14,
                          ftol=1e-13, maxiter=200)
    return y


def critical_depth_box(discharge, span: float, rise: float, g: float):
    """Critical depth (m) in a box barrel, (q^2/g)^(1/3) with q = Q/span, capped at the rise."""
    q = np.asarray(discharge, dtype=float)
    return np.minimum((q / span) ** (2.0 / 3.0) / g ** (1.0 / 3.0), rise)


class Barrel:
    """One barrel: ``shape`` "circular" (``span`` = ``rise`` = diameter) or "box"."""

    def __init__(self, shape: str, span: float, rise: float):
        self.shape, self.span, self.rise = shape, float(span), float(rise)
        if shape == "circular":
            self.area = np.pi * self.rise ** 2 / 4.0
            self.perimeter = np.pi * self.rise
        else:
            self.area = self.span * self.rise
            self.perimeter = 2.0 * (self.span + self.rise)

    @property
    def hydraulic_radius(self) -> float:
        """Full-barrel hydraulic radius A/P, m."""
        return self.area / self.perimeter

    def critical_depth(self, discharge, g: float):
        """Critical depth (m) per discharge through this barrel."""
        if self.shape == "circular":
            return critical_depth_circular(discharge, self.rise, g)
        return critical_depth_box(discharge, self.span, self.rise, g)

    def critical_head(self, discharge, g: float):
        """Hc = dc + Vc^2/2g = dc + A(dc)/(2 T(dc)) (specific energy at critical depth), m."""
        dc = self.critical_depth(discharge, g)
        if self.shape == "circular":
            a, t = circle_area_top(self.rise, dc)
            return dc + a / (2.0 * t)
        q = np.asarray(discharge, dtype=float)
        return dc + (q / (self.span * dc)) ** 2 / (2.0 * g)
