"""Throughput of the standard-step solver (``solve_events``, compiled kernel and numpy reference
engine) against scipy ``solve_ivp`` references at equal accuracy, plus the hydraulics share of
the demo run. All ratios are measured in one run of this script (the machine may be shared:
repeat if numbers look noisy).

(a) PRISMATIC, closed-form ODE: trapezoid b = 5 m, side slope 2, n = 0.03, S0 = 0.001,
    500 sections 20 m apart, 10 events (Q = 5..100 m3/s, downstream WSE 1 m above normal
    depth: M1 curves). ODE dy/dx = (S0 - Sf)/(1 - Q^2 T/(g A^3)) with A, P, T in closed form
    (Chow 1959, ch. 9, from memory) - a few flops per right-hand side.
(b) NATURAL SECTIONS, general-purpose ODE: 500 irregular sections (151 ground points each,
    a wandering channel in a bumpy floodplain, 4 or 5 subdivisions), 20 m apart, 10 events
    (Q = 20..400 m3/s, in bank to well over the floodplains), normal-depth stage downstream.
    The same gradually-varied-flow ODE, written for a non-prismatic channel (dE/dx = -Sf with
    E = zb + y + alpha Q^2/(2 g A^2), d alpha neglected):
        dy/dx = (S0 - Sf + alpha Q^2/(g A^3) dA/dx|y) / (1 - alpha Q^2 T/(g A^3)),
    where A, K, T, alpha at (x, y) interpolate linearly in x between the two neighbouring
    sections evaluated at depth y with the package's geometry code, and S0 is the thalweg
    slope between them. Two references on this ODE:
      (b)  one solve_ivp per event, properties by the exact segment clipping ``properties``
           (what a general-purpose ODE code on this geometry does);
      (b') all 10 events as one ODE system (vectorised right-hand side) with properties from
           the new level tables (``fast_properties``) - the strongest reference we could build.
    Both references give the same answer (the two property paths agree to ~1e-15).

Accuracy: each case's truth is DOP853 at rtol 1e-10 (a) / 1e-9 (b, with the level tables) of
its ODE. The standard step runs without eddy losses (the ODEs have none); its error is its max
|WSE - truth| (in (b) mostly the difference between the two discretisations, not solver
tolerance). A reference row uses the loosest RK45 rtol (1e-2, 1e-3, ...) whose error is not
larger. Throughput = section x event solves per second of ``solve_events`` (tables prebuilt;
``build_table`` time is printed separately). The last column is reference time / standard-step
time; the compiled rows reuse the reach's packed tables, whose one-off packing is printed
separately, as is numba's compile time). The speed-up column is reference time / compiled
time. The events table repeats (b) with 1, 10 and 200 events (Q evenly spaced in 20..400 m3/s)
against (b') at equal accuracy for the same events. Compile time: a fresh process with an
empty numba cache (NUMBA_CACHE_DIR in a temporary folder) solving a small reach in all three
regimes, and a second process loading that cache. The demo line runs ``geoflow.batch.run`` on
configs/demo.toml (outputs to a temporary folder) and reads the manifest's per-reach timings.
Run: python benchmarks/bench_hydraulics.py [--no-demo] [--no-events]
"""
from __future__ import annotations

import dataclasses
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from geoflow.hydraulics.boundaries import normal_wse
from geoflow.hydraulics.geometry import build_table, fast_properties, properties
from geoflow.hydraulics.packed import pack_reach
from geoflow.hydraulics.solver import Boundary, SolverOptions, solve_events

B, Z, N, S0, G = 5.0, 2.0, 0.03, 0.001, 9.80665
SECTIONS, EVENTS, DX = 500, 10, 20.0
NO_EDDY = SolverOptions(contraction=0.0, expansion=0.0)
ENGINE_ROWS = (("compiled", "standard step, compiled kernel"), ("numpy", "standard step, numpy engine"))
ROOT = Path(__file__).resolve().parents[1]


def timed(fun, repeat=3):
    """Best CPU time of this process over ``repeat`` calls, and the last result (CPU time, so
    that other work on a shared machine disturbs the ratios less; everything here is single
    threaded)."""
    best, result = np.inf, None
    for _ in range(repeat):
        t0 = time.process_time()
        result = fun()
        best = min(best, time.process_time() - t0)
    return best, result


