"""Throughput of whole runs at network scale, each against its own I/O floor measured in the same run.

Inputs are generated into benchmarks/data/ (gitignored, never committed) by network_data.py:
meandering valleys with a channel and floodplain land-cover patches. Each measurement runs in a
fresh interpreter (its wall time, CPU time of it and its child processes, peak RSS).

1. network: N reaches totalling K km x E events (default 200 reaches, 500 km, 5 events; --quick:
   20 reaches, 50 km, 2 events; 2 m cells), run serially and with --workers local workers:
   km x events per core-hour (CPU seconds of every process), the share of each stage (from
   geoflow.timing: sections, overlay, hydraulics, mapping, report, I/O, ...), the ratio to the
   I/O floor (io_floor.py: the DEM windows the run read, the rasters it wrote, same writer), and
   an extrapolation (stated as such) to 100,000 km on a 100-core Dask cluster.
2. lengths: one valley each of 4, 12 and 40 km (1 m cells, E events): CPU seconds per km (flat,
   not growing with length), peak RSS (goal < 600 MB at 40 km), the 12 km valley's run / floor
   (goal <= 3, then 1.5).
3. demo: ``geoflow run configs/demo.toml`` wall time (best of 3, goal < 5 s) and, in one process,
   how much of it is imports, validation and computing.

    .venv/bin/python benchmarks/bench_network.py --quick          # routine use, a few minutes
    .venv/bin/python benchmarks/bench_network.py                  # the full network, about an hour
    .venv/bin/python benchmarks/bench_network.py --only lengths   # network | lengths | demo
"""
from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
DATA = HERE / "data"
sys.path.insert(0, str(HERE))

TASK_STAGES = ("sections", "overlay", "hydraulics", "mapping", "report", "tables", "io_read", "io_write")
TARGET_KM, TARGET_EVENTS, TARGET_CORES = 100_000.0, 5, 100


def child_run(config: Path, workers: int, floor: bool, inline: bool) -> dict:
    """One run in this fresh interpreter: times, CPU, RSS, stage seconds, and optionally its floor.

    ``inline``: reports drawn by the task itself (no report process), so a 1-worker run uses one core.
    """
    t0 = time.perf_counter()
    from geoflow import timing
    from geoflow.batch import reports, run
    t_import = time.perf_counter() - t0
    if inline:
        reports.start = lambda *args: None
    shutil.rmtree(config.parent / "out", ignore_errors=True)
    t1, c1 = time.perf_counter(), time.process_time()
    res = run(config, workers=workers)
    wall = time.perf_counter() - t1
    parent, parent_cpu = timing.snapshot(), timing.snapshot(cpu=True)
    man = json.loads((res.output_dir / "manifest.json").read_text())
    tasks, tasks_cpu = {}, {}
    for entry in man["reaches"].values():
        for k, v in (entry.get("timings_s") or {}).items():
            if k == "cpu":
                for kk, vv in v.items():
                    tasks_cpu[kk] = tasks_cpu.get(kk, 0.0) + vv
            else:
                tasks[k] = tasks.get(k, 0.0) + v
    rs, rc = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    out = {"import_s": t_import, "wall_s": wall, "compute_and_assemble_s": res.elapsed_s,
           "cpu_s": time.process_time() - c1 + rc.ru_utime + rc.ru_stime,      # the run's, imports aside
           "cpu_self_s": time.process_time() - c1, "cpu_children_s": rc.ru_utime + rc.ru_stime,
           "rss_mb": rs.ru_maxrss / 1024, "rss_children_mb": rc.ru_maxrss / 1024,
           "parent_stages": parent, "task_stages": tasks, "parent_cpu": parent_cpu, "task_cpu": tasks_cpu,
           "failed": res.failed, "inline": inline,
           "reaches": len(res.reaches), "workers": workers}
    if floor:
        from io_floor import io_floor
        out["floor"] = io_floor(config)
    return out


def child_demo() -> dict:
    """The demo in one process: imports, validation (run minus its compute), compute and assembly."""
    t0 = time.perf_counter()
    from geoflow.batch import run
    t_import = time.perf_counter() - t0
    cfg = demo_config()
    shutil.rmtree(cfg.parent / "demo_out", ignore_errors=True)
    t1 = time.perf_counter()
    res = run(cfg)
    wall = time.perf_counter() - t1
    return {"import_s": t_import, "validation_s": wall - res.elapsed_s, "compute_s": res.elapsed_s,
            "failed": res.failed}


