"""Runs that never reuse a stale result, one run per folder, and failures a user meets as one line.

The reference for results is a clean run of the same config (a run into a fresh folder); no
outside hydraulic reference is needed here (the profiles themselves are checked elsewhere against
Manning normal depth and scipy integrations).
"""
from __future__ import annotations

import errno
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely.affinity import translate
from valleys import make_valley, write_config

from geoflow.batch import run
from geoflow.batch.lock import FolderLock
from geoflow.batch.progress import Progress
from geoflow.cli import main
from geoflow.errors import GeoflowError, RunLockedError

ROOT = Path(__file__).resolve().parents[1]


def two_reaches(tmp_path, junction=True, table=False):
    """r1 (main) and r2 (its tributary, ending against r1's level), in two parallel valleys."""
    v = make_valley(tmp_path, length=600.0, half_width=60.0, n_reaches=2)
    extra = '[boundary.reaches.r2]\ndownstream = { type = "junction", reach = "r1" }\n' if junction else ""
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.03, width=100.0, extra=extra)
    text = cfg.read_text().replace("discharge = 30.0", "discharge = { r1 = 40.0, r2 = 10.0 }")
    text += '\n[[events]]\nname = "small"\ndischarge = { r1 = 10.0, r2 = 3.0 }\n'
    if table:
        (tmp_path / "n.csv").write_text("class,n\nchannel,0.030\n")
        text = text.replace("[roughness.classes.channel]\nn = 0.03\n", "").replace(
            "[roughness]\n", '[roughness]\ntable = "n.csv"\n')
    cfg.write_text(text)
    return v, cfg


def manifest_of(out: Path) -> dict:
    return json.loads((out / "manifest.json").read_text())


def test_rerun_with_the_receiving_reach_broken_never_uses_its_old_results(tmp_path):
    v, cfg = two_reaches(tmp_path)
    first = run(cfg)
    out = first.output_dir
    assert not first.failed and (out / "rasters" / "r1" / "design_wse.tif").is_file()
    gdf = gpd.read_file(v.centrelines)        # move r1 off the DEM: it fails validation
    gdf.loc[gdf.reach_id == "r1", "geometry"] = [translate(g, yoff=-9000.0) for g in
                                                 gdf.loc[gdf.reach_id == "r1", "geometry"]]
    gdf.to_file(v.centrelines, layer="centrelines", driver="GPKG")
    with pytest.raises(GeoflowError, match="r1"):
        run(cfg)                               # without keep_going: refused, nothing touched
    assert (out / "rasters" / "r1" / "design_wse.tif").is_file()
    again = run(cfg, keep_going=True)
    man = manifest_of(out)
    assert set(again.failed) == {"r1", "r2"}
    assert "junction reach 'r1'" in man["reaches"]["r2"]["error"]
    assert not (out / "rasters" / "r1").exists() and not (out / "rasters" / "r2").exists()
    assert not (out / "parts" / "r1").exists()
    assert len(pd.read_csv(out / "profile.csv")) == 0
    assert man["stale_files"] == []


def test_rasters_of_an_event_removed_from_the_config_are_removed(tmp_path):
    v, cfg = two_reaches(tmp_path, junction=False)
    out = run(cfg).output_dir
    assert (out / "rasters" / "r1" / "small_depth.tif").is_file()
    (out / "rasters" / "r1" / "notes.txt").write_text("a file no run wrote\n")
    text = cfg.read_text()
    cfg.write_text(text[:text.index('\n[[events]]\nname = "small"')] + "\n")
    res = run(cfg)
    assert not (out / "rasters" / "r1" / "small_depth.tif").exists()
    assert (out / "rasters" / "r1" / "design_depth.tif").is_file()
    assert set(pd.read_csv(out / "profile.csv")["event"]) == {"design"}
    assert res.stale_files == ["rasters/r1/notes.txt"] == manifest_of(out)["stale_files"]
    assert (out / "rasters" / "r1" / "notes.txt").is_file(), "a file geoflow did not write is never deleted"


def test_resume_after_editing_the_roughness_table_recomputes_everything(tmp_path):
    v, cfg = two_reaches(tmp_path, table=True)
    first = run(cfg)
    assert run(cfg, resume=True).reused_units == 4            # nothing changed: every unit reused
    (tmp_path / "n.csv").write_text("class,n\nchannel,0.045\n")
    resumed = run(cfg, resume=True)
    assert resumed.reused_units == 0
    clean = run(Path(str(cfg)), resume=False)
    np.testing.assert_array_equal(resumed.profile["wse_m"].to_numpy(), clean.profile["wse_m"].to_numpy())
    rise = resumed.profile["wse_m"].to_numpy() - first.profile["wse_m"].to_numpy()
    assert np.all(rise > 0.05), "a rougher channel raises every level"


def test_resume_after_editing_section_lines_recomputes(tmp_path):
    from shapely.geometry import LineString
    v = make_valley(tmp_path, length=600.0, half_width=60.0)
    lines = tmp_path / "lines.gpkg"

    def draw(xs):
        gpd.GeoDataFrame({"reach_id": ["r1"] * len(xs)},
                         geometry=[LineString([(v.x0 + x, v.yc + 50), (v.x0 + x, v.yc - 50)]) for x in xs],
                         crs="EPSG:32630").to_file(lines, layer="lines", driver="GPKG")
    draw([0, 100, 200, 300, 400, 500, 600])
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.03, width=100.0)
    cfg.write_text(cfg.read_text().replace("[sections]\n", '[sections]\nlines = "lines.gpkg"\n'))
    first = run(cfg)
    draw([0, 150, 300, 450, 600])
    resumed = run(cfg, resume=True)
    assert resumed.reused_units == 0 and len(resumed.profile) == 5 != len(first.profile)


