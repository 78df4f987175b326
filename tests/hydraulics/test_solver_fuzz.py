"""Solver fuzzing (hypothesis): random natural-looking reaches, flows from a trickle to far over
the banks, flat to steep beds, every regime and friction-slope rule, on both engines.

Contract checked (definition of the solver, common practice, no source): every WSE is finite
and above the thalweg; every section meets the energy balance or carries a flag saying what was
assumed; where a section is solved (no flag) the standard-step energy equation
E_u = E_d + L Sf_bar + C |dh_v| (Chow 1959, Open-Channel Hydraulics, ch. 10, from memory), with
the discharge-weighted length and the chosen mean-friction-slope rule, recomputed here from the
Profile's own energy, conveyance and part discharges, holds within the tolerance; and the
compiled kernel gives the numpy reference's WSE and critical WSE within 1e-6 m and its flags.
"""
import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.solver import FRICTION_RULES, REGIMES, Boundary, SolverOptions, solve_events


@st.composite
def ground(draw, name):
    """A floodplain with bumps and a cross slope, a channel cut between two banks, n drawn per
    segment (several floodplain subdivisions), parts 0/1/2 from the banks."""
    m = draw(st.integers(6, 24))
    spacing = st.one_of(st.just(0.0), st.floats(0.05, 25.0))  # 0: a vertical step
    steps = np.array(draw(st.lists(spacing, min_size=m - 1, max_size=m - 1)))
    lb = draw(st.integers(1, m - 4))
    rb = draw(st.integers(lb + 2, m - 2))
    steps[lb] += 0.5  # the channel has a width
    x = np.concatenate([[0.0], np.cumsum(steps)])
    bumps = np.array(draw(st.lists(st.floats(-0.6, 0.6), min_size=m, max_size=m)))
    cross = draw(st.floats(-0.02, 0.02))
    z = 3.0 + bumps + cross * (x - x.mean())
    depth = draw(st.floats(0.2, 6.0))
    shape = np.sin(np.pi * (x[lb:rb + 1] - x[lb]) / max(x[rb] - x[lb], 1e-9))
    z[lb:rb + 1] -= depth * np.maximum(shape, 0.05 * (np.arange(rb + 1 - lb) > 0))
    z[[0, -1]] += draw(st.floats(0.0, 4.0))  # valley sides
    n = np.array(draw(st.lists(st.floats(0.012, 0.15), min_size=m - 1, max_size=m - 1)))
    part = np.r_[np.zeros(lb), np.ones(rb - lb), np.full(m - 1 - rb, 2)].astype(int)
    return build_table(x, z, n, part, name=name)


@st.composite
def reaches(draw):
    count = draw(st.integers(2, 6))
    tables = [draw(ground(f"s{k}")) for k in range(count)]
    slope = draw(st.sampled_from([0.0, 1e-5, 1e-4, 1e-3, 0.01, 0.05]))
    length = draw(st.floats(1.0, 400.0))
    lengths = np.column_stack([length * draw(st.floats(0.5, 2.0)) * np.ones(count - 1),
                               np.full(count - 1, length),
                               length * draw(st.floats(0.5, 2.0)) * np.ones(count - 1)])
    drops = np.concatenate([[0.0], np.cumsum(lengths[:, 1] * slope)])
    tables = [build_table(t.station, t.elevation - d, t.n, t.part, name=t.name)
              for t, d in zip(tables, drops)]
    q = 10.0 ** np.array(draw(st.lists(st.floats(-3.0, 4.5), min_size=1, max_size=3)))
    growth = 1.0 + np.array(draw(st.lists(st.floats(0.0, 0.3), min_size=count, max_size=count)))
    return tables, lengths, q[:, None] * np.cumprod(growth)[None, :], max(slope, 1e-4)


def recomputed_residual(prof, lengths, i, k, opts):
    """Energy-equation residual of section i solved from its neighbour k (module docstring)."""
    head = prof.energy - prof.wse
    mean_q = 0.5 * (prof.part_discharge[i] + prof.part_discharge[k])
    length = mean_q @ lengths[min(i, k)] / mean_q.sum()
    s = (prof.discharge / prof.conveyance) ** 2
    sf = {"average_conveyance": ((prof.discharge[i] + prof.discharge[k])
                                 / (prof.conveyance[i] + prof.conveyance[k])) ** 2,
          "arithmetic": 0.5 * (s[i] + s[k]), "geometric": np.sqrt(s[i] * s[k]),
          "harmonic": 2 * s[i] * s[k] / (s[i] + s[k])}[opts.friction_slope]
    up, dn = (i, k) if i < k else (k, i)
    coef = opts.contraction if head[dn] > head[up] else opts.expansion
    loss = length * sf + coef * abs(head[dn] - head[up])
    return prof.energy[i] - (prof.energy[k] + loss if i < k else prof.energy[k] - loss)


def check_contract(profiles, tables, lengths, opts):
    thalweg = np.array([t.thalweg for t in tables])
    for prof in profiles:
        assert np.all(np.isfinite(prof.wse)) and np.all(np.isfinite(prof.energy))
        assert np.all(prof.wse > thalweg)
        for i, flags in enumerate(prof.flags):
            assumed = "critical_fallback" in flags or "boundary" in flags
            assert assumed or abs(prof.energy_residual[i]) <= opts.tolerance
            if assumed or prof.regime[i] == "critical":
                continue
            k = i - 1 if prof.regime[i] == "supercritical" else i + 1
            assert abs(recomputed_residual(prof, lengths, i, k, opts)) <= opts.tolerance + 1e-9


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(reach=reaches(), regime=st.sampled_from(REGIMES), rule=st.sampled_from(FRICTION_RULES),
       eddy=st.sampled_from([(0.0, 0.0), (0.1, 0.3), (0.6, 0.8)]), stage=st.booleans())
def test_random_natural_reaches(reach, regime, rule, eddy, stage):
    tables, lengths, q, slope = reach
    down = Boundary.normal_depth(slope)
    if stage:  # a stage somewhere between the thalweg and 3 m above the top
        down = Boundary.stage(tables[-1].thalweg + 0.01 + (tables[-1].top - tables[-1].thalweg + 3.0)
                              * np.linspace(0.05, 1.0, q.shape[0]))
    result = {}
    for engine in ("numpy", "compiled"):
        opts = SolverOptions(regime=regime, friction_slope=rule, contraction=eddy[0],
                             expansion=eddy[1], engine=engine)
        result[engine] = solve_events(tables, lengths, q, downstream=down,
                                      upstream=Boundary.normal_depth(slope), options=opts)
        check_contract(result[engine], tables, lengths, opts)
    for ref, fast in zip(result["numpy"], result["compiled"]):
        np.testing.assert_allclose(fast.wse, ref.wse, rtol=0, atol=1e-6)
        np.testing.assert_allclose(fast.critical_wse, ref.critical_wse, rtol=0, atol=1e-6)
        assert fast.flags == ref.flags
