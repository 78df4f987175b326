"""Batch scaling: the same 20-reach run with 1 and with 2 local workers, as a ratio in one run.

The input (20 parallel synthetic valleys) is generated into benchmarks/data/ (gitignored).
Usage: python benchmarks/bench_batch.py [--reaches 20] [--length 2000] [--workers 2]
"""
from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

from valleys import make_valley, write_config  # noqa: E402

from geoflow.batch import run  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--reaches", type=int, default=20)
    ap.add_argument("--length", type=float, default=2000.0)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    data = HERE / "data" / "batch"
    shutil.rmtree(data, ignore_errors=True)
    v = make_valley(data, length=args.length, half_width=60.0, n_reaches=args.reaches)
    cfg = write_config(data, v, discharge=30.0, n=0.03, width=100.0, spacing=25.0,
                       extra='[[events]]\nname = "high"\ndischarge = 45.0\n')
    timings = {}
    for workers in (1, args.workers):
        out = Path(tempfile.mkdtemp(dir=data))
        text = cfg.read_text().replace('output_dir = "out"', f'output_dir = "{out.name}"')
        path = data / f"w{workers}.toml"
        path.write_text(text)
        t0 = time.perf_counter()
        res = run(path, workers=workers)
        timings[workers] = time.perf_counter() - t0
        assert not res.failed, res.failed
    ratio = timings[1] / timings[args.workers]
    print(f"{args.reaches} reaches x 2 events, {args.length:.0f} m each")
    print(f"  1 worker : {timings[1]:7.2f} s")
    print(f"  {args.workers} workers: {timings[args.workers]:7.2f} s")
    print(f"  speed-up : {ratio:.2f}x (goal >= 1.8x with 2 workers on 2 cores)")
    shutil.rmtree(data, ignore_errors=True)


if __name__ == "__main__":
    main()
