"""The result record of a steady profile and its assembly from solved water levels."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.hydraulics.geometry import fast_properties, specific_force
from geoflow.hydraulics.step import CRITICAL, NO_CONVERGENCE


@dataclass(frozen=True, eq=False)
class Profile:
    """A steady water-surface profile; every array has one value per section, ordered upstream
    -> downstream (part arrays are (N, 3): left floodplain, channel, right floodplain). SI units.
    Froude number: mean velocity over sqrt(g A / T). ``specific_force``: beta Q^2/(gA) + A ybar."""

    wse: np.ndarray
    energy: np.ndarray
    critical_wse: np.ndarray
    velocity: np.ndarray
    froude: np.ndarray
    alpha: np.ndarray
    area: np.ndarray
    top_width: np.ndarray
    wetted_perimeter: np.ndarray
    conveyance: np.ndarray
    friction_slope: np.ndarray
    discharge: np.ndarray
    regime: np.ndarray
    flags: tuple
    part_discharge: np.ndarray
    part_area: np.ndarray
    part_velocity: np.ndarray
    energy_residual: np.ndarray
    specific_force: np.ndarray
    structures: tuple = ()      # links.StructureLevel of each structure on the reach (upstream order)


def section_props(tables, wse):
    """Properties of each section at its WSE for every event, ``wse`` (E, N): a dict of arrays
    (E, N) and, for the part arrays, (E, N, 3). One evaluation per section for all events."""
    ps = [fast_properties(t, wse[:, i]) for i, t in enumerate(tables)]
    names = ("area", "top_width", "wetted_perimeter", "conveyance", "alpha", "beta",
             "first_moment", "not_contained", "part_area", "part_conveyance")
    return {k: np.stack([getattr(p, k) for p in ps], axis=1) for k in names}


_FLAG_WORDS: dict = {}


def _flag_words(code: int) -> tuple:
    """Flag words of one section from its code (boundary + 2 status + 6 not_contained +
    12 jump + 24 several), built once per code."""
    words = _FLAG_WORDS.get(code)
    if words is None:
        boundary, status = code % 2, (code // 2) % 3
        f = ["boundary"] if boundary else []
        if status == NO_CONVERGENCE:
            f += ["no_convergence", "critical_fallback"]
        elif status == CRITICAL:
            f.append("critical_fallback")
        for bit, word in ((6, "not_contained"), (12, "jump_upstream"), (24, "several_critical_depths")):
            if (code // bit) % 2:
                f.append(word)
        words = _FLAG_WORDS[code] = tuple(f)
    return words


def _flag_codes(status, boundary, jump, several, not_contained):
    return (boundary.astype(np.int64) + 2 * status.astype(np.int64) + 6 * not_contained
            + 12 * jump + 24 * several)


def _fields(p, q, wc, wse, residual, status, g) -> dict:
    """Every Profile field but the flags, elementwise on arrays (E, N) (and (E, N, 3))."""
    a, k = p["area"], p["conveyance"]
    share = p["part_conveyance"] / k[..., None]
    part_q = share * q[..., None]
    with np.errstate(divide="ignore", invalid="ignore"):
        part_v = np.where(p["part_area"] > 0, part_q / p["part_area"], 0.0)
    velocity = q / a
    regime = np.where(status != 0, "critical",
                      np.where(np.abs(wse - wc) <= 1e-6, "critical",
                               np.where(wse > wc, "subcritical", "supercritical")))
    return dict(
        wse=wse.copy(), energy=wse + p["alpha"] * velocity ** 2 / (2.0 * g),
        critical_wse=wc.copy(), velocity=velocity,
        froude=velocity / np.sqrt(g * a / p["top_width"]), alpha=p["alpha"], area=a,
        top_width=p["top_width"], wetted_perimeter=p["wetted_perimeter"], conveyance=k,
        friction_slope=(q / k) ** 2, discharge=q.copy(), regime=regime.astype(str),
        part_discharge=part_q, part_area=p["part_area"], part_velocity=part_v,
        energy_residual=residual.copy(),
        specific_force=specific_force(_PropsView(p), q, g))


def assemble_events(p, q, wc, result, boundary, jump, several, g, marks=(), structures=None) -> tuple:
    """E Profiles from stacked properties ``p`` (``section_props``, arrays (E, N)), discharge,
    critical WSE, the solver's (wse, residual, status) and the flag arrays, all (E, N): the
    fields computed once for all events, then one Profile per event. ``marks``: more flag
    words, [(word, mask (E, N))], added after the solver's own; ``structures``: per event the
    tuple of ``links.StructureLevel`` (or None)."""
    wse, residual, status = result
    fields = _fields(p, q, wc, wse, residual, status, g)
    codes = _flag_codes(status, boundary, jump, several, p["not_contained"])
    flags = [[_flag_words(c) for c in codes[e].tolist()] for e in range(q.shape[0])]
    for word, mask in marks:
        for e, i in zip(*np.nonzero(mask)):
            flags[e][i] = flags[e][i] + (word,)
    return tuple(Profile(**{f: v[e] for f, v in fields.items()}, flags=tuple(flags[e]),
                         structures=() if structures is None else structures[e])
                 for e in range(q.shape[0]))


class _PropsView:
    """Minimal attribute view of stacked properties for ``specific_force``."""

    def __init__(self, p):
        self.beta, self.area, self.first_moment = p["beta"], p["area"], p["first_moment"]
