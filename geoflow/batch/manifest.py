"""The run manifest: what was computed, from which inputs, which files it wrote, what --resume may reuse.

After every finished reach the manifest is brought up to date, so a run killed at any moment
leaves a manifest that lists exactly the reach x event units whose outputs are complete. It is
rewritten whole (atomically) when that is cheap against the time since the last rewrite
(:data:`REWRITE_SHARE`); otherwise the reach's record is appended as one line to
``manifest-updates.jsonl`` beside it, and :func:`load_previous` replays those lines (only the
ones carrying the manifest's ``run_id``; a line cut short by a kill is ignored). So a batch of N
reaches costs O(N) manifest writing, not O(N^2), and the next whole rewrite empties the file.

Input identity: the SHA-256 of the config text and of every input file the config names
(:meth:`geoflow.config.Config.input_files`, with the side files GDAL keeps beside them), and the
geoflow version. ``--resume`` reuses a unit only when that identity is unchanged and the unit's
files are still on disk; every cache of opened inputs keys on it too.

Paths in the manifest are relative to the output folder (inputs may lie outside it: ``../``).
"""
from __future__ import annotations

import hashlib
import json
import os
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__, outputs
from ..config import Config
from ..constants import CAUTION
from ..errors import write_error
from ..roughness import case_factors, classes_without_range
from .layout import MANIFEST_NAME, PARTS_DIR, UPDATES_NAME, relative_name, side_files

#: rewrite the whole manifest only when the last rewrite took at most this share of the time since
REWRITE_SHARE = 0.05


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def input_hashes(cfg: Config) -> dict[str, dict]:
    """{TOML key: {"path", "sha256", "bytes"}} of every input the config names; the hash covers the
    file and its side files (shapefile parts, GeoPackage WAL, .aux.xml), in a fixed order."""
    out = {}
    for key, path in cfg.input_files().items():
        files = side_files(path)
        h = hashlib.sha256()
        for p in files:
            h.update(p.name.encode("utf-8") + b"\0" + file_sha256(p).encode("ascii"))
        out[key] = {"path": os.path.relpath(path, cfg.run.output_dir), "sha256": h.hexdigest(),
                    "bytes": sum(p.stat().st_size for p in files)}
    return out


def identity(cfg: Config, hashes: dict) -> str:
    """One token for the config text, every input's content and the geoflow version."""
    doc = {"version": __version__, "config": cfg.sha256, "inputs": {k: v["sha256"] for k, v in hashes.items()}}
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode("utf-8")).hexdigest()


def fingerprints(cfg: Config) -> tuple[tuple[str, int, int], ...]:
    """(path, size, mtime_ns) of every input and side file: a cheap check that nothing changed."""
    out = []
    for path in cfg.input_files().values():
        for p in side_files(path):
            st = p.stat()
            out.append((str(p), st.st_size, st.st_mtime_ns))
    return tuple(out)


def unit_key(reach_id: str, event: str) -> str:
    return f"{reach_id}/{event}"


def part_paths(out_dir: Path, safe_reach: str, safe_event: str | None = None) -> dict[str, Path]:
    base = Path(out_dir) / PARTS_DIR / safe_reach
    if safe_event is None:
        return {"sections": base / "sections.gpkg", "calibration": base / "calibration.csv",
                "ratings": base / "rating_curves.csv"}
    return {"profile": base / f"{safe_event}.profile.csv", "extent": base / f"{safe_event}.extent.gpkg",
            "spread": base / f"{safe_event}.wse_spread.tif", "structures": base / f"{safe_event}.structures.csv"}