def test_a_second_run_into_a_locked_folder_is_refused_in_one_line(tmp_path, capsys):
    v, cfg = two_reaches(tmp_path, junction=False)
    out = tmp_path / "out"
    holder = subprocess.Popen([sys.executable, "-c", (
        "import sys, time; from geoflow.batch.lock import FolderLock; "
        f"l = FolderLock({str(out)!r}, 'holder').acquire(); print('locked', flush=True); time.sleep(60)")],
        stdout=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert holder.stdout.readline().strip() == "locked"
        for command in (["run", str(cfg), "--quiet"], ["run", str(cfg), "--quiet", "--resume"]):
            assert main(command) == 2
            err = capsys.readouterr().err.strip()
            assert len(err.splitlines()) == 1 and "another geoflow run" in err and f"process {holder.pid}" in err
        assert sorted(p.name for p in out.iterdir()) == [".geoflow.lock"], "the refused run wrote nothing"
        os.kill(holder.pid, signal.SIGKILL)         # a killed run leaves its lock file behind ...
        holder.wait()
        assert (out / ".geoflow.lock").read_text().strip()
        res = run(cfg)                               # ... which is taken over
        assert not res.failed and not (out / ".geoflow.lock").exists()
        assert "took over the lock" in (out / "run.log").read_text()
    finally:
        if holder.poll() is None:
            holder.kill()


def test_two_simultaneous_runs_into_one_folder_one_is_refused(tmp_path):
    v, cfg = two_reaches(tmp_path, junction=False)
    procs = [subprocess.Popen([sys.executable, "-m", "geoflow.cli", "run", str(cfg), "--quiet"],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
             for _ in range(2)]
    results = [(p.wait(timeout=300), p.stderr.read()) for p in procs]
    codes = sorted(c for c, _ in results)
    if codes == [0, 0]:      # the first finished before the second started: run them overlapped by a lock
        pytest.skip("the two runs did not overlap on this machine")
    assert codes == [0, 2], results
    err = next(e for c, e in results if c == 2).strip()
    assert len(err.splitlines()) == 1 and "another geoflow run" in err


def test_lock_is_exclusive_in_one_process_too(tmp_path):
    with FolderLock(tmp_path, "a"):
        with pytest.raises(RunLockedError, match="another geoflow run"):
            FolderLock(tmp_path, "b").acquire()
    FolderLock(tmp_path, "c").acquire().release()


def _die_on_r2(spec):
    from geoflow.batch.tasks import compute_reach
    if spec.reach_id == "r2":
        os._exit(9)
    return compute_reach(spec)


def test_a_killed_pool_worker_fails_its_reach_with_a_resume_hint(tmp_path, monkeypatch, capsys):
    import geoflow.batch.engines as engines
    v, cfg = two_reaches(tmp_path, junction=False)
    clean = run(Path(str(cfg)))
    out = clean.output_dir
    monkeypatch.setattr(engines, "compute_reach", _die_on_r2)
    res = run(cfg, workers=2)
    assert "r2" in res.failed
    err = manifest_of(out)["reaches"]["r2"]["error"]
    assert "worker process" in err and "--resume" in err
    monkeypatch.undo()
    resumed = run(cfg, resume=True)
    assert not resumed.failed
    np.testing.assert_array_equal(resumed.profile["wse_m"].to_numpy(), clean.profile["wse_m"].to_numpy())


def test_an_unreachable_scheduler_fails_fast_and_writes_nothing(tmp_path):
    pytest.importorskip("distributed")
    v, cfg = two_reaches(tmp_path, junction=False)
    t0 = time.perf_counter()
    with pytest.raises(GeoflowError, match="cannot reach the Dask scheduler"):
        run(cfg, scheduler="tcp://127.0.0.1:9")
    assert time.perf_counter() - t0 < 20
    assert not (tmp_path / "out").exists()


def test_disk_full_during_assembly_is_one_line(tmp_path, monkeypatch, capsys):
    import geoflow.batch.assemble as assemble
    v, cfg = two_reaches(tmp_path, junction=False)

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")
    monkeypatch.setattr(assemble.outputs, "write_sections_gpkg", full)
    assert main(["run", str(cfg), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "no space left on the device" in err and "Traceback" not in err
    assert "assembling" in manifest_of(tmp_path / "out")["error"]


def test_disk_full_on_a_real_small_file_system(tmp_path, capsys):
    v, cfg = two_reaches(tmp_path, junction=False)
    mount = tmp_path / "small"
    mount.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=400k", "tmpfs", str(mount)],
                      capture_output=True).returncode != 0:
        pytest.skip("cannot mount a small tmpfs here (needs root)")
    try:
        cfg.write_text(cfg.read_text().replace('output_dir = "out"', f'output_dir = "{mount}"'))
        code = main(["run", str(cfg), "--quiet"])
        cap = capsys.readouterr()
        assert code in (1, 2)
        text = cap.out + cap.err
        assert "no space left on the device" in text and "Traceback" not in text and "internal error" not in text
        assert len(cap.err.strip().splitlines()) == 1
    finally:
        subprocess.run(["umount", str(mount)], capture_output=True)


def test_progress_lines_end_properly_when_not_a_terminal():
    buf = io.StringIO()
    bar = Progress(3, True, stream=buf)
    for k in range(3):
        bar.step(f"reach {k}")
    text = buf.getvalue()
    assert "\r" not in text and text.count("\n") == 3 and text.endswith("\n")