def demo_config() -> Path:
    """configs/demo.toml with absolute input paths, writing into benchmarks/data/demo_out."""
    text = (ROOT / "configs" / "demo.toml").read_text()
    text = text.replace('"../sample_gis/', f'"{ROOT / "sample_gis"}/').replace('"../out/demo"', '"demo_out"')
    DATA.mkdir(parents=True, exist_ok=True)
    path = DATA / "demo.toml"
    path.write_text(text)
    return path


def spawn(*args: str) -> dict:
    proc = subprocess.run([sys.executable, __file__, "--child", *args], capture_output=True, text=True)
    if proc.returncode != 0:
        sys.exit(f"child {args} failed:\n{proc.stderr[-3000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def stage_shares(r: dict) -> dict:
    """CPU seconds by stage over every process: the run's own (validation, assembly, in-process
    tasks), its workers' (from the manifest) and, for the report process, its wall seconds."""
    s = dict(r["parent_cpu"])
    if r["workers"] > 1:
        for k in TASK_STAGES:
            s[k] = s.get(k, 0.0) + r["task_cpu"].get(k, 0.0)
    s["report"] = s.get("report", 0.0) + r["task_stages"].get("report_process", 0.0)
    s["io"] = s.pop("io_read", 0.0) + s.pop("io_write", 0.0)
    return s


def print_shares(r: dict) -> None:
    s = stage_shares(r)
    total = sum(s.values())
    print("      CPU seconds by stage (share of %.1f s): " % total
          + ", ".join(f"{k} {v:.1f} ({100 * v / total:.0f} %)" for k, v in sorted(s.items(), key=lambda kv: -kv[1])))


def network(args) -> None:
    from network_data import make_network
    reaches, km, events = (20, 50.0, 2) if args.quick else (args.reaches, args.km, args.events)
    t0 = time.perf_counter()
    net = make_network(DATA / f"network_{reaches}x{km:g}km", reaches, 1000.0 * km / reaches, events=events, cell=2.0)
    print(f"network: {net.reaches} reaches x {net.reach_length_m / 1000:.2f} km = {net.total_km:.0f} km, "
          f"{events} events, DEM {net.columns} x {net.rows} valleys at 2 m (inputs ready in "
          f"{time.perf_counter() - t0:.0f} s)")
    serial = spawn("run", str(net.config), "1", "floor", "inline")
    many = spawn("run", str(net.config), str(args.workers))
    kme = net.total_km * events
    for r in (serial, many):
        assert not r["failed"], r["failed"]
        print(f"  {r['workers']} worker(s): wall {r['wall_s']:.1f} s (imports {r['import_s']:.1f} s before it), "
              f"CPU {r['cpu_s']:.1f} s, {kme / (r['cpu_s'] / 3600):,.0f} km x events per core-hour; "
              f"peak RSS {r['rss_mb']:.0f} MB (workers {r['rss_children_mb']:.0f} MB)")
        print_shares(r)
    fl = serial["floor"]
    print(f"  I/O floor (serial): {fl['seconds']:.1f} s wall, {fl['cpu_s']:.1f} s CPU ({fl['dem_cells_read'] / 1e6:.0f} "
          f"Mcells read, {fl['rasters_written']} rasters written): whole run / floor = "
          f"{serial['wall_s'] / fl['seconds']:.2f} in wall time, {serial['cpu_s'] / fl['cpu_s']:.2f} in CPU time")
    speedup = serial["wall_s"] / many["wall_s"]
    print(f"  speed-up with {args.workers} workers: {speedup:.2f}x")
    extrapolate(serial, many, net.total_km, events, args.workers)


def extrapolate(serial: dict, many: dict, km: float, events: int, workers: int) -> None:
    """100,000 km x 5 events on 100 cores, from the N-worker run's costs (an extrapolation).

    Client (serial on any cluster): this process's CPU in the N-worker run (opening the inputs,
    the cheap checks, scheduling, assembling the run-level files). Workers: their CPU (validating
    each reach, then computing it, reports included), at the parallel efficiency measured here.
    """
    efficiency = min(serial["wall_s"] / (many["wall_s"] * workers), 1.0)
    client_h = many["cpu_self_s"] / km * TARGET_KM / 3600
    worker_h = many["cpu_children_s"] / (km * events) * TARGET_KM * TARGET_EVENTS / (TARGET_CORES * efficiency) / 3600
    print(f"  per km: client {many['cpu_self_s'] / km:.3f} CPU s, workers {many['cpu_children_s'] / (km * events):.3f} "
          f"CPU s per km x event; parallel efficiency with {workers} workers {efficiency:.2f} (wall times)")
    print(f"  extrapolation (not a measurement): {TARGET_KM:,.0f} km x {TARGET_EVENTS} events on {TARGET_CORES} "
          f"cores at these costs: {client_h + worker_h:.1f} h ({worker_h:.1f} h on the workers, {client_h:.1f} h "
          "in the client, which works serially)")


def lengths(args) -> None:
    from network_data import make_network
    rows = []
    for km in args.lengths:
        net = make_network(DATA / f"valley_{km:g}km", 1, 1000.0 * km, events=args.events, cell=1.0)
        r = spawn("run", str(net.config), "1", "floor" if km == 12 else "")
        assert not r["failed"], r["failed"]
        rows.append((km, r))
        print(f"  {km:4.0f} km valley x {args.events} events: wall {r['wall_s']:.1f} s, CPU {r['cpu_s']:.1f} s = "
              f"{r['cpu_s'] / km:.2f} CPU s per km; peak RSS {max(r['rss_mb'], r['rss_children_mb']):.0f} MB")
        print_shares(r)
        if "floor" in r:
            fl = r["floor"]
            print(f"       I/O floor {fl['seconds']:.1f} s wall, {fl['cpu_s']:.1f} s CPU "
                  f"({fl['dem_cells_read'] / 1e6:.1f} Mcells read, {fl['rasters_written']} rasters): whole run / "
                  f"floor = {r['wall_s'] / fl['seconds']:.2f} in wall time, {r['cpu_s'] / fl['cpu_s']:.2f} in CPU "
                  "time (goal <= 3, then 1.5)")
    per_km = [r["cpu_s"] / km for km, r in rows]
    print(f"  CPU s per km, longest / shortest: {per_km[-1] / per_km[0]:.2f} (flat = 1; quadratic would be "
          f"{rows[-1][0] / rows[0][0]:.0f})")


def demo(args) -> None:
    walls = []
    cfg = demo_config()
    for _ in range(3):
        shutil.rmtree(cfg.parent / "demo_out", ignore_errors=True)
        t0 = time.perf_counter()
        proc = subprocess.run([str(Path(sys.executable).parent / "geoflow"), "run", str(cfg), "--quiet"],
                              capture_output=True, text=True)
        walls.append(time.perf_counter() - t0)
        if proc.returncode != 0:
            sys.exit(proc.stderr)
    parts = min((spawn("demo") for _ in range(3)), key=lambda p: p["import_s"] + p["validation_s"] + p["compute_s"])
    print(f"demo: geoflow run configs/demo.toml: wall {min(walls):.2f} s best of 3 (all: "
          f"{', '.join(f'{w:.2f}' for w in walls)}; goal < 5 s); in one process: imports {parts['import_s']:.2f} s, "
          f"validation {parts['validation_s']:.2f} s, compute and assembly {parts['compute_s']:.2f} s")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="20 reaches, 50 km, 2 events; valleys of 4 and 12 km")
    ap.add_argument("--reaches", type=int, default=200)
    ap.add_argument("--km", type=float, default=500.0)
    ap.add_argument("--events", type=int, default=5)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--lengths", type=float, nargs="+", default=None, help="valley lengths, km (default 4 12 40)")
    ap.add_argument("--only", choices=["network", "lengths", "demo"], action="append")
    ap.add_argument("--child", nargs="+", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        kind = args.child[0]
        res = child_demo() if kind == "demo" else \
            child_run(Path(args.child[1]), int(args.child[2]), "floor" in args.child[3:], "inline" in args.child[3:])
        print(json.dumps(res))
        return
    if args.lengths is None:
        args.lengths = [4.0, 12.0] if args.quick else [4.0, 12.0, 40.0]
    if args.quick:
        args.events = min(args.events, 2)
    for part in args.only or ["demo", "lengths", "network"]:
        {"network": network, "lengths": lengths, "demo": demo}[part](args)


if __name__ == "__main__":
    main()
