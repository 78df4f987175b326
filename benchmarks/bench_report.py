"""Report cost on the demo: the share of the run spent writing report pages, measured in one run.

Runs configs/demo.toml (into benchmarks/out/report, gitignored) a few times and prints, per run,
the time of each reach page (manifest ``timings_s.report``), of the index page
(``report_index_s``) and their share of the run's wall time; then the median share.
Usage: python benchmarks/bench_report.py [--repeat 3]
"""
from __future__ import annotations

import argparse
import json
import statistics
import time
from pathlib import Path

from geoflow.batch import run

HERE = Path(__file__).resolve().parent


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    out = HERE / "out" / "report"
    out.mkdir(parents=True, exist_ok=True)
    demo = HERE.parent / "configs" / "demo.toml"
    text = demo.read_text(encoding="utf-8").replace('"../sample_gis/', f'"{(HERE.parent / "sample_gis").as_posix()}/')
    cfg = out / "demo.toml"
    cfg.write_text(text.replace('output_dir = "../out/demo"', 'output_dir = "run"'), encoding="utf-8")
    shares = []
    for k in range(args.repeat):
        t0 = time.perf_counter()
        run(cfg)
        wall = time.perf_counter() - t0
        man = json.loads((out / "run" / "manifest.json").read_text(encoding="utf-8"))
        pages = {r: v["timings_s"].get("report", 0.0) for r, v in man["reaches"].items()}
        report = sum(pages.values()) + man.get("report_index_s", 0.0)
        shares.append(report / wall)
        print(f"run {k + 1}: wall {wall:.2f} s, reach pages " + ", ".join(f"{r} {t:.2f} s" for r, t in pages.items())
              + f", index {man.get('report_index_s', 0.0):.2f} s: {100 * shares[-1]:.0f} % of the run")
    print(f"median share of the run spent on reports: {100 * statistics.median(shares):.0f} %")


if __name__ == "__main__":
    main()
