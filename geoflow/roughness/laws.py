"""Manning's n that varies with the flow: per-class laws of n against depth or discharge.

A land-cover class may give ``n_by_depth`` (n against the local flow depth over each ground
segment) or ``n_by_discharge`` (n against the event's discharge at the reach's upstream end),
each a list of (value, n) points interpolated linearly and held constant beyond the ends. In
natural channels n changes with stage and discharge (Chow 1959, *Open-Channel Hydraulics*,
sec. 5-8, from memory); the laws let a user give that change explicitly.

Pure numpy. ``classes`` maps class name -> an object with ``n_by_depth`` and ``n_by_discharge``
attributes (tuples of (x, n) pairs, possibly empty), e.g. :class:`geoflow.config.RoughnessClass`.
"""
from __future__ import annotations

from collections.abc import Mapping

import numpy as np


def laws_of(classes: Mapping, kind: str) -> dict[str, np.ndarray]:
    """{class: (k, 2) array of (x, n) points} for the classes that give law ``kind``
    (``"n_by_depth"`` or ``"n_by_discharge"``)."""
    return {name: np.array(getattr(c, kind)) for name, c in classes.items() if getattr(c, kind, ())}


def varies_with_discharge(classes: Mapping) -> bool:
    """True when some class's n depends on the discharge (tables must then be built per event)."""
    return bool(laws_of(classes, "n_by_discharge"))


def n_at_discharge(section, classes: Mapping, discharge: float | None) -> np.ndarray:
    """Manning's n per segment of ``section`` at the reach's upstream ``discharge`` (m3/s).

    Segments whose class gives ``n_by_discharge`` take n interpolated at ``discharge``; the
    others keep their base n. Without laws (or with ``discharge`` None) the base n is returned.
    """
    laws = laws_of(classes, "n_by_discharge")
    n = np.asarray(section.n, dtype=float)
    if not laws or discharge is None:
        return n
    n = n.copy()
    for name, law in laws.items():
        n[section.landcover == name] = np.interp(discharge, law[:, 0], law[:, 1])
    return n


def n_by_depth_table(section, classes: Mapping) -> tuple[np.ndarray, np.ndarray] | None:
    """(depths (k,), n (k, m-1)) for :func:`geoflow.hydraulics.build_table`, or None when no
    class present in ``section`` varies with depth: row j holds every segment's n when the
    local depth is ``depths[j]`` (segments of classes without a depth law keep their base n)."""
    laws = {k: v for k, v in laws_of(classes, "n_by_depth").items() if np.any(section.landcover == k)}
    if not laws:
        return None
    depths = np.unique(np.concatenate([law[:, 0] for law in laws.values()]))
    values = np.repeat(np.asarray(section.n, dtype=float)[None, :], depths.size, axis=0)
    for name, law in laws.items():
        values[:, section.landcover == name] = np.interp(depths, law[:, 0], law[:, 1])[:, None]
    return depths, values
