"""Calibration of Manning's n to observed water levels, one reach at a time (inside its task).

Where it runs: each reach is calibrated in its own task from the marks that lie on it, and every
output of that reach (all events, roughness cases, rating curves) is then computed with its
calibrated n. Per reach because the n a class needs differs from reach to reach (the same
"pasture" or "channel" class covers different grass, bed material and channel shape, and n
absorbs what the DEM misses there), because calibrating rating curves reach by reach is the
practice the method comes from, and because it keeps each reach one independent task (it receives
plain values, opens its own inputs and runs the same in a pool or on Dask; --resume stays per
unit). Reaches without marks keep the table's n. A tributary that ends at a junction is calibrated
against the levels its (already calibrated) receiving reach gives it.

Each residual evaluation builds the section tables once for the trial multipliers (the ground and
the n layout of the sections are reused) and solves every event with marks together
(:func:`geoflow.batch.reach.solve_reach`), with the energy balance closed to
``CALIBRATION_TOLERANCE`` so the finite differences of :func:`geoflow.roughness.fit.fit_multipliers`
measure the model, not the solver's tolerance.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..config import Config
from ..errors import GeoflowError, HydraulicsError
from ..outputs import CALIBRATION_COLUMNS
from ..roughness import group_factors, group_members
from ..roughness.fit import fit_multipliers
from . import reach

CALIBRATION_TOLERANCE = 1e-5     # m, energy-balance tolerance of the solves inside the fit


@dataclass
class Calibration:
    """What calibrating one reach gave: n factor per class, the manifest record, calibration.csv rows."""

    factors: dict
    record: dict
    rows: pd.DataFrame
    warnings: list = field(default_factory=list)


def wse_at_marks(geom, profiles: dict, marks) -> np.ndarray:
    """Computed WSE at each mark: linear in chainage between the sections either side."""
    chainage = np.array([s.chainage for s in geom.sections])
    out = np.empty(marks.chainage.size)
    for ev in np.unique(marks.event):
        prof = profiles[ev]
        if isinstance(prof, GeoflowError):
            raise prof
        sel = marks.event == ev
        out[sel] = np.interp(marks.chainage[sel], chainage, np.asarray(prof.wse, dtype=float))
    return out


def calibrate_reach(cfg: Config, geom, marks, junction_wse: dict | None = None) -> Calibration:
    """Fit the multipliers of the [calibration] groups present on this reach to its marks."""
    cal = cfg.calibration
    present = sorted({str(c) for s in geom.sections for c in np.asarray(s.landcover)})
    members = group_members(cal.adjust, cfg.roughness.channel_class, present)
    active = {g: cls for g, cls in members.items() if set(cls) & set(present)}
    names = list(active)
    events = [e for e in cfg.events if e.name in set(marks.event)]
    opts = reach.solver_options(cfg, tolerance=CALIBRATION_TOLERANCE)

    def factors_for(theta) -> dict:
        return group_factors(active, dict(zip(names, np.exp(theta))))

    def residual(theta):
        profiles = reach.solve_reach(cfg, geom, events, junction_wse, factors=factors_for(theta), options=opts)
        return wse_at_marks(geom, profiles, marks) - marks.wse

    rid = geom.reach_id
    try:
        if names:
            fit = fit_multipliers(residual, len(names), bounds=cal.bounds, mark_accuracy=cal.mark_accuracy)
            theta, res = np.log(fit.multipliers), fit.residuals
        else:
            fit, theta = None, np.zeros(0)
            res = residual(theta)
    except GeoflowError as exc:
        raise HydraulicsError(f"reach {rid!r}: calibration to {cal.observations.name} failed: {exc}") from None
    record, warnings = _record(cfg, geom, marks, members, names, fit, res, events)
    rows = pd.DataFrame({"reach_id": rid, "mark": marks.feature.astype(int), "event": marks.event,
                         "chainage_m": marks.chainage, "observed_wse_m": marks.wse,
                         "computed_wse_m": marks.wse + res, "residual_m": res}, columns=list(CALIBRATION_COLUMNS))
    return Calibration(factors=factors_for(theta), record=record, rows=rows, warnings=warnings)


def _reasons(rid, names, fit, events) -> list[str]:
    """Why the fit is not well determined, in the engineer's terms (plus the fit's own reasons)."""
    out = list(fit.reasons) if fit is not None else ["no class of the [calibration] groups lies on this reach"]
    if fit is None or fit.well_determined:
        return out
    flows = {e.upstream_discharge(rid) for e in events}
    if len(flows) < 2 and len(names) > 1:
        out.append("all marks are from one flow: at one discharge the groups' n trade off; add marks from another "
                   "flood")
    for k, g in enumerate(names):
        if not np.any(np.abs(fit.jacobian[:, k]) > 1e-9):
            hint = " (every mark is in bank at its flow)" if g == "floodplain" else ""
            out.append(f"no mark responds to the n of group {g!r}{hint}")
    return out


def _record(cfg, geom, marks, members, names, fit, res, events) -> tuple[dict, list[str]]:
    """The manifest entry of one reach's calibration and its warnings."""
    rid = geom.reach_id
    groups = {}
    for g, cls in members.items():
        k = names.index(g) if g in names else None
        entry = {"classes": list(cls), "multiplier": 1.0, "present": k is not None}
        if k is not None and fit is not None:
            entry.update(multiplier=float(fit.multipliers[k]), std_error=float(fit.std_error[k]),
                         at_bound=bool(fit.at_bound[k]))
        groups[g] = entry
    reasons = _reasons(rid, names, fit, events)
    well = fit is not None and fit.well_determined
    bound_hit = bool(fit is not None and fit.at_bound.any())
    n = {c: cfg.roughness.classes[c].n * groups[g]["multiplier"] for g, cls in members.items() for c in cls
         if c in cfg.roughness.classes}
    record = {"marks": int(marks.wse.size), "events": [e.name for e in events], "multipliers":
              {g: e["multiplier"] for g, e in groups.items()}, "groups": groups, "calibrated_n": n,
              "rmse_m": float(np.sqrt(np.mean(res * res))), "max_abs_residual_m": float(np.max(np.abs(res))),
              "well_determined": well, "bound_hit": bound_hit, "reasons": [] if well else reasons,
              "solves": 0 if fit is None else fit.evaluations,
              "condition_number": None if fit is None or not np.isfinite(fit.condition) else fit.condition}
    warnings = []
    mult = ", ".join(f"{g} x{e['multiplier']:.3f}" for g, e in groups.items() if e["present"])
    if not well:
        warnings.append(f"reach {rid}: calibration to {marks.wse.size} mark(s) is not well determined "
                        f"({'; '.join(reasons)}); multipliers {mult or 'none'} were used - treat them with care")
    if bound_hit:
        at = [g for g, e in groups.items() if e.get("at_bound")]
        warnings.append(f"reach {rid}: calibration multiplier(s) of {', '.join(at)} stopped at a bound "
                        f"{list(cfg.calibration.bounds)}: n is absorbing something else (missing channel below the "
                        "DEM, DEM error, a wrong flow or a mark); check before using the result")
    return record, warnings
