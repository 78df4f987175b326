"""Adding stations to a section without changing its ground: what a new shape or survey needs first.

Pure numpy on :class:`geoflow.records.Section` records.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from ..records import Section

STATION_TOLERANCE = 1e-4     # m: a new station this close to an existing one is not added


def insert_stations(section: Section, new_stations) -> Section:
    """The section with stations added at ``new_stations`` (m from the left end).

    Ground (and ``dem_elevation``) at a new station is interpolated linearly between its
    neighbours; the segment it falls in is split in two that keep its n, land-cover class and
    part. Stations outside the section, or within STATION_TOLERANCE of an existing one, are skipped.
    """
    st = section.station
    add = np.unique(np.asarray(new_stations, dtype=np.float64).ravel())
    add = add[(add > st[0] + STATION_TOLERANCE) & (add < st[-1] - STATION_TOLERANCE)]
    if add.size:
        near = np.min(np.abs(add[:, None] - st[None, :]), axis=1)
        add = add[near > STATION_TOLERANCE]
    if add.size > 1:
        add = add[np.concatenate(([True], np.diff(add) > STATION_TOLERANCE))]
    if add.size == 0:
        return section
    station = np.union1d(st, add)
    owner = np.clip(np.searchsorted(st, 0.5 * (station[:-1] + station[1:])) - 1, 0, st.size - 2)
    changes = {"station": station, "elevation": np.interp(station, st, section.elevation)}
    if section.dem_elevation is not None:
        changes["dem_elevation"] = np.interp(station, st, section.dem_elevation)
    for name in ("n", "landcover", "part"):
        values = getattr(section, name)
        if values is not None:
            changes[name] = np.asarray(values)[owner]
    return dataclasses.replace(section, **changes)
