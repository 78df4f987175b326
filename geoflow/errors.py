"""Error hierarchy: every user mistake becomes one clear message.

Each class also inherits the matching built-in exception, so callers may catch either
(``except geoflow.errors.ConfigError`` or ``except ValueError``). Messages name the file,
layer, key or reach at fault and say what to do. The CLI prints ``str(err)`` on one line
and exits with status 2; tracebacks are reserved for bugs.
"""
from __future__ import annotations


class GeoflowError(Exception):
    """Base class of every error geoflow raises on purpose."""


class ConfigError(GeoflowError, ValueError):
    """The TOML configuration is malformed, has an unknown key, a wrong type or a bad value."""

    def __init__(self, message: str, problems: list[str] | None = None):
        super().__init__(message)
        self.problems = list(problems or [message])


class InputDataError(GeoflowError, OSError):
    """An input file (DEM, centrelines, land cover) is missing, unreadable or inconsistent."""


class GeometryError(GeoflowError, ValueError):
    """Sections cannot be cut or are invalid for a reach (e.g. centreline outside the DEM)."""


class RoughnessError(GeoflowError, ValueError):
    """Manning's n cannot be assigned (e.g. land-cover class missing from the table)."""


class HydraulicsError(GeoflowError, ArithmeticError):
    """The steady-flow computation cannot proceed (e.g. invalid boundary for the flow)."""


class OutputError(GeoflowError, OSError):
    """An output cannot be written (permissions, disk, existing non-directory path)."""
