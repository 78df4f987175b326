"""TOML configuration -> frozen, validated dataclasses.

Every problem found is collected with its TOML path (e.g. ``[sections] spacing``) and reported
together in one ConfigError; unknown keys are rejected with a did-you-mean suggestion.
Paths in the file are resolved relative to the config file's folder. The dataclasses live in
``config.model`` and the per-table readers in ``config.read``; both are re-exported here.
"""
from __future__ import annotations

import hashlib
import tomllib
from pathlib import Path

from ..errors import ConfigError
from .model import (  # noqa: F401
    BOUNDARY_TYPES,
    FRICTION_SLOPE_METHODS,
    MAPPING_OUTPUTS,
    REGIMES,
    VERTICAL_UNITS,
    BoundaryConfig,
    BoundarySpec,
    CalibrationConfig,
    ChannelConfig,
    ChannelReach,
    ChannelShape,
    Config,
    Event,
    FlowChange,
    HydraulicsConfig,
    MappingConfig,
    RatingCurvesConfig,
    ReachesConfig,
    RoughnessClass,
    RoughnessConfig,
    RunConfig,
    SectionsConfig,
    StructureSpec,
    TerrainConfig,
)
from .read import (
    _read_boundary,
    _read_bspec,
    _read_events,
    _read_hydraulics,
    _read_mapping,
    _read_reaches,
    _read_roughness,
    _read_run,
    _read_sections,
    _read_terrain,
    _Reader,
)
from .read_analysis import read_calibration, read_rating_curves
from .read_channel import _read_channel
from .read_structures import read_structures

__all__ = ["load_config", "Config", "RunConfig", "TerrainConfig", "ReachesConfig", "SectionsConfig",
           "RoughnessClass", "RoughnessConfig", "FlowChange", "Event", "BoundarySpec", "BoundaryConfig",
           "HydraulicsConfig", "MappingConfig", "ChannelConfig", "ChannelReach", "ChannelShape",
           "CalibrationConfig", "RatingCurvesConfig", "StructureSpec", "REGIMES", "BOUNDARY_TYPES", "FRICTION_SLOPE_METHODS",
           "MAPPING_OUTPUTS", "VERTICAL_UNITS"]

TOP_LEVEL = ("run", "terrain", "reaches", "sections", "roughness", "events", "boundary", "hydraulics", "mapping",
             "channel", "calibration", "rating_curves", "structures")


def load_config(path: str | Path) -> Config:
    """Read and validate a geoflow TOML file; raise ConfigError listing every problem found."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise ConfigError(f"{path}: config file not found; check the path") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read config ({exc.strerror})") from None
    try:
        doc = tomllib.loads(raw.decode("utf-8-sig"))     # a byte-order mark (some editors add one) is fine
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not UTF-8 text; save the config as UTF-8") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: TOML syntax error: {exc}; fix the line it names") from None
    r = _Reader(path.resolve().parent, str(path))
    r.known(doc, TOP_LEVEL, "top level:")
    parts = dict(
        run=_read_run(r, doc), terrain=_read_terrain(r, doc), reaches=_read_reaches(r, doc),
        sections=_read_sections(r, doc), roughness=_read_roughness(r, doc), events=_read_events(r, doc),
        boundary=_read_boundary(r, doc), hydraulics=_read_hydraulics(r, doc), mapping=_read_mapping(r, doc),
        channel=_read_channel(r, doc),
        calibration=read_calibration(r, doc), rating_curves=read_rating_curves(r, doc, _read_bspec),
        structures=read_structures(r, doc),
    )
    if r.problems:
        raise ConfigError(_summarise(path, r.problems), problems=[f"{path}: {p}" for p in r.problems])
    return Config(path=path.resolve(), sha256=hashlib.sha256(raw).hexdigest(), **parts)


def _summarise(path: Path, problems: list[str]) -> str:
    head = f"{path}: {problems[0]}"
    if len(problems) == 1:
        return head
    return head + f" (and {len(problems) - 1} more: " + "; ".join(problems[1:]) + ")"
