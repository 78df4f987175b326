"""Flood maps of a reach: water-surface elevation between sections, depth, velocity, outlines.

- ``engine``: :func:`map_reach` (in memory), :func:`write_reach_maps` (block-wise COGs) and
  :func:`write_reach_maps_many` (several events and roughness cases of a reach in one pass);
- ``blocks`` / ``join``: the per-block work and the joining of wet areas across block edges;
- ``mosaic``: per-event maximum where reach rasters overlap;
- ``spread``: WSE of the high minus the low roughness case;
- ``channel``: the DEM ground lowered where the sections' channel was cut or surveyed;
- ``strips``: the slope under which the velocity raster's depth strips carry each section's discharge.

Where reaches meet, each reach's map is cut to its own area (``clip``, the territory rule of
:mod:`geoflow.sections.territory`), so no cell takes a level from two reaches.
"""
from .engine import MapJob, MapSummary, ReachMap, VelocityInputs, map_reach, write_reach_maps, write_reach_maps_many
from .mosaic import mosaic_max
from .spread import write_wse_spread

__all__ = ["MapJob", "MapSummary", "ReachMap", "VelocityInputs", "map_reach", "mosaic_max", "write_reach_maps",
           "write_reach_maps_many", "write_wse_spread"]
