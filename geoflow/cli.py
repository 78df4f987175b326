"""Command-line shell over the library: parse, call one function, turn GeoflowError into one line."""
from __future__ import annotations

import argparse
import sys

from . import __version__
from .constants import CAUTION
from .errors import GeoflowError

DESCRIPTION = (
    "geoflow: steady 1D water-surface profiles (standard-step energy method) and flood maps for many "
    "river reaches from a DEM, centrelines, a land-cover layer and design flows named in a TOML file.\n\n"
    f"CAUTION: {CAUTION}"
)


class _Parser(argparse.ArgumentParser):
    """argparse with usage mistakes reported on one line (exit status 2), like every other error."""

    def error(self, message: str):
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog.split()[0]} --help)\n")


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="geoflow", description=DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--version", action="version", version=f"geoflow {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=_Parser)
    r = sub.add_parser("run", help="compute every reach x event of a config and write all outputs",
                       description=f"Compute every reach x event and write the outputs.\n\nCAUTION: {CAUTION}",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    r.add_argument("config", nargs="+", help="path(s) to TOML configs; every reach of each is run")
    r.add_argument("--workers", type=int, default=1, metavar="N",
                   help="local worker processes (default 1: run in this process)")
    r.add_argument("--scheduler", metavar="ADDRESS",
                   help="Dask distributed scheduler address (e.g. tcp://10.0.0.5:8786); workers must see the "
                        "same file system")
    r.add_argument("--resume", action="store_true",
                   help="skip reach x event units that manifest.json records complete with the same config and inputs")
    r.add_argument("--keep-going", action="store_true",
                   help="compute the reaches that pass validation even when others fail it (those are recorded "
                        "as failed; exit status 1); without it any problem stops the run before it writes")
    r.add_argument("--quiet", action="store_true", help="no progress display")
    c = sub.add_parser("check", help="validate the config and inputs, list reaches, sections and events; "
                                     "compute and write nothing",
                       description=f"Validate config and inputs; write nothing.\n\nCAUTION: {CAUTION}",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    c.add_argument("config", help="path to the TOML config")
    return p


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        from .batch import check, run  # after parsing: --help and --version stay fast
        if args.command == "check":
            for line in check(args.config, keep_geometries=False).summary_lines():
                print(line)
            return 0
        if args.workers < 1:
            raise GeoflowError(f"--workers must be 1 or more, got {args.workers}")
        results = run(list(args.config), workers=args.workers, scheduler=args.scheduler, resume=args.resume,
                      progress=not args.quiet, keep_going=args.keep_going)
    except GeoflowError as exc:
        print(f"geoflow: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("geoflow: interrupted; run again with --resume to continue", file=sys.stderr)
        return 130
    from .batch.summary import flag_lines, verdict
    failed = 0
    for result in results:
        for rid, r in result.reaches.items():
            print(f"{result.config.run.name}: reach {rid}: {verdict(r)}" + _calibration_note(r.get("calibration")))
            for line in flag_lines(r):
                print(f"    {line}")
        failed += len(result.failed)
        crossing = len(result.crossings)
        if crossing:
            print(f"{result.config.run.name}: {crossing} pair(s) of sections of different reaches cross "
                  "(listed in manifest.json and run.log); review them near confluences")
        print(f"outputs in {result.output_dir} ({result.elapsed_s:.1f} s"
              + (f", {result.reused_units} unit(s) reused" if result.reused_units else "") + ")")
    print(f"CAUTION: {CAUTION}")
    if failed:
        print(f"geoflow: {failed} reach(es) failed; see manifest.json and run.log, fix the cause and run again "
              "with --resume to compute only what is missing", file=sys.stderr)
        return 1
    return 0


def _calibration_note(cal: dict | None) -> str:
    """' (calibrated: channel x0.70, ..., rmse 0.012 m)' for a reach entry's calibration, or ''."""
    if not cal:
        return ""
    mult = ", ".join(f"{g} x{m:.3f}" for g, m in cal["multipliers"].items())
    verdict = "" if cal["well_determined"] else "; NOT well determined, see run.log"
    return f" (calibrated to {cal['marks']} mark(s): {mult}, rmse {cal['rmse_m']:.3f} m{verdict})"


def entry() -> int:
    """Console-script entry: ``main`` plus a quiet exit when the output pipe closes (``| head``)."""
    try:
        return main()
    except BrokenPipeError:
        import os
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(entry())