def prismatic_case():
    """(a): tables, lengths, discharges (E, N), downstream WSE (E,), bed (N,), ODE solver."""
    x = np.arange(SECTIONS) * DX
    bed = S0 * (x[-1] - x)
    tables = [build_table([0, 8 * Z, 8 * Z + B, 16 * Z + B], [zb + 8, zb, zb, zb + 8],
                          [N] * 3, [1] * 3) for zb in bed]
    qs = np.linspace(5.0, 100.0, EVENTS)
    w_end = normal_wse(tables[-1], qs, S0) + 1.0

    def rhs(_, y, q):
        y = np.maximum(y, 1e-6)  # RK45 trial steps may probe below the bed
        a = (B + Z * y) * y
        p = B + 2 * y * np.sqrt(1 + Z * Z)
        sf = (q * N / (a * (a / p) ** (2 / 3))) ** 2
        return (S0 - sf) / (1 - q * q * (B + 2 * Z * y) / (G * a ** 3))

    def ode(method, rtol):
        out = []
        for q, y0 in zip(qs, w_end - bed[-1]):  # one solve_ivp per event
            sol = solve_ivp(rhs, (x[-1], x[0]), [y0], t_eval=x[::-1], method=method,
                            rtol=rtol, atol=rtol * 1e-3, args=(q,))
            out.append(sol.y[0][::-1] + bed)
        return np.array(out)
    return tables, np.full((SECTIONS - 1, 3), DX), np.repeat(qs[:, None], SECTIONS, 1), w_end, ode


def natural_ground(rng, k):
    """One irregular section: 151 points 2 m apart; a channel that wanders across a bumpy
    floodplain between rising valley sides; n 0.035 in the channel, 0.05/0.08 patches outside.
    Shapes vary smoothly from section to section (``k``) plus a little noise."""
    x = np.arange(151) * 2.0
    centre = 150.0 + 60.0 * np.sin(k / 40.0)
    half = 9.0 + 2.0 * np.sin(k / 17.0)
    bumps = (0.3 * np.sin(x / 23.0 + k / 50.0) + 0.2 * np.sin(x / 7.3 - k / 31.0)
             + rng.normal(0.0, 0.03, x.size))
    z = 3.0 + 0.004 * (x - 150.0) + bumps + 2e-3 * np.maximum(np.abs(x - 150.0) - 90.0, 0) ** 2
    bank = np.clip((half + 4.0 - np.abs(x - centre)) / 4.0, 0.0, 1.0)
    z = z * (1.0 - bank) + (0.5 + 0.1 * np.sin(k / 13.0)) * bank
    mid = 0.5 * (x[1:] + x[:-1])
    part = np.where(mid < centre - half - 4, 0, np.where(mid > centre + half + 4, 2, 1))
    woods = np.abs(mid - (centre + 50.0 * np.cos(k / 23.0))) < 20.0
    n = np.where(part == 1, 0.035, np.where(woods, 0.08, 0.05))
    return x, z, n, part


def natural_tables():
    """(b) geometry: 500 natural sections 20 m apart and their chainages."""
    rng = np.random.default_rng(20240601)
    x = np.arange(SECTIONS) * DX
    drop = S0 * (x[-1] - x)
    tables = []
    for k, zb in enumerate(drop):
        xs, zs, ns, ps = natural_ground(rng, k)
        tables.append(build_table(xs, zs + zb, ns, ps, name=f"n{k}"))
    return tables, x


def natural_case(tables, x, events=EVENTS, exact=True):
    """(b): tables, lengths, discharges, downstream WSE and the interpolated-section ODEs."""
    qs = np.linspace(20.0, 400.0, events)
    w_end = normal_wse(tables[-1], qs, S0)
    odes = {"fast": natural_ode(tables, x, qs, w_end, fast_properties, True)}
    if exact:
        odes["exact"] = natural_ode(tables, x, qs, w_end, properties, False)
    return tables, np.full((SECTIONS - 1, 3), DX), np.repeat(qs[:, None], SECTIONS, 1), w_end, odes


