"""Constants used across geoflow, each defined once here (pure: no imports).

Units are SI: metres, seconds, m3/s.
"""
from __future__ import annotations

#: Standard acceleration of gravity, m/s2 (the conventional value, CGPM 1901); ``[hydraulics] gravity`` overrides it.
G = 9.80665

#: The engineering caution carried by the README, ``--help``, reports, rasters, GeoPackages and the manifest.
CAUTION = ("Screening-level 1D steady-flow estimates. Results must be reviewed by a qualified engineer; "
           "local codes, regulators and licensed practice govern their use.")

#: No-data value of every raster geoflow writes (float32).
NODATA = -9999.0

#: Longest reach id or event name, in characters: both become parts of file names, and with the
#: suffixes geoflow adds a file name stays well under the 255 bytes most file systems allow.
MAX_NAME_LENGTH = 100

#: Vertical units of a DEM and their factor to metres (international and US survey foot).
VERTICAL_UNITS = {"m": 1.0, "ft": 0.3048, "us_ft": 1200.0 / 3937.0}

#: Flood-outline parts smaller than this many output cells are left out of the outlines (the
#: rasters keep them): they are cells that touch the flood only at a corner (wet areas are
#: 8-connected, outline polygons 4-connected), e.g. 4 cells = 16 m2 on a 2 m grid.
MIN_OUTLINE_PART_CELLS = 4
