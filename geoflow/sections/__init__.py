"""Cross-sections of a reach: from the centreline (or from lines the user drew) to sampled ground.

Pure geometry on shapely/numpy: the DEM is reached only through ``dem.sample(x, y)``,
``dem.cell_size``, ``dem.bounds`` and ``dem.transform``; no file is opened here.

- ``cut``: chainages, section lines perpendicular to the smoothed centreline, sampling;
- ``sidelimits``: how far each side reaches (adaptive width, other reaches' centrelines);
- ``userlines``: sections from user-drawn lines (straight or dog-leg);
- ``orient``: the centreline's drawn direction checked against the DEM;
- ``banks``: channel edges from breaks in the ground slope;
- ``lengths``: channel and floodplain reach lengths between neighbouring sections;
- ``common``: sampling, gap filling and checks shared by the above;
- ``channel``: the channel below the DEM surface, from surveyed points (``survey``) and/or a
  shape cut below the flown water surface (``burn``); ``stations`` adds stations to a section.
"""
from .banks import detect_banks
from .channel import fit_channel
from .common import fill_small_gaps
from .cut import cut_sections, grid_stations
from .lengths import floodplain_lengths
from .orient import orient_centreline
from .userlines import sections_from_lines

__all__ = ["cut_sections", "detect_banks", "fit_channel", "fill_small_gaps", "grid_stations", "orient_centreline",
           "floodplain_lengths", "sections_from_lines"]
