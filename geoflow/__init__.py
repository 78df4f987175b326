"""geoflow: steady 1D water-surface profiles and flood maps for many river reaches.

Results are screening-level 1D steady estimates. They must be reviewed by a qualified
engineer; local codes, regulators and licensed practice govern their use.
"""
from .constants import CAUTION

__version__ = "0.2.0"

__all__ = ["run", "check", "load_config", "CAUTION", "__version__"]


def __getattr__(name: str):
    # Lazy: importing geoflow (or geoflow.hydraulics) must not pull in the GIS stack.
    if name in ("run", "check"):
        from . import batch
        return getattr(batch, name)
    if name == "load_config":
        from .config import load_config
        return load_config
    raise AttributeError(f"module 'geoflow' has no attribute {name!r}")