def natural_ode(tables, x, qs, w_end, geometry, together):
    """solve_ivp of the non-prismatic GVF ODE (module docstring) with section properties from
    ``geometry`` (``fast_properties`` or the exact clipping ``properties``); all events as one
    system (``together``) or one solve_ivp per event."""
    thalweg = np.array([t.thalweg for t in tables])

    def rhs(xx, y, q):
        i = min(max(int(np.searchsorted(x, xx, side="right")) - 1, 0), x.size - 2)
        dx = x[i + 1] - x[i]
        t = (xx - x[i]) / dx
        y = np.maximum(y, 1e-6)
        p1, p2 = geometry(tables[i], thalweg[i] + y), geometry(tables[i + 1], thalweg[i + 1] + y)
        a, k = (1 - t) * p1.area + t * p2.area, (1 - t) * p1.conveyance + t * p2.conveyance
        top, alpha = (1 - t) * p1.top_width + t * p2.top_width, (1 - t) * p1.alpha + t * p2.alpha
        c = alpha * q * q / (G * a ** 3)
        s0 = (thalweg[i] - thalweg[i + 1]) / dx
        return (s0 - (q / k) ** 2 + c * (p2.area - p1.area) / dx) / (1.0 - c * top)

    def solve(y0, q, method, rtol):
        sol = solve_ivp(rhs, (x[-1], x[0]), y0, t_eval=x[::-1], method=method, rtol=rtol,
                        atol=rtol * 1e-3, args=(q,))
        return sol.y[:, ::-1] + thalweg

    def ode(method, rtol):
        y0 = w_end - thalweg[-1]
        if together:
            return solve(y0, qs, method, rtol)
        return np.vstack([solve(y0[k:k + 1], qs[k:k + 1], method, rtol) for k in range(qs.size)])
    return ode


def step_rows(label, case, truth, repeat=3):
    """(name, seconds, max error m) of solve_events on ``case`` against ``truth`` (E, N), one
    row per engine (the compiled one first)."""
    tables, lengths, q, w_end, _ = case
    rows = []
    for engine, name in ENGINE_ROWS:
        opts = dataclasses.replace(NO_EDDY, engine=engine)
        t_step, profs = timed(lambda opts=opts: solve_events(tables, lengths, q, Boundary.stage(w_end),
                                                             options=opts), repeat if engine == "compiled" else 1)
        err = max(np.max(np.abs(p.wse - truth[k])) for k, p in enumerate(profs))
        rows.append((f"{label}: {name}", t_step, err))
    return rows


def reference_row(label, ode, truth, err_step, repeat=2):
    """The loosest RK45 rtol whose max error is not larger than ``err_step``, timed."""
    for rtol in 10.0 ** -np.arange(2, 11):
        t_ode, result = timed(lambda rtol=rtol: ode("RK45", rtol), 1)
        err = np.max(np.abs(result - truth))
        if err <= err_step:
            if repeat > 1:
                t_ode = min(t_ode, timed(lambda rtol=rtol: ode("RK45", rtol), repeat - 1)[0])
            return (f"{label} rtol={rtol:.0e}", t_ode, err)
    raise RuntimeError(f"{label}: no RK45 tolerance reached the standard-step accuracy")


def print_rows(title, rows, work=SECTIONS * EVENTS):
    """Rows (name, seconds, error); the last column is each row's time over the compiled
    standard step's (row 0): how many times faster the compiled kernel is."""
    print(title)
    print(f"{'method':<66}{'time s':>8}{'sect*ev/s':>11}{'max err m':>11}{'kernel speed-up':>16}")
    for name, t, err in rows:
        print(f"{name:<66}{t:>8.3f}{work / t:>11.0f}{err:>11.2e}{t / rows[0][1]:>15.1f}x")
    print()


def events_table(tables, x):
    """(b) with 1, 10 and 200 events: both engines and (b') at equal accuracy per event set."""
    print("(b) NATURAL sections, events: section*events/s and kernel speed-up over (b') at equal accuracy")
    print(f"{'events':>6}{'kernel s':>10}{'sect*ev/s':>11}{'numpy s':>9}{'sect*ev/s':>11}"
          f"{'RK45 s':>8}{'rtol':>7}{'sect*ev/s':>11}{'max err kernel/RK45 m':>24}{'vs RK45':>9}{'vs numpy':>9}")
    for events in (1, 10, 200):
        case = natural_case(tables, x, events, exact=False)
        truth = case[4]["fast"]("DOP853", 1e-9)
        (_, t_k, err), (_, t_n, _) = step_rows("", case, truth, repeat=5 if events < 200 else 2)
        name, t_r, err_r = reference_row("", case[4]["fast"], truth, err, repeat=2 if events < 200 else 1)
        work = SECTIONS * events
        print(f"{events:>6}{t_k:>10.4f}{work / t_k:>11.0f}{t_n:>9.3f}{work / t_n:>11.0f}{t_r:>8.3f}"
              f"{name.split('=')[1]:>7}{work / t_r:>11.0f}{err:>13.2e}/{err_r:.2e}{t_r / t_k:>8.1f}x"
              f"{t_n / t_k:>8.1f}x")
    print()


