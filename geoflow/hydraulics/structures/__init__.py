"""Hydraulic structures on a reach: culverts, weirs and bridges (pure numpy/scipy).

One entry point per structure type, each taking the discharge and the tailwater WSE of E
events (arrays (E,)) and returning a ``StructureResult`` (headwater WSE, control, flow over
the crest, flags; see ``common.py``):

- ``culvert_headwater(discharge, tailwater_wse, Culvert(...))``: FHWA HDS-5 inlet and outlet
  control with road overtopping (``culvert.py``, ``inlets.py``, ``barrel.py``);
- ``weir_headwater(discharge, tailwater_wse, Weir(...), approach=None)``: broad- and
  sharp-crested weirs with Villemonte's submergence (``weir.py``);
- ``bridge_headwater(discharge, tailwater_wse, Bridge(...), upstream_face, downstream_face)``:
  low flow by the energy / momentum / Yarnell methods, pressure flow and deck overtopping
  (``bridge.py``, ``lowflow.py``, ``opening.py``).

Method notes, limits and what each flag asks of a reviewer: docs/structures.md and the
module docstrings.
"""
from geoflow.hydraulics.structures.bridge import bridge_headwater
from geoflow.hydraulics.structures.common import CONTROLS, StructureResult
from geoflow.hydraulics.structures.culvert import Culvert, culvert_headwater
from geoflow.hydraulics.structures.inlets import INLETS, InletCoefficients
from geoflow.hydraulics.structures.opening import PIER_SHAPES, Bridge, Piers
from geoflow.hydraulics.structures.weir import Weir, weir_headwater

__all__ = ["CONTROLS", "INLETS", "PIER_SHAPES", "Bridge", "Culvert", "InletCoefficients",
           "Piers", "StructureResult", "Weir", "bridge_headwater", "culvert_headwater",
           "weir_headwater"]
