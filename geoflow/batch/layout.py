"""Where a run writes, and the rules that keep it from touching anything else.

Layout of an output folder (README "Output reference"): a few top-level files and five
sub-folders that belong to geoflow. Rules:

* Inputs are sacred: no input file (or its side files) may be one of the top-level outputs or
  lie inside a folder geoflow writes (followed through symbolic links). A clash is a
  ConfigError naming the TOML key, found before anything is written.
* Nothing is written outside the output folder: a managed sub-folder that is a link to a place
  outside it is refused.
* A run's folder tells the truth: the files an earlier run recorded in its manifest are removed
  before a new run writes (with ``--resume``: all but those of the units it reuses), and files
  in the managed folders that no run recorded are listed as stale in the manifest.
"""
from __future__ import annotations

import contextlib
import os
from pathlib import Path

from ..errors import ConfigError

MANIFEST_NAME = "manifest.json"
UPDATES_NAME = "manifest-updates.jsonl"    # reach records appended between whole manifest rewrites
LOG_NAME = "run.log"
LOCK_NAME = ".geoflow.lock"
TOP_FILES = (MANIFEST_NAME, UPDATES_NAME, LOG_NAME, LOCK_NAME, "profile.csv", "sections.gpkg", "inundation.gpkg",
             "calibration.csv", "rating_curves.csv", "structures.csv")
MANAGED_DIRS = ("rasters", "mosaic", "report", "parts", "uncertainty")
PARTS_DIR = "parts"

#: side files GDAL/OGR keep beside a data file (they belong to the input as much as the file)
_SIDE_SUFFIXES = {
    ".shp": (".shx", ".dbf", ".prj", ".cpg", ".qix", ".sbn", ".sbx", ".shp.xml"),
    ".gpkg": ("-wal", "-shm", "-journal"),
    ".tif": (".aux.xml", ".ovr", ".msk"), ".tiff": (".aux.xml", ".ovr", ".msk"),
}


def side_files(path: Path) -> list[Path]:
    """``path`` and the side files beside it that exist (shapefile parts, GeoPackage WAL, .aux.xml)."""
    path = Path(path)
    out = [path]
    for suffix in _SIDE_SUFFIXES.get(path.suffix.lower(), ()):
        if suffix.startswith("-") or suffix.startswith(".aux") or suffix in (".ovr", ".msk", ".shp.xml"):
            cand = path.with_name(path.name + suffix)
        else:
            cand = path.with_suffix(suffix)
        if cand.exists():
            out.append(cand)
    return out


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
        return True
    except ValueError:
        return False


def check_inputs_not_outputs(cfg, others: tuple = ()) -> None:
    """Refuse (ConfigError) a config whose outputs would overwrite one of its inputs.

    ``others``: configs run in the same invocation; none may write where this one reads, and no
    two may share an output folder.
    """
    out = Path(cfg.run.output_dir).resolve()
    _check_links(cfg, out)
    for c in (cfg,) + tuple(others):
        for key, path in c.input_files().items():
            for p in side_files(path):
                clash = _clash(out, Path(p).resolve())
                if clash:
                    whose = "" if c is cfg else f" of {c.path}"
                    raise ConfigError(f"{cfg.path}: [run] output_dir {cfg.run.output_dir} would overwrite the input "
                                      f"{key}{whose} ({p}, {clash}); move that file or choose another output_dir")
    for c in others:
        if c is not cfg and Path(c.run.output_dir).resolve() == out:
            raise ConfigError(f"{cfg.path} and {c.path} both write to {out}; give each config its own "
                              "[run] output_dir")


def _clash(out: Path, inp: Path) -> str | None:
    if inp.parent == out and inp.name in TOP_FILES:
        return "a file geoflow writes in the output folder"
    for d in MANAGED_DIRS:
        folder = (out / d).resolve()
        if _inside(inp, folder):
            return f"inside the output folder's {d}/, which geoflow writes"
    return None


def _check_links(cfg, out: Path) -> None:
    for d in MANAGED_DIRS:
        p = out / d
        if p.is_symlink() and not _inside(p.resolve(), out):
            raise ConfigError(f"{cfg.path}: {p} is a link to {p.resolve()}, outside the output folder; geoflow "
                              "writes only inside [run] output_dir - remove the link or choose another output_dir")


def relative_name(out: Path, path: Path) -> str:
    """``path`` relative to the output folder, with '/' separators (as the manifest records it)."""
    return Path(path).resolve().relative_to(Path(out).resolve()).as_posix()


def remove_recorded(out: Path, names, protect: set[Path]) -> int:
    """Delete the files ``names`` (relative to ``out``) that a previous run recorded, except
    inputs (``protect``, resolved) and anything outside ``out``; then prune empty managed folders.
    Returns the number of files removed."""
    out = Path(out).resolve()
    removed = 0
    for name in names:
        p = (out / name)
        if not p.is_file() or p.is_symlink():
            continue
        rp = p.resolve()
        if not _inside(rp, out) or rp in protect or rp.parent == out and rp.name in (LOCK_NAME, LOG_NAME):
            continue
        with contextlib.suppress(OSError):
            p.unlink()
            removed += 1
    prune_empty_dirs(out)
    return removed


def prune_empty_dirs(out: Path) -> None:
    """Remove empty folders inside the managed folders (deepest first), and empty managed folders."""
    for d in MANAGED_DIRS:
        top = Path(out) / d
        if not top.is_dir() or top.is_symlink():
            continue
        for folder in sorted((p for p in top.rglob("*") if p.is_dir()), key=lambda p: len(p.parts), reverse=True):
            with contextlib.suppress(OSError):
                folder.rmdir()
        with contextlib.suppress(OSError):
            top.rmdir()


def unrecorded_files(out: Path, recorded: set[str]) -> list[str]:
    """Files in the managed folders that this run did not record (relative names, sorted)."""
    out = Path(out)
    found = []
    for d in MANAGED_DIRS:
        top = out / d
        if top.is_dir():
            for root, _, files in os.walk(top):
                for f in files:
                    name = (Path(root) / f).relative_to(out).as_posix()
                    if name not in recorded and ".tmp-" not in f:
                        found.append(name)
    return sorted(found)