COMPILE_PROBE = """
import time
t0 = time.process_time()
import numpy as np
from geoflow.hydraulics import Boundary, SolverOptions, build_table, solve_events
import numba  # noqa: F401
t1 = time.process_time()
tables = [build_table([0, 0, 10, 10], [6 - 0.01 * i, 0.01 * i, 0.01 * i, 6], [0.03] * 3, [1] * 3)
          for i in range(5)][::-1]
for regime in ("subcritical", "supercritical", "mixed"):
    solve_events(tables, np.full((4, 3), 50.0), np.full((2, 5), 20.0), Boundary.stage(2.0),
                 Boundary.normal_depth(0.01), SolverOptions(regime=regime))
print(t1 - t0, time.process_time() - t1)
"""


def compile_times():
    """(import s, first solves s) of CPU time in a fresh process with an empty numba cache,
    then in a second one that loads the cache it left."""
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        runs = [subprocess.run([sys.executable, "-c", COMPILE_PROBE], env=env, check=True,
                               capture_output=True, text=True, cwd=ROOT).stdout.split()
                for _ in range(2)]
    (imp0, cold), (imp1, warm) = ([float(v) for v in r] for r in runs)
    print(f"numba compile (CPU s, not in the timings below): first solves in a fresh process with "
          f"an empty cache {cold:.1f} s; with the cache {warm:.2f} s (import of geoflow.hydraulics "
          f"+ numba {imp0:.2f} / {imp1:.2f} s)\n")


def demo_share():
    """Run configs/demo.toml (outputs to a temporary folder) and read per-reach timings."""
    from geoflow import batch
    from geoflow.config import load_config
    cfg = load_config(ROOT / "configs" / "demo.toml")
    with tempfile.TemporaryDirectory() as tmp:
        cfg = dataclasses.replace(cfg, run=dataclasses.replace(cfg.run, output_dir=Path(tmp)))
        batch.run(cfg)
        manifest = json.loads((Path(tmp) / "manifest.json").read_text())
    print("demo (configs/demo.toml), per reach: hydraulics s / total s (share)")
    for rid, info in manifest["reaches"].items():
        t = info["timings_s"]
        print(f"  {rid:<12}{t['hydraulics']:>8.3f} /{t['total']:>8.3f}  "
              f"({100 * t['hydraulics'] / t['total']:.1f} %)")


def main():
    compile_times()
    case_a = prismatic_case()
    tables, x = natural_tables()
    t_pack, _ = timed(lambda: pack_reach(list(tables)), 1)
    case_b = natural_case(tables, x)
    rng = np.random.default_rng(1)
    grounds = [natural_ground(rng, k) for k in range(100)]
    t_build, _ = timed(lambda: [build_table(*g) for g in grounds])
    print(f"{SECTIONS} sections x {EVENTS} events; build_table of a natural section "
          f"(151 points): {10 * t_build:.2f} ms; packing the 500 natural tables for the kernel "
          f"(once per reach): {1e3 * t_pack:.1f} ms (neither is in the timings below)\n")
    truth_a = case_a[4]("DOP853", 1e-10)
    rows = step_rows("(a)", case_a, truth_a)
    rows.append(reference_row("(a) solve_ivp RK45, closed-form trapezoid, per event", case_a[4],
                              truth_a, rows[0][2], repeat=3))
    print_rows("(a) PRISMATIC trapezoid vs the closed-form ODE (M1 backwater)", rows)
    odes = case_b[4]
    truth_b = odes["fast"]("DOP853", 1e-9)
    rows = step_rows("(b)", case_b, truth_b)
    rows.append(reference_row("(b) solve_ivp RK45, exact clipping, per event", odes["exact"],
                              truth_b, rows[0][2], repeat=1))
    rows.append(reference_row("(b') solve_ivp RK45, level tables, events vectorised",
                              odes["fast"], truth_b, rows[0][2]))
    print_rows("(b) NATURAL sections vs a general-purpose ODE on the same sections", rows)
    if "--no-events" not in sys.argv:
        events_table(tables, x)
    if "--no-demo" not in sys.argv:
        demo_share()


if __name__ == "__main__":
    main()