@dataclass
class Manifest:
    """Mutable view of manifest.json for one config's run."""

    path: Path
    data: dict = field(default_factory=dict)
    _rewrite_s: float = 0.0          # how long the last whole rewrite took
    _rewritten_at: float = 0.0       # when it ended (perf_counter)

    @classmethod
    def start(cls, cfg: Config, hashes: dict, ident: str, previous: dict | None, reuse: set[str]) -> "Manifest":
        units = {k: v for k, v in ((previous or {}).get("units") or {}).items() if k in reuse}
        data = {
            "geoflow_version": __version__,
            "caution": CAUTION,
            "config": os.path.relpath(cfg.path, cfg.run.output_dir),
            "config_sha256": cfg.sha256,
            "inputs": hashes,
            "identity": ident,
            "events": [e.name for e in cfg.events],
            "run_id": uuid.uuid4().hex,
            "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            "finished": None,
            "reaches": {},
            "units": units,
        }
        if cfg.roughness.cases:
            data["roughness_cases"] = roughness_cases_entry(cfg)
        return cls(path=Path(cfg.run.output_dir) / MANIFEST_NAME, data=data)

    def record_reach(self, reach_id: str, info: dict) -> None:
        self.data["reaches"][reach_id] = {k: info.get(k) for k in ("status", "error", "sections", "warnings",
                                                                   "channel", "structures", "flags", "files",
                                                                   "timings_s", "calibration")
                                          if info.get(k) is not None or k in ("status", "error")}
        for ev, unit in (info.get("events") or {}).items():
            self.data["units"][unit_key(reach_id, ev)] = unit

    def recorded_files(self) -> set[str]:
        """Every file (relative name) the manifest says this run wrote or reused."""
        names = set(self.data.get("files", []))
        for entry in list(self.data["reaches"].values()) + list(self.data["units"].values()):
            names.update(entry.get("files") or [])
        return names

    def save(self) -> None:
        """Rewrite manifest.json whole (atomically), then empty the updates file it now includes."""
        t0 = time.perf_counter()
        outputs.write_manifest(self.path, self.data)
        updates = self.path.with_name(UPDATES_NAME)
        if updates.exists():
            try:
                updates.unlink()
            except OSError as exc:
                raise write_error(updates, exc) from None
        self._rewritten_at = time.perf_counter()
        self._rewrite_s = self._rewritten_at - t0

    def checkpoint(self, reach_id: str) -> None:
        """Make the manifest on disk include the record of ``reach_id`` (after :meth:`record_reach`).

        A whole rewrite when it is cheap against the time since the last one, else one appended line.
        """
        if self._rewrite_s <= REWRITE_SHARE * (time.perf_counter() - self._rewritten_at):
            self.save()
            return
        events = self.data.get("events") or []
        units = {k: self.data["units"][k] for k in (unit_key(reach_id, e) for e in events) if k in self.data["units"]}
        line = json.dumps(outputs.plain({"run_id": self.data["run_id"], "reach": reach_id,
                                         "entry": self.data["reaches"][reach_id], "units": units}),
                          allow_nan=False)
        updates = self.path.with_name(UPDATES_NAME)
        try:
            with open(updates, "a", encoding="utf-8") as f:
                f.write(line + "\n")
        except OSError as exc:
            raise write_error(updates, exc) from None



def roughness_cases_entry(cfg: Config) -> dict:
    """What the roughness cases are and which classes keep their n in each (manifest "roughness_cases")."""
    classes = cfg.roughness.classes
    return {"cases": list(cfg.roughness.all_cases()),
            "rule": "every n of a class (its n and the n of its n_by_depth / n_by_discharge law) is multiplied by "
                    "n_low / n (low) or n_high / n (high), on top of any calibration multiplier; classes without "
                    "that value, and land-cover gaps filled with default_n, keep their n",
            "factors": {case: {c: round(f, 6) for c, f in case_factors(classes, case).items()}
                        for case in cfg.roughness.cases},
            "classes_keeping_n": {case: classes_without_range(classes, case) for case in cfg.roughness.cases}}


def calibration_entry(cfg: Config, reaches: dict) -> dict:
    """Manifest "calibration": the settings, a run summary and, per reach with marks, its fit.

    Summary: ``marks`` (all reaches), ``rmse_m`` over all marks, ``well_determined`` (every reach's fit
    is), ``bound_hit`` (some multiplier stopped at a bound), ``multipliers`` {reach: {group: m}}.
    """
    cal = cfg.calibration
    fits = {rid: r["calibration"] for rid, r in reaches.items() if r.get("calibration")}
    marks = sum(f["marks"] for f in fits.values())
    sse = sum(f["rmse_m"] ** 2 * f["marks"] for f in fits.values())
    return {"observations": os.path.relpath(cal.observations, cfg.run.output_dir),
            "adjust": [g if isinstance(g, str) else list(g) for g in cal.adjust], "bounds": list(cal.bounds),
            "mark_accuracy_m": cal.mark_accuracy, "marks": marks,
            "rmse_m": (sse / marks) ** 0.5 if marks else None,
            "well_determined": bool(fits) and all(f["well_determined"] for f in fits.values()),
            "bound_hit": any(f["bound_hit"] for f in fits.values()),
            "multipliers": {rid: f["multipliers"] for rid, f in fits.items()},
            "reaches": fits}


