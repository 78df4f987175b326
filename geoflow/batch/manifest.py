"""The run manifest: what was computed, from which inputs, and what can be reused on --resume.

The manifest is rewritten atomically after every finished reach, so a run killed at any
moment leaves a manifest that lists exactly the reach x event units whose outputs are
complete. ``--resume`` reuses a unit only when the config text and every input file hash
are unchanged and its part files are still on disk.
"""
from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__, outputs
from ..config import Config
from ..constants import CAUTION

MANIFEST_NAME = "manifest.json"
PARTS_DIR = "parts"            # per reach x event intermediate tables, kept for --resume


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def input_hashes(cfg: Config) -> dict[str, dict[str, str]]:
    """sha256 of every input file named by the config (GeoPackage side files included if present)."""
    paths = {"dem": cfg.terrain.dem, "centrelines": cfg.reaches.centrelines, "landcover": cfg.roughness.landcover}
    return {k: {"path": str(p), "sha256": file_sha256(p)} for k, p in paths.items() if p.is_file()}


def unit_key(reach_id: str, event: str) -> str:
    return f"{reach_id}/{event}"


def part_paths(out_dir: Path, safe_reach: str, safe_event: str | None = None) -> dict[str, Path]:
    base = out_dir / PARTS_DIR / safe_reach
    if safe_event is None:
        return {"sections": base / "sections.gpkg"}
    return {"profile": base / f"{safe_event}.profile.csv", "extent": base / f"{safe_event}.extent.gpkg"}


@dataclass
class Manifest:
    """Mutable view of manifest.json for one config's run."""

    path: Path
    data: dict = field(default_factory=dict)

    @classmethod
    def start(cls, cfg: Config, hashes: dict, previous: dict | None, reuse: set[str]) -> "Manifest":
        units = {k: v for k, v in ((previous or {}).get("units") or {}).items() if k in reuse}
        data = {
            "geoflow_version": __version__,
            "caution": CAUTION,
            "config": str(cfg.path),
            "config_sha256": cfg.sha256,
            "inputs": hashes,
            "events": [e.name for e in cfg.events],
            "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            "finished": None,
            "reaches": {},
            "units": units,
        }
        return cls(path=cfg.run.output_dir / MANIFEST_NAME, data=data)

    def record_reach(self, reach_id: str, info: dict) -> None:
        self.data["reaches"][reach_id] = {k: info.get(k) for k in ("status", "error", "sections", "warnings",
                                                                   "timings_s")}
        for ev, unit in (info.get("events") or {}).items():
            self.data["units"][unit_key(reach_id, ev)] = unit

    def save(self) -> None:
        outputs.write_manifest(self.path, self.data)


def load_previous(out_dir: Path) -> dict | None:
    path = out_dir / MANIFEST_NAME
    try:
        return json.loads(path.read_text())
    except (OSError, ValueError):
        return None


def reusable_units(previous: dict | None, cfg: Config, hashes: dict, safe) -> set[str]:
    """Units recorded complete by a previous run with the same config and inputs, parts present."""
    if not previous or previous.get("config_sha256") != cfg.sha256:
        return set()
    old = {k: v.get("sha256") for k, v in (previous.get("inputs") or {}).items()}
    if old != {k: v["sha256"] for k, v in hashes.items()}:
        return set()
    keep = set()
    for key, unit in (previous.get("units") or {}).items():
        if unit.get("status") != "complete" or "/" not in key:
            continue
        reach, event = key.split("/", 1)
        paths = part_paths(cfg.run.output_dir, safe(reach), safe(event))
        files = [paths["profile"], part_paths(cfg.run.output_dir, safe(reach))["sections"]]
        files += [Path(p) for p in unit.get("files", [])]
        if all(p.is_file() for p in files):
            keep.add(key)
    return keep


def clear_stale_temporaries(out_dir: Path) -> int:
    """Delete temporary files (``.<name>.tmp-<pid>...``) a killed run left in the output folder."""
    count = 0
    if out_dir.is_dir():
        for p in out_dir.rglob(".*.tmp-*"):
            try:
                p.unlink()
                count += 1
            except OSError:
                pass
    return count
