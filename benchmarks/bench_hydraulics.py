"""Throughput of the standard-step solver against a scipy solve_ivp reference at equal accuracy.

Case: prismatic trapezoid (b = 5 m, side slope 2, n = 0.03, S0 = 0.001), 500 sections 20 m apart,
10 events (Q = 5..100 m3/s, downstream WSE 1 m above normal depth: M1 backwater curves).
Truth: solve_ivp (DOP853, rtol 1e-12) of dy/dx = (S0 - Sf)/(1 - Q^2 T/(g A^3)) (Chow 1959,
ch. 9, from memory). The standard step runs with no eddy losses (the ODE has none). The
reference is the loosest solve_ivp (RK45) tolerance whose error is not larger than the standard
step's, timed in the same run. Run: python benchmarks/bench_hydraulics.py
"""
from __future__ import annotations

import time

import numpy as np
from scipy.integrate import solve_ivp

from geoflow.hydraulics.boundaries import normal_wse
from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.solver import Boundary, SolverOptions, solve_events, solve_profile

B, Z, N, S0, G = 5.0, 2.0, 0.03, 0.001, 9.80665
SECTIONS, EVENTS, DX = 500, 10, 20.0


def rhs_for(q):
    def rhs(_, y):
        y = np.maximum(y, 1e-6)  # RK45 trial steps may probe below the bed
        a = (B + Z * y) * y
        p = B + 2 * y * np.sqrt(1 + Z * Z)
        sf = (q * N / (a * (a / p) ** (2 / 3))) ** 2
        return (S0 - sf) / (1 - q * q * (B + 2 * Z * y) / (G * a ** 3))
    return rhs


def ode_profiles(x, qs, y_end, method, rtol):
    out = []
    for q, y0 in zip(qs, y_end):
        sol = solve_ivp(rhs_for(q), (x[-1], x[0]), [y0], t_eval=x[::-1], method=method,
                        rtol=rtol, atol=rtol * 1e-3)
        out.append(sol.y[0][::-1])
    return np.array(out)


def timed(fun, repeat=3):
    best, result = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = fun()
        best = min(best, time.perf_counter() - t0)
    return best, result


def main():
    x = np.arange(SECTIONS) * DX
    bed = S0 * (x[-1] - x)
    tables = [build_table([0, 8 * Z, 8 * Z + B, 16 * Z + B], [zb + 8, zb, zb, zb + 8], [N] * 3,
                          [1] * 3) for zb in bed]
    lengths = np.full((SECTIONS - 1, 3), DX)
    qs = np.linspace(5.0, 100.0, EVENTS)
    y_end = normal_wse(tables[-1], qs, S0) + 1.0
    q_grid = np.repeat(qs[:, None], SECTIONS, axis=1)
    opts = SolverOptions(contraction=0.0, expansion=0.0)
    truth = ode_profiles(x, qs, y_end, "DOP853", 1e-12)

    t_vec, profs = timed(lambda: solve_events(tables, lengths, q_grid,
                                              downstream=Boundary.stage(y_end), options=opts), 1)
    err_step = max(np.max(np.abs(p.wse - bed - truth[k])) for k, p in enumerate(profs))
    t_loop, _ = timed(lambda: [solve_profile(tables, lengths, q_grid[k],
                                             downstream=Boundary.stage(y_end[k]), options=opts)
                               for k in range(EVENTS)], 1)
    rows = [("standard step, solve_events", t_vec, err_step),
            ("standard step, solve_profile per event", t_loop, err_step)]
    for rtol in 10.0 ** -np.arange(2, 11):
        err = np.max(np.abs(ode_profiles(x, qs, y_end, "RK45", rtol) - truth))
        if err <= err_step:
            t_ode, _ = timed(lambda: ode_profiles(x, qs, y_end, "RK45", rtol))
            rows.append((f"solve_ivp RK45 rtol={rtol:.0e} (reference)", t_ode, err))
            break
    ref = rows[-1][1]
    work = SECTIONS * EVENTS
    print(f"{SECTIONS} sections x {EVENTS} events, prismatic M1 backwater")
    print(f"{'method':<44}{'time s':>9}{'sect*ev/s':>12}{'max err m':>12}{'speed vs ref':>14}")
    for name, t, err in rows:
        print(f"{name:<44}{t:>9.3f}{work / t:>12.0f}{err:>12.2e}{ref / t:>14.2f}")


if __name__ == "__main__":
    main()
