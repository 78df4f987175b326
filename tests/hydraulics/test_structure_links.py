"""Structures inside a reach (``links``): the solver carries the profile across a weir or a
culvert in the subcritical, supercritical and mixed regimes, the same on both engines.

Rectangle b = 10 m, Q = 20 m3/s, n = 0.02, one subdivision (alpha = beta = 1), no transition
losses. References: the free-overfall weir Q = C L H^1.5 inverted in closed form (Bos 1989,
Discharge Measurement Structures, ch. 1); rectangle critical depth y_c = (q^2/g)^(1/3) (Chow
1959, ch. 3, from memory); the GVF ODE dy/dx = (S0 - Sf)/(1 - Fr^2) integrated with scipy
solve_ivp; Belanger's sequent depth y2/y1 = (sqrt(1 + 8 Fr1^2) - 1)/2 (Chow 1959, ch. 15, from
memory); Manning normal depth by scipy brentq.
"""
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp
from scipy.optimize import brentq
from test_solver_fuzz import reaches, recomputed_residual

from geoflow.errors import HydraulicsError
from geoflow.hydraulics.geometry import build_table
from geoflow.hydraulics.links import StructureLink
from geoflow.hydraulics.solver import REGIMES, Boundary, SolverOptions, solve_events, solve_profile
from geoflow.hydraulics.structures import Culvert, Weir, culvert_headwater, weir_headwater

B, Q, N, G = 10.0, 20.0, 0.02, 9.80665
DX = 10.0
YC = ((Q / B) ** 2 / G) ** (1 / 3)


def normal_depth(s0):
    return brentq(lambda y: B * y * (B * y / (B + 2 * y)) ** (2 / 3) * np.sqrt(s0) / N - Q, 1e-3, 20)


def gvf(s0):
    def rhs(_, y):
        a, p = B * y[0], B + 2 * y[0]
        return [(s0 - (Q * N / (a * (a / p) ** (2 / 3))) ** 2) / (1 - Q * Q * B / (G * a ** 3))]
    return rhs


def channel(s0, count=121, drop_after=None, drop=3.0):
    """Prismatic rectangle on slope s0; the bed drops by ``drop`` m after section ``drop_after``."""
    x = np.arange(count) * DX
    zb = 100.0 - s0 * x - (0.0 if drop_after is None else drop * (np.arange(count) > drop_after))
    tables = [build_table([0, 0, B, B], [z + 12, z, z, z + 12], [N] * 3, [1] * 3, name=f"s{i}")
              for i, z in enumerate(zb)]
    return x, zb, tables, np.full((count - 1, 3), DX)


def weir_link(k, crest, length=B, name="weir"):
    weir = Weir(crest=crest, crest_length=length, coefficient=1.70, name=name)
    return StructureLink(k, lambda q, tw: weir_headwater(q, tw, weir, g=G), name=name)


def opts(regime, engine):
    return SolverOptions(regime=regime, contraction=0.0, expansion=0.0, engine=engine)


def weir_head(length=B, c=1.70):
    """H of Q = C L H^1.5 (free overfall), closed form."""
    return (Q / (c * length)) ** (2.0 / 3.0)


