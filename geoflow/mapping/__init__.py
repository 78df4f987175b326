"""Flood maps of a reach: water-surface elevation between sections, depth, velocity, outlines.

- ``engine``: :func:`map_reach` (in memory) and :func:`write_reach_maps` (block-wise COGs);
- ``blocks`` / ``join``: the per-block work and the joining of wet areas across block edges;
- ``mosaic``: per-event maximum where reach rasters overlap;
- ``spread``: WSE of the high minus the low roughness case.
- ``confluence``: the receiving reach's side of a junction, which the joining reach leaves dry.
"""
from .confluence import receiving_side
from .engine import MapSummary, ReachMap, VelocityInputs, map_reach, write_reach_maps
from .mosaic import mosaic_max
from .spread import write_wse_spread

__all__ = ["MapSummary", "ReachMap", "VelocityInputs", "map_reach", "mosaic_max", "receiving_side",
           "write_reach_maps", "write_wse_spread"]