def load_previous(out_dir: Path) -> dict | None:
    """The manifest a previous run left, with the reach records it appended since its last rewrite."""
    path = Path(out_dir) / MANIFEST_NAME
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict):
        return None
    for rec in _updates(path.with_name(UPDATES_NAME), data.get("run_id")):
        data.setdefault("reaches", {})[rec["reach"]] = rec["entry"]
        data.setdefault("units", {}).update(rec["units"])
    return data


def _updates(path: Path, run_id) -> list[dict]:
    """Complete, well-formed lines of the updates file written by run ``run_id`` (others ignored)."""
    if run_id is None:
        return []
    try:
        text = path.read_text(encoding="utf-8")
    except OSError:
        return []
    out = []
    for line in text.split("\n"):
        try:
            rec = json.loads(line)
        except ValueError:
            continue                  # the last line of a run killed while appending
        if (isinstance(rec, dict) and rec.get("run_id") == run_id and isinstance(rec.get("reach"), str)
                and isinstance(rec.get("entry"), dict) and isinstance(rec.get("units"), dict)):
            out.append(rec)
    return out


def previous_files(previous: dict | None) -> set[str]:
    """Every file a previous run's manifest records (relative names)."""
    if not previous:
        return set()
    names = set(previous.get("files") or [])
    for group in ("reaches", "units"):
        for entry in (previous.get(group) or {}).values():
            if isinstance(entry, dict):
                names.update(entry.get("files") or [])
    return {n for n in names if isinstance(n, str)}


def reusable_units(previous: dict | None, cfg: Config, ident: str, safe) -> set[str]:
    """Units recorded complete by a previous run with the same identity, their files on disk."""
    if not previous or previous.get("identity") != ident:
        return set()
    out = Path(cfg.run.output_dir)
    keep = set()
    for key, unit in (previous.get("units") or {}).items():
        if not isinstance(unit, dict) or unit.get("status") != "complete" or "/" not in key:
            continue
        reach, event = key.split("/", 1)
        reach_files = ((previous.get("reaches") or {}).get(reach) or {}).get("files") or []
        files = [out / n for n in list(unit.get("files") or []) + list(reach_files)]
        files += [part_paths(out, safe(reach), safe(event))["profile"], part_paths(out, safe(reach))["sections"]]
        if all(p.is_file() for p in files):
            keep.add(key)
    return keep


def kept_files(previous: dict | None, reuse: set[str]) -> set[str]:
    """Files of the reused units (and of their reaches), which a resumed run keeps."""
    if not previous:
        return set()
    names: set[str] = set()
    for key in reuse:
        names.update((previous.get("units") or {}).get(key, {}).get("files") or [])
        reach = key.split("/", 1)[0]
        names.update(((previous.get("reaches") or {}).get(reach) or {}).get("files") or [])
    return names


def clear_stale_temporaries(out_dir: Path) -> int:
    """Delete temporary files (``.<name>.tmp-<pid>...``) a killed run left in the output folder.

    Called only while this run holds the folder's lock, so no other run's temporaries are touched.
    """
    count = 0
    out_dir = Path(out_dir)
    if out_dir.is_dir():
        for p in out_dir.rglob(".*.tmp-*"):
            try:
                p.unlink()
                count += 1
            except OSError:
                pass
    return count


__all__ = ["Manifest", "calibration_entry", "roughness_cases_entry", "clear_stale_temporaries", "file_sha256", "fingerprints", "identity", "input_hashes",
           "kept_files", "load_previous", "part_paths", "previous_files", "relative_name", "reusable_units",
           "unit_key"]