def test_subcritical_weir_sets_the_headwater_and_the_backwater_upstream(engine):
    s0, k = 0.0004, 60
    x, zb, tables, lengths = channel(s0)
    crest = zb[k] + 2.5
    prof = solve_profile(tables, lengths, np.full(x.size, Q), Boundary.normal_depth(s0),
                         options=opts("subcritical", engine), structures=[weir_link(k, crest)])
    y = prof.wse - zb
    assert prof.wse[k] == pytest.approx(crest + weir_head(), abs=1e-9)
    np.testing.assert_allclose(y[k + 1:], normal_depth(s0), atol=1e-3)   # uniform below the weir
    # M1 backwater above the weir vs the GVF ODE from the weir headwater
    ode = solve_ivp(gvf(s0), (x[k], x[0]), [y[k]], t_eval=x[:k + 1][::-1], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(y[:k + 1], ode.y[0][::-1], atol=0.005)
    (level,) = prof.structures
    assert (level.kind, level.control, level.interval) == ("weir", "weir", k)
    assert level.tailwater_wse == prof.wse[k + 1] and level.headwater_wse == prof.wse[k]
    assert level.q_through == Q and level.q_over_crest == 0.0 and level.flags == ()
    assert prof.energy_residual[k] == 0.0


def test_headwater_below_critical_takes_critical_depth_and_says_so(engine):
    # a long low crest over a 3 m drop: its free-overfall headwater lies below critical depth at
    # the upstream face, which then controls (the brink of the drop)
    s0, k = 0.0004, 60
    x, zb, tables, lengths = channel(s0, drop_after=k)
    low = weir_link(k, zb[k] - 1.0, length=100.0)
    prof = solve_profile(tables, lengths, np.full(x.size, Q), Boundary.normal_depth(s0),
                         options=opts("subcritical", engine), structures=[low])
    assert prof.wse[k] == pytest.approx(zb[k] + YC, abs=1e-3)
    assert "headwater_critical" in prof.flags[k]
    assert prof.structures[0].structure_headwater_wse < prof.wse[k]
    assert "headwater_critical" in prof.structures[0].flags


def test_supercritical_restarts_at_critical_depth_below_the_structure(engine):
    s0, k = 0.03, 40
    x, zb, tables, lengths = channel(s0, count=101)
    y1 = normal_depth(s0)
    base = solve_profile(tables, lengths, np.full(x.size, Q), upstream=Boundary.normal_depth(s0),
                         options=opts("supercritical", engine))
    prof = solve_profile(tables, lengths, np.full(x.size, Q), upstream=Boundary.normal_depth(s0),
                         options=opts("supercritical", engine),
                         structures=[weir_link(k, zb[k] + 2.0)])
    np.testing.assert_array_equal(prof.wse[:k + 1], base.wse[:k + 1])
    y = prof.wse - zb
    assert y[k + 1] == pytest.approx(YC, abs=1e-3)
    assert "outlet_critical" in prof.flags[k + 1]
    # S2 curve below the outlet vs the GVF ODE started just below critical depth
    ode = solve_ivp(gvf(s0), (x[k + 1], x[-1]), [YC * 0.999], t_eval=x[k + 1:], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(y[k + 3:], ode.y[0][2:], atol=0.01)
    assert y[-1] == pytest.approx(y1, abs=0.01)
    # a 2 m weir backs the water up far more than the supercritical flow can push: flagged
    assert "headwater_above_supercritical" in prof.flags[k]
    assert prof.structures[0].tailwater_wse == pytest.approx(zb[k + 1] + YC, abs=1e-3)
    small = solve_profile(tables, lengths, np.full(x.size, Q), upstream=Boundary.normal_depth(s0),
                          options=opts("supercritical", engine),
                          structures=[weir_link(k, zb[k] - 3.0, length=100.0)])
    assert "headwater_above_supercritical" not in small.flags[k]


def test_mixed_jump_upstream_of_a_weir_on_a_steep_reach(engine):
    # steep reach, 2 m weir: the supercritical approach jumps up onto the S1 curve that rises
    # to the weir's headwater; below the weir the flow leaves at critical depth (S2 curve)
    s0, k = 0.03, 80
    x, zb, tables, lengths = channel(s0, count=141)
    y1 = normal_depth(s0)
    fr1 = Q / (B * y1) / np.sqrt(G * y1)
    sequent = y1 * (np.sqrt(1 + 8 * fr1 ** 2) - 1) / 2
    crest = zb[k] + 2.0
    prof = solve_profile(tables, lengths, np.full(x.size, Q), Boundary.normal_depth(s0),
                         upstream=Boundary.normal_depth(s0), options=opts("mixed", engine),
                         structures=[weir_link(k, crest)])
    y = prof.wse - zb
    assert prof.wse[k] == pytest.approx(crest + weir_head(), abs=1e-9)
    jumps = [i for i, f in enumerate(prof.flags) if "jump_upstream" in f]
    assert len(jumps) == 1
    j = jumps[0]
    assert j < k
    np.testing.assert_allclose(y[:j], y1, atol=1e-3)

    def at_sequent(_, yy):
        return yy[0] - sequent
    at_sequent.terminal = True
    ode = solve_ivp(gvf(s0), (x[k], 0.0), [y[k]], events=at_sequent, rtol=1e-10, atol=1e-12)
    assert x[j - 1] <= ode.t_events[0][0] <= x[j]
    s1 = solve_ivp(gvf(s0), (x[k], x[j]), [y[k]], t_eval=x[j:k + 1][::-1], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(y[j:k + 1], s1.y[0][::-1], atol=0.005)
    assert y[k + 1] == pytest.approx(YC, abs=1e-3)
    assert np.all(prof.regime[k + 2:] == "supercritical")
    ode2 = solve_ivp(gvf(s0), (x[k + 1], x[-1]), [YC * 0.999], t_eval=x[k + 1:], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(y[k + 3:], ode2.y[0][2:], atol=0.01)
    assert "supercritical_approach" not in prof.flags[k]


def test_mixed_supercritical_flow_passes_a_structure_that_does_not_control(engine):
    s0, k = 0.03, 40
    x, zb, tables, lengths = channel(s0, count=81)
    low = weir_link(k, zb[k] - 3.0, length=100.0)
    prof = solve_profile(tables, lengths, np.full(x.size, Q), Boundary.normal_depth(s0),
                         upstream=Boundary.normal_depth(s0), options=opts("mixed", engine),
                         structures=[low])
    y = prof.wse - zb
    np.testing.assert_allclose(y[:k + 1], normal_depth(s0), atol=1e-3)
    assert {"supercritical_approach", "headwater_critical"} <= set(prof.flags[k])
    assert not any("jump_upstream" in f for f in prof.flags)
    assert y[k + 1] == pytest.approx(YC, abs=1e-3)      # restarts at critical depth below it


def test_mixed_supercritical_arrival_with_a_subcritical_tailwater_jumps_in_the_structure(engine):
    # steep above, mild and 3 m lower below: the flow arrives supercritical at a structure that
    # does not back it up, and meets the mild reach's subcritical level at the downstream face
    x = np.arange(81) * DX
    zb = np.where(x <= 390.0, 100.0 - 0.03 * x, 85.0 - 0.0004 * (x - 400.0))
    tables = [build_table([0, 0, B, B], [z + 12, z, z, z + 12], [N] * 3, [1] * 3) for z in zb]
    lengths = np.full((80, 3), DX)
    k = 39
    prof = solve_profile(tables, lengths, np.full(x.size, Q), Boundary.normal_depth(0.0004),
                         upstream=Boundary.normal_depth(0.03), options=opts("mixed", engine),
                         structures=[weir_link(k, zb[k] - 1.0, length=100.0)])
    assert "supercritical_approach" in prof.flags[k]
    assert "jump_upstream" in prof.flags[k + 1]
    assert prof.regime[k + 1] == "subcritical"


def culvert_link(k, invert, name="pipe"):
    c = Culvert("circular", diameter=1.5, length=20.0, invert_up=invert, invert_down=invert - 0.1,
                n=0.013, inlet="concrete_square_edge_headwall", barrels=2, crest=invert + 3.0,
                crest_length=30.0, name=name)
    return StructureLink(k, lambda q, tw: culvert_headwater(q, tw, c, g=G), name=name)


@pytest.mark.parametrize("regime", ["subcritical", "supercritical", "mixed"])
def test_both_engines_agree_with_structures(regime):
    from test_engines import natural_reach
    tables, lengths = natural_reach(30, slope=0.02 if regime != "subcritical" else 0.001)
    q = np.linspace(5.0, 300.0, 4)[:, None] * np.ones(len(tables))[None, :]
    links = [weir_link(8, tables[8].thalweg + 1.5, length=40.0, name="w"),
             culvert_link(20, tables[20].thalweg + 0.2)]
    down, up = Boundary.normal_depth(0.001), Boundary.normal_depth(0.02)
    ref, fast = (solve_events(tables, lengths, q, down, up, SolverOptions(regime=regime, engine=e),
                              structures=links) for e in ("numpy", "compiled"))
    for a, b in zip(ref, fast):
        np.testing.assert_allclose(b.wse, a.wse, rtol=0, atol=1e-6)
        assert b.flags == a.flags
        assert [s.name for s in a.structures] == ["w", "pipe"]
        for sa, sb in zip(a.structures, b.structures):
            assert sa.flags == sb.flags and sa.control == sb.control
            assert sb.headwater_wse == pytest.approx(sa.headwater_wse, abs=1e-6)


def test_structure_intervals_are_checked():
    x, zb, tables, lengths = channel(0.0004, count=5)
    with pytest.raises(HydraulicsError, match="interval"):
        solve_profile(tables, lengths, np.full(5, Q), Boundary.normal_depth(0.0004),
                      structures=[weir_link(4, 200.0)])
    with pytest.raises(HydraulicsError, match="same two sections"):
        solve_profile(tables, lengths, np.full(5, Q), Boundary.normal_depth(0.0004),
                      structures=[weir_link(1, 200.0), weir_link(1, 201.0, name="b")])


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(reach=reaches(), regime=st.sampled_from(REGIMES), at=st.floats(0.0, 1.0), rise=st.floats(-1.0, 1.5),
       length=st.floats(1.0, 100.0))
def test_random_reaches_with_a_weir(reach, regime, at, rise, length):
    # random natural-looking reaches (test_solver_fuzz) with a weir between two of their sections: both engines
    # agree; the faces follow the wiring rules (links module); every other solved section meets the energy
    # equation recomputed from the profile (Chow 1959, ch. 10, as in test_solver_fuzz)
    tables, lengths, q, slope = reach
    k = int(at * (len(tables) - 2) + 0.5)
    face = tables[k]
    crest = face.thalweg + rise * (face.top - face.thalweg + 1.0)
    link = weir_link(k, crest, length=length)
    result = {}
    for engine in ("numpy", "compiled"):
        opts = SolverOptions(regime=regime, engine=engine)
        result[engine] = solve_events(tables, lengths, q, downstream=Boundary.normal_depth(slope),
                                      upstream=Boundary.normal_depth(slope), options=opts, structures=[link])
    for ref, fast in zip(result["numpy"], result["compiled"]):
        np.testing.assert_allclose(fast.wse, ref.wse, rtol=0, atol=1e-6)
        assert fast.flags == ref.flags
        (level,) = ref.structures
        if regime == "supercritical":
            assert ref.wse[k + 1] == pytest.approx(ref.critical_wse[k + 1], abs=1e-9)
            assert "outlet_critical" in ref.flags[k + 1]
        elif "supercritical_approach" not in ref.flags[k]:
            assert ref.wse[k] == pytest.approx(max(level.structure_headwater_wse, ref.critical_wse[k]), abs=1e-9)
            assert level.structure_headwater_wse >= level.tailwater_wse - 1e-9      # a weir never lowers the level
        for i, flags in enumerate(ref.flags):
            if "critical_fallback" in flags or "boundary" in flags or ref.regime[i] == "critical":
                continue
            j = i - 1 if ref.regime[i] == "supercritical" else i + 1
            if {i, j} == {k, k + 1}:
                continue                                 # the structure, not an energy step
            assert abs(recomputed_residual(ref, lengths, i, j, opts)) <= opts.tolerance + 1e-9
