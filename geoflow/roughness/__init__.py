"""Manning's n of every ground segment of every section.

- ``overlay``: land-cover polygons -> n, class and conveyance part (floodplain / channel) per
  segment; channel edges; composite n per part;
- ``tables``: reference n values (Chow 1959, Table 5-6), Cowan's method, CSV class tables;
- ``laws``: n varying with local depth or with discharge;
- ``cases``: n scaled per class (roughness cases low / high, calibration multipliers);
- ``fit``: least-squares n multipliers from observed water levels, with identifiability checks.

Pure shapely/numpy: no file is opened here except the CSV class table (``tables``).
"""
from .cases import CASES, case_factors, classes_without_range, combine, group_factors, group_members, group_name
from .laws import n_at_discharge, n_by_depth_table, varies_with_discharge
from .overlay import assign_roughness, centre_stations, composite_n_by_part, landcover_classes, split_at_cover_edges
from .tables import CHOW_1959, N_RANGE, cowan_n, read_class_table, reference_entry

__all__ = ["CASES", "case_factors", "classes_without_range", "combine", "group_factors", "group_members",
           "group_name", "CHOW_1959", "N_RANGE", "assign_roughness", "centre_stations", "composite_n_by_part", "cowan_n",
           "landcover_classes", "n_at_discharge", "n_by_depth_table", "read_class_table", "reference_entry",
           "split_at_cover_edges", "varies_with_discharge"]
