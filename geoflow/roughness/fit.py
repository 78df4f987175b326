"""Manning's n multipliers fitted to observed water levels by least squares, and whether the fit is determined.

Parameters: theta_k = ln m_k, one multiplier m_k per group of land-cover classes. Residuals:
r_i(theta) = WSE_computed,i - WSE_observed,i (m) at the marks. ``fit_multipliers`` minimises
sum r_i^2 with ``scipy.optimize.least_squares`` (trust-region reflective, bounds on ln m, Jacobian by
forward differences of step ``diff_step`` in theta). Working in ln m makes a step the same relative
change of n for every group. The caller's residual function must solve the profiles to a tolerance
well below the level change of one step (about 0.6 y diff_step for a wide channel, where
d ln y / d ln n = 0.6 from Manning's equation), or the finite differences are noise.

A weak prior keeps what the marks cannot decide at the table's n: the residual vector carries one
more row per group, (sigma / PRIOR_SPREAD) theta_k, i.e. a Gaussian prior ln m_k ~ N(0, PRIOR_SPREAD^2)
against marks of accuracy sigma (Tikhonov regularisation; Tikhonov & Arsenin 1977, *Solutions of
Ill-Posed Problems*, from memory). Where the marks determine a multiplier the pull is negligible (a
relative shift of about (sigma / PRIOR_SPREAD)^2 / sum J_ik^2 of ln m, below 0.1 % for a 3 cm accuracy
and marks that move 1 m per unit ln m); on a ridge, or for a group no mark feels, the fit takes the
multipliers closest to 1 that the marks allow instead of wandering along the ridge.

Identifiability (channel and floodplain n trade off: at one discharge a whole ridge of pairs gives
the same levels; marks at two or more flows, in bank and out of bank, separate them). At the solution,
with J = dr/dtheta (m per unit ln m):

- rank: J must have full column rank (smallest singular value above ``RANK_TOLERANCE`` times the
  largest); a group whose n no mark feels has a zero column;
- covariance C = s^2 (J^T J)^-1 with s^2 = max(SSR / (m - p), sigma^2), sigma the accuracy of a mark
  (Gauss-Newton linearisation; e.g. Seber & Wild 1989, *Nonlinear Regression*, ch. 2, from memory).
  sqrt(C_kk) is the standard error of ln m_k, i.e. the relative standard error of m_k.

The fit is well determined when there are at least as many marks as groups, J has full rank and every
relative standard error is at most ``SE_LIMIT``. A multiplier on a bound is reported (n then absorbs
something else: missing bathymetry, DEM error, a wrong flow).
"""
from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

RANK_TOLERANCE = 1e-8     # relative singular value below which J is taken as rank deficient
SE_LIMIT = 0.10           # largest relative standard error of a well-determined multiplier
PRIOR_SPREAD = 1.0        # standard deviation of the weak prior on ln m (a factor e either way)
DIFF_STEP = 1e-3          # finite-difference step in ln m (0.1 % of n)


@dataclass(frozen=True)
class Fit:
    """Result of :func:`fit_multipliers` (arrays per group, (p,), or per mark, (m,))."""

    multipliers: np.ndarray
    residuals: np.ndarray          # computed - observed, m, at the solution
    rmse: float                    # m
    jacobian: np.ndarray           # (m, p) d residual / d ln m, m
    singular_values: np.ndarray
    std_error: np.ndarray          # relative standard error of each multiplier (inf when not determined)
    at_bound: np.ndarray           # bool: the multiplier sits on a bound
    well_determined: bool
    reasons: tuple[str, ...]       # why it is not well determined (empty when it is)
    evaluations: int               # residual evaluations (each is a full solve)

    @property
    def condition(self) -> float:
        """Ratio of largest to smallest singular value of J (inf when rank deficient)."""
        s = self.singular_values
        return float(s[0] / s[-1]) if s.size and s[-1] > 0 else float("inf")


def fit_multipliers(residual: Callable[[np.ndarray], np.ndarray], groups: int, bounds=(0.5, 2.0),
                    mark_accuracy: float = 0.03, start=None, max_evaluations: int = 60) -> Fit:
    """Least-squares multipliers (``groups`` of them) for ``residual(ln m) -> (m,)`` in metres.

    ``bounds`` (lowest, highest) multiplier; ``start`` multipliers (default 1); ``mark_accuracy`` m,
    sigma in the covariance (module notes).
    """
    lo, hi = np.log(bounds[0]), np.log(bounds[1])
    x0 = np.zeros(groups) if start is None else np.log(np.asarray(start, dtype=float))
    x0 = np.clip(x0, lo + 1e-9, hi - 1e-9)
    count = [0]
    weight = mark_accuracy / PRIOR_SPREAD

    def fun(x):
        count[0] += 1
        return np.concatenate([np.asarray(residual(x), dtype=float), weight * x])

    from scipy.optimize import least_squares  # here: 0.35 s to import, used only by calibrations
    res = least_squares(fun, x0, bounds=(np.full(groups, lo), np.full(groups, hi)), method="trf", x_scale=1.0,
                        diff_step=DIFF_STEP, ftol=1e-10, xtol=1e-8, gtol=1e-10, max_nfev=max_evaluations)
    at_bound = (res.active_mask != 0) | (np.abs(res.x - lo) < 1e-6) | (np.abs(res.x - hi) < 1e-6)
    m = res.fun.size - groups
    fit = _diagnose(res.x, res.fun[:m], res.jac[:m], at_bound, mark_accuracy, count[0])
    if res.status == 0:       # max_nfev reached
        return replace(fit, well_determined=False, reasons=fit.reasons + (
            f"the fit stopped after {count[0]} solves without converging",))
    return fit


def _diagnose(x, r, jac, at_bound, sigma: float, evaluations: int) -> Fit:
    """Rank, covariance and the well-determined verdict at the solution (module notes)."""
    m, p = jac.shape
    s = np.linalg.svd(jac, compute_uv=False) if jac.size else np.zeros(0)
    full_rank = s.size == p and s[0] > 0 and s[-1] > RANK_TOLERANCE * s[0]
    dof = m - p
    s2 = max(float(r @ r) / dof if dof > 0 else 0.0, sigma * sigma)
    se = np.full(p, np.inf)
    if full_rank:
        se = np.sqrt(np.diag(s2 * np.linalg.inv(jac.T @ jac)))
    reasons = []
    if m < p:
        reasons.append(f"{m} mark(s) for {p} multiplier(s)")
    if not full_rank:
        reasons.append("the marks do not tell the groups apart (the Jacobian is rank deficient: some group's n "
                       "changes no mark, or the groups change every mark in the same proportion)")
    elif np.any(se > SE_LIMIT) and p == 1:
        reasons.append(f"the marks barely respond to the multiplier (relative standard error {se[0]:.0%})")
    elif np.any(se > SE_LIMIT):
        reasons.append(f"relative standard error up to {np.max(se):.0%} (condition number {s[0] / s[-1]:.3g}); "
                       "the groups trade off")
    return Fit(multipliers=np.exp(x), residuals=np.asarray(r, dtype=float),
               rmse=float(np.sqrt(np.mean(r * r))) if m else float("nan"), jacobian=np.asarray(jac),
               singular_values=s, std_error=se, at_bound=np.asarray(at_bound, dtype=bool),
               well_determined=not reasons, reasons=tuple(reasons), evaluations=evaluations)
