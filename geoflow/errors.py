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


class RunLockedError(GeoflowError, OSError):
    """Another geoflow run is writing to the same output folder."""


_NO_SPACE = (28, 122)            # ENOSPC, EDQUOT (Linux)
_NO_SPACE_TEXT = ("no space left on device", "disk quota exceeded", "not enough space")


def is_disk_full(exc: BaseException) -> bool:
    """True when ``exc`` (or an exception it was raised from) says the disk or quota is full.

    GDAL, SQLite and pyogrio report a full disk in their own exception types, often with only
    the operating system's text, so the text is checked as well as ``errno``.
    """
    seen = set()
    while exc is not None and id(exc) not in seen:
        seen.add(id(exc))
        if getattr(exc, "errno", None) in _NO_SPACE or any(t in str(exc).lower() for t in _NO_SPACE_TEXT):
            return True
        exc = exc.__cause__ or exc.__context__
    return False


def nearly_full(path, margin: int = 1 << 20) -> bool:
    """True when the file system holding ``path`` (or its nearest existing folder) has less than
    ``margin`` bytes free. Some writers (SQLite inside GeoPackage) report a full disk only as a
    damaged file, so after a failed write the free space is the better witness."""
    import os
    from pathlib import Path
    p = Path(str(path).split(" (")[0])
    while not p.exists() and p != p.parent:
        p = p.parent
    try:
        st = os.statvfs(p)
    except (OSError, AttributeError):
        return False
    return st.f_bavail * st.f_frsize < margin


def write_error(path, exc: BaseException) -> "OutputError":
    """The one-line OutputError for a failed write of ``path``: disk full, permission, or other."""
    if is_disk_full(exc) or nearly_full(path):
        return OutputError(f"no space left on the device writing {path}; free some space (or choose another "
                           "[run] output_dir) and run again with --resume")
    if isinstance(exc, PermissionError) or getattr(exc, "errno", None) == 13:
        return OutputError(f"permission denied writing {path}; check the permissions of [run] output_dir")
    text = " ".join(str(exc).split()) or type(exc).__name__
    return OutputError(f"cannot write {path} ({text}); check disk space and permissions")
