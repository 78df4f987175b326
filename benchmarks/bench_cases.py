"""Cost of roughness cases, calibration and rating curves, as ratios to one event in the same run.

Input: one synthetic compound valley (trapezoidal channel between floodplains; tests/valleys.py),
generated into benchmarks/data/ (gitignored). Reported:

1. rating curve: 20 discharges solved together on one set of section tables, against one event on
   the same reach (tables built once in both), and against the same 20 discharges solved one by one;
2. roughness cases: the whole run (hydraulics, rasters, outlines, tables) with cases low and high
   against the normal case only; and the hydraulics alone (three table builds and solves vs one);
3. calibration: one reach calibrated to marks at two flows, as a number of solves and a ratio to one
   event.

Usage: python benchmarks/bench_cases.py [--length 5000] [--spacing 50] [--repeat 3]
"""
from __future__ import annotations

import argparse
import shutil
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

from valleys import compound_config, make_compound_valley  # noqa: E402

from geoflow.batch import reach, run  # noqa: E402
from geoflow.batch.inputs import open_inputs  # noqa: E402
from geoflow.config import Event, load_config  # noqa: E402

CLASSES = """[roughness.classes.channel]
n = 0.035
n_low = 0.030
n_high = 0.045
[roughness.classes.floodplain]
n = 0.080
n_low = 0.060
n_high = 0.100
"""


def best(fn, repeat: int) -> float:
    """Smallest wall time of ``repeat`` calls (s)."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def hydraulics(cfg_path: Path, repeat: int) -> None:
    cfg = load_config(cfg_path)
    inputs = open_inputs(cfg)
    rid, line = inputs.reaches[0]
    geom = reach.build_geometry(cfg, inputs, rid, line)
    one = [Event(name="e", discharge=150.0)]
    ladder = [Event(name=f"q{k}", discharge=float(q)) for k, q in enumerate(np.geomspace(5.0, 400.0, 20))]
    t_tables = best(lambda: reach.build_tables(geom, cfg), repeat)
    t_one = best(lambda: reach.solve_reach(cfg, geom, one), repeat)
    t_rating = best(lambda: reach.solve_reach(cfg, geom, ladder), repeat)
    t_each = best(lambda: [reach.solve_reach(cfg, geom, [ev]) for ev in ladder], 1)
    t_cases = best(lambda: [reach.solve_reach(cfg, geom, one, factors=f) for f in
                            ({}, {"channel": 0.030 / 0.035, "floodplain": 0.75},
                             {"channel": 0.045 / 0.035, "floodplain": 1.25})], repeat)
    print(f"reach of {len(geom.sections)} sections (tables {t_tables * 1000:.0f} ms)")
    print(f"  one event (tables + solve)          : {t_one * 1000:7.1f} ms")
    print(f"  20-discharge rating, solved together: {t_rating * 1000:7.1f} ms = {t_rating / t_one:.2f}x one event")
    print(f"  the same 20, one solve each         : {t_each * 1000:7.1f} ms = {t_each / t_one:.2f}x one event "
          f"({t_each / t_rating:.1f}x the joint solve)")
    print(f"  low/normal/high hydraulics          : {t_cases * 1000:7.1f} ms = {t_cases / t_one:.2f}x normal only")


def whole_runs(folder: Path, v, marks_extra: str, repeat: int) -> None:
    def timed(name: str, text: str) -> float:
        path = folder / f"{name}.toml"
        path.write_text(text.replace('output_dir = "out"', f'output_dir = "out_{name}"'))
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            res = run(path)
            times.append(time.perf_counter() - t0)
            assert not res.failed, res.reaches
        return min(times)
    base = compound_config(folder, v, CLASSES, {"flood": 150.0}).read_text()
    t_normal = timed("normal", base)
    t_cases = timed("cases", base.replace('channel_class = "channel"', 'channel_class = "channel"\n'
                                          'cases = ["low", "high"]'))
    t_cal = timed("calibrated", base + marks_extra)
    print("whole runs (sections, hydraulics, rasters, outlines, report)")
    print(f"  normal case only   : {t_normal:6.2f} s")
    print(f"  low, normal, high  : {t_cases:6.2f} s = {t_cases / t_normal:.2f}x")
    print(f"  calibrated (marks at two flows): {t_cal:6.2f} s = {t_cal / t_normal:.2f}x")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--length", type=float, default=5000.0)
    ap.add_argument("--spacing", type=float, default=50.0)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    folder = HERE / "data" / "cases"
    shutil.rmtree(folder, ignore_errors=True)
    v = make_compound_valley(folder, length=args.length)
    cfg = compound_config(folder, v, CLASSES, {"flood": 150.0}, spacing=args.spacing)
    hydraulics(cfg, args.repeat)
    import geopandas as gpd
    from shapely.geometry import Point
    ch = np.linspace(100.0, args.length - 100.0, 6)
    pts = [Point(v.x0 + c, 4200000.0 + v.half_width) for c in ch] * 2
    wse = [float(v.bed_at(v.x0 + c) + v.normal_depth(q, 0.035, 0.080)) for q in (20.0, 150.0) for c in ch]
    gpd.GeoDataFrame({"event": ["small"] * 6 + ["flood"] * 6, "wse_m": wse}, geometry=pts,
                     crs="EPSG:32630").to_file(folder / "marks.gpkg", driver="GPKG")
    marks = '[[events]]\nname = "small"\ndischarge = 20.0\n[calibration]\nobservations = "marks.gpkg"\n'
    whole_runs(folder, v, marks, args.repeat)
    import json
    cal = json.loads((folder / "out_calibrated" / "manifest.json").read_text())["calibration"]["reaches"]
    for rid, c in cal.items():
        print(f"  calibration of reach {rid}: {c['solves']} solves, rmse {c['rmse_m'] * 1000:.2f} mm")
    shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
