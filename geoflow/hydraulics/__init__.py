"""Pure hydraulic engine: numpy/scipy (and numba for the compiled kernel), no file I/O, no GIS
objects.

- ``geometry``: section property tables (area, wetted perimeter, top width, conveyance per
  subdivision, alpha, beta, specific force), exact at any water-surface elevation;
  ``lookup``: the exact piecewise-polynomial level tables behind the fast evaluation.
- ``critical``: critical WSE as the minimum of specific energy (compound sections included).
- ``boundaries``: ``Boundary`` conditions and normal depth.
- ``step`` / ``roots``: one standard-step energy balance; vectorised bracketed root finding.
- ``solver``: ``solve_profile`` / ``solve_events`` for subcritical, supercritical and mixed
  regimes; ``profile``: the ``Profile`` result record; ``links``: structures inside a reach
  (``StructureLink``), whose hydraulics are in ``structures``.
- engines of the solver: ``engine_compiled`` (default) runs the numba kernels of ``kernel`` on
  the reach's level tables packed by ``packed``; ``engine_numpy`` is the reference
  implementation built from ``critical`` / ``step`` / ``geometry``.
"""
from geoflow.hydraulics.boundaries import Boundary, normal_wse
from geoflow.hydraulics.critical import critical_wse
from geoflow.hydraulics.geometry import SectionTable, build_table, properties
from geoflow.hydraulics.links import StructureLevel, StructureLink
from geoflow.hydraulics.profile import Profile
from geoflow.hydraulics.solver import SolverOptions, solve_events, solve_profile

__all__ = ["Boundary", "Profile", "SectionTable", "SolverOptions", "StructureLevel", "StructureLink", "build_table",
           "critical_wse", "normal_wse", "properties", "solve_events", "solve_profile"]
