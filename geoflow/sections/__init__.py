"""Cross-sections of a reach: from the centreline (or from lines the user drew) to sampled ground.

Pure geometry on shapely/numpy: the DEM is reached only through ``dem.sample(x, y)``,
``dem.cell_size``, ``dem.bounds`` and ``dem.transform``; no file is opened here.

- ``cut``: chainages, section lines perpendicular to the smoothed centreline, sampling;
- ``sidelimits``: how far each side reaches (adaptive width, other reaches' centrelines);
- ``userlines``: sections from user-drawn lines (straight or dog-leg);
- ``orient``: the centreline's drawn direction checked against the DEM;
- ``banks``: channel edges from breaks in the ground slope;
- ``lengths``: channel and floodplain reach lengths between neighbouring sections;
- ``valley``, ``valleycut``, ``doglegs``, ``channel_leg``: dog-leg sections that follow the valley
  (``channel_leg``: where the channel leg of a dog-leg ends);
- ``territory``: which reach owns each point of the valley floor; ``meeting``: its use in a cut;
- ``strips``: sections kept off roads and embankments; ``storage``: parts that carry no flow;
- ``faces``: the face sections of culverts, weirs and bridges (cut at the ends of their spans);
- ``stations``: chainages, the channel frame, where sections are sampled, stations added to a section;
- ``channel``: the channel below the DEM surface, from surveyed points (``survey``) and/or a
  shape cut below the flown water surface (``burn``);
- ``common``: sampling, gap filling and checks shared by the above.
"""
from .banks import detect_banks
from .channel import fit_channel
from .channel_leg import bend_distances, typical_channel_half_width
from .common import fill_small_gaps
from .cut import LAYOUTS, cut_sections
from .lengths import floodplain_lengths, flow_path_lengths
from .orient import orient_centreline
from .stations import grid_stations
from .storage import mark_storage
from .strips import narrow_strips
from .territory import Territory, make_territory
from .userlines import sections_from_lines
from .valley import Valley, valley_of

__all__ = ["LAYOUTS", "Territory", "Valley", "bend_distances", "cut_sections", "detect_banks", "fill_small_gaps",
           "fit_channel", "floodplain_lengths", "flow_path_lengths", "grid_stations", "make_territory", "mark_storage",
           "narrow_strips", "orient_centreline", "sections_from_lines", "typical_channel_half_width", "valley_of"]
