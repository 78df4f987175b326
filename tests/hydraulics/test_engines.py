"""The compiled engine (numba kernel on packed level tables) against the numpy reference
engine: the same evaluations, the same profiles, the reference used where the kernel does not
apply, and a march that can be run in pieces (the hook for internal boundaries)."""
import numpy as np
import pytest

from geoflow.hydraulics import kernel, step
from geoflow.hydraulics.engine_compiled import CompiledEngine
from geoflow.hydraulics.engine_numpy import NumpyEngine
from geoflow.hydraulics.geometry import build_table, fast_properties, flow_state
from geoflow.hydraulics.lookup import slopes_in_windows, windows
from geoflow.hydraulics.packed import pack_reach
from geoflow.hydraulics.solver import FRICTION_RULES, Boundary, SolverOptions, _engine, _march, solve_events


def natural_section(k, drop=0.0, storage=False):
    """A wandering channel in a bumpy floodplain (as benchmarks/bench_hydraulics.py, smaller):
    41 points 5 m apart, n 0.035 in the channel, 0.05/0.08 patches outside. ``storage``: the
    floodplain more than 50 m from the channel centre holds water but carries no flow."""
    x = np.arange(41) * 5.0
    centre = 100.0 + 30.0 * np.sin(k / 7.0)
    z = 3.0 + 0.3 * np.sin(x / 23.0 + k / 5.0) + 2e-3 * np.maximum(np.abs(x - 100.0) - 60.0, 0) ** 2
    bank = np.clip((12.0 - np.abs(x - centre)) / 4.0, 0.0, 1.0)
    z = z * (1.0 - bank) + (0.5 + 0.1 * np.sin(k / 3.0)) * bank - drop
    mid = 0.5 * (x[1:] + x[:-1])
    part = np.where(mid < centre - 12, 0, np.where(mid > centre + 12, 2, 1))
    n = np.where(part == 1, 0.035, np.where(np.abs(mid - centre - 40.0) < 15.0, 0.08, 0.05))
    store = (np.abs(mid - centre) > 50.0) if storage else None
    return build_table(x, z, n, part, name=f"n{k}", storage=store)


def natural_reach(count=30, slope=0.001, dx=50.0, storage=False):
    tables = [natural_section(k, slope * dx * k, storage) for k in range(count)]
    return tables, np.full((count - 1, 3), dx)


def test_kernel_constants_match_the_reference():
    # the kernel writes these out (numba caches per file); they must equal the reference ones
    np.testing.assert_array_equal(kernel.ABOVE, step._ABOVE)
    np.testing.assert_array_equal(kernel.BELOW, step._BELOW)
    assert (kernel.OK, kernel.CRITICAL, kernel.NO_CONVERGENCE) == (step.OK, step.CRITICAL,
                                                                   step.NO_CONVERGENCE)
    assert kernel.RULES == FRICTION_RULES


@pytest.mark.parametrize("storage", [False, True])
def test_kernel_evaluations_equal_the_level_tables(storage):
    # flow terms, slopes and all properties at random levels vs lookup/geometry (numpy); with
    # storage segments (n^1.5 = 0 in the level tables) both give them area but no conveyance
    tables, _ = natural_reach(4, storage=storage)
    reach = pack_reach(tables)
    rng = np.random.default_rng(3)
    out = np.empty(kernel.N_PROPS)
    for i, t in enumerate(tables):
        w = t.thalweg + rng.random(40) * (t.top - t.thalweg + 3.0)
        ref = flow_state(t, w)
        props = fast_properties(t, w)
        win = windows([t.lookup], np.zeros(w.size, dtype=int), w - 1e-9)
        a, al, top, dal = slopes_in_windows(win, np.arange(w.size), w)
        for j, wj in enumerate(w):
            got = kernel.flow_at(reach, i, wj)
            np.testing.assert_allclose(got[:3], [ref[0][j], ref[1][j], ref[2][j]], rtol=1e-12)
            np.testing.assert_allclose(got[3:], ref[3][j], rtol=1e-12, atol=1e-9)
            slope = kernel.slopes_on(reach, i, kernel.locate(reach, i, wj), wj)
            np.testing.assert_allclose(slope, [a[j], al[j], top[j], dal[j]], rtol=1e-9, atol=1e-12)
            kernel.properties_at(reach, i, wj, out)
            np.testing.assert_allclose(
                out[[kernel.P_AREA, kernel.P_TOP, kernel.P_PERIM, kernel.P_CONV, kernel.P_ALPHA,
                     kernel.P_BETA, kernel.P_MOMENT]],
                [props.area[j], props.top_width[j], props.wetted_perimeter[j], props.conveyance[j],
                 props.alpha[j], props.beta[j], props.first_moment[j]], rtol=1e-12)
            assert bool(out[kernel.P_OUT]) == props.not_contained[j]
            assert np.isfinite(out[kernel.P_CONV]) and np.isfinite(out[kernel.P_ALPHA])


def test_storage_conveyance_is_the_conveying_subdivisions_only():
    """With storage, K equals Manning's K = A R^(2/3) / n summed over the subdivisions that convey
    (subdivided conveyance, Chow 1959 ch. 6), each from its own area and wetted perimeter, on both
    engines; the storage ground adds area and top width only. The subdivision areas and perimeters
    are computed here with shapely, independently of the level tables."""
    import shapely
    from shapely.geometry import LineString, Polygon, box
    t = natural_section(3, storage=True)
    plain = natural_section(3)
    reach = pack_reach([t])
    out = np.empty(kernel.N_PROPS)
    x, z = t.station, t.elevation
    # subdivisions: the channel whole; each floodplain split where n or storage changes
    key = [(int(p), 0.0 if p == 1 else float(nn), bool(st) and p != 1) for p, nn, st in zip(t.part, t.n, t.storage)]
    cuts = np.flatnonzero([a != b for a, b in zip(key[:-1], key[1:])]) + 1
    groups = np.split(np.arange(len(key)), cuts)
    ground = LineString(np.column_stack((x, z)))
    below = Polygon(list(zip(x, z)) + [(x[-1], -100.0), (x[0], -100.0)])
    for w in (t.thalweg + 0.8, t.top - 0.2, t.top + 0.5):
        water = box(x[0], -100.0, x[-1], w).difference(below)
        k_ref = 0.0
        for segs in groups:
            if t.storage[segs].all():
                continue
            strip = box(x[segs[0]], -100.0, x[segs[-1] + 1], 100.0)
            wet_line = ground.intersection(strip).intersection(box(x[0], -100.0, x[-1], w))
            a = water.intersection(strip).area
            # composite n of the subdivision: (sum P_i n_i^1.5 / P)^(2/3) (Horton), P_i by shapely
            p_i = np.array([wet_line.intersection(box(x[i], -100.0, x[i + 1], 100.0)).length for i in segs])
            p = p_i.sum()
            if a > 0 and p > 0:
                n_c = (np.sum(p_i * t.n[segs] ** 1.5) / p) ** (2 / 3)
                k_ref += a * (a / p) ** (2 / 3) / n_c
        props = fast_properties(t, np.array([w]))
        kernel.properties_at(reach, 0, w, out)
        assert abs(props.conveyance[0] / k_ref - 1) < 1e-9
        assert abs(out[kernel.P_CONV] / k_ref - 1) < 1e-9
        assert abs(kernel.flow_at(reach, 0, w)[1] / k_ref - 1) < 1e-9
        np.testing.assert_allclose(props.area[0], fast_properties(plain, np.array([w])).area[0], rtol=1e-12)
        assert shapely.is_valid(water)


@pytest.mark.parametrize("storage", [False, True])
@pytest.mark.parametrize("regime", ["subcritical", "supercritical", "mixed"])
def test_natural_reach_same_on_both_engines(regime, storage):
    tables, lengths = natural_reach(30, slope=0.02 if regime != "subcritical" else 0.001, storage=storage)
    q = np.linspace(5.0, 600.0, 5)[:, None] * np.linspace(1.0, 1.2, len(tables))[None, :]
    down, up = Boundary.normal_depth(0.001), Boundary.normal_depth(0.02)
    ref, fast = (solve_events(tables, lengths, q, down, up, SolverOptions(regime=regime, engine=e))
                 for e in ("numpy", "compiled"))
    for a, b in zip(ref, fast):
        np.testing.assert_allclose(b.wse, a.wse, rtol=0, atol=1e-6)
        np.testing.assert_allclose(b.critical_wse, a.critical_wse, rtol=0, atol=1e-6)
        assert b.flags == a.flags
        for field in ("energy", "velocity", "froude", "alpha", "area", "conveyance",
                      "specific_force", "part_discharge"):
            np.testing.assert_allclose(getattr(b, field), getattr(a, field), rtol=1e-6, atol=1e-9)
            assert np.isfinite(getattr(b, field)).all(), field


def test_pack_is_reused_and_leaves_the_tables_unchanged():
    tables, _ = natural_reach(5)
    w = np.linspace(tables[2].thalweg, tables[2].top + 1.0, 50)
    before = fast_properties(tables[2], w)
    reach = pack_reach(tables)
    assert pack_reach(tables) is reach                  # same list of tables: same pack
    assert pack_reach(tables[:3]) is not reach           # another list: packed anew
    after = fast_properties(tables[2], w)
    for f in ("area", "conveyance", "alpha", "first_moment", "wetted_perimeter"):
        np.testing.assert_array_equal(getattr(after, f), getattr(before, f))


def test_depth_law_sections_use_the_reference_engine():
    # n falling with depth (no level tables): the compiled engine hands over to numpy
    law = ([0.3, 2.0], np.array([[0.05] * 3, [0.03] * 3]))
    tables = [build_table([0, 0, 6, 6], [5, 0, 0, 5], [0.04] * 3, [1] * 3, n_depth=law)] * 3
    assert isinstance(_engine(tables, SolverOptions()), NumpyEngine)
    assert isinstance(_engine(natural_reach(3)[0], SolverOptions()), CompiledEngine)
    a, b = (solve_events(tables, np.full((2, 3), 100.0), [[12.0] * 3], Boundary.stage(1.5),
                         options=SolverOptions(engine=e))[0] for e in ("numpy", "compiled"))
    np.testing.assert_array_equal(a.wse, b.wse)


@pytest.mark.parametrize("engine", ["compiled", "numpy"])
def test_march_in_pieces_for_an_internal_boundary(engine):
    # An internal boundary between sections k and k+1 (headwater = tailwater + 0.4 m, a stand-in
    # for a structure): upstream of it the march equals a separate solve of sections 0..k from a
    # stage boundary at that headwater; a link that returns the energy-step WSE changes nothing.
    tables, lengths = natural_reach(12)
    q = np.array([[40.0] * 12, [250.0] * 12])
    opts = SolverOptions(engine=engine)
    eng = _engine(tables, opts)
    wc, _ = eng.critical(q)
    w0 = Boundary.normal_depth(0.001).wse_at(tables[-1], q[:, -1], wc[:, -1])
    whole = _march(eng, lengths, q, wc, w0, False)
    k = 6
    same = _march(eng, lengths, q, wc, w0, False, links={k: lambda qq, tw: whole[0][:, k]})
    np.testing.assert_array_equal(same[0], whole[0])
    raised = _march(eng, lengths, q, wc, w0, False, links={k: lambda qq, tw: tw + 0.4})
    np.testing.assert_array_equal(raised[0][:, k + 1:], whole[0][:, k + 1:])
    np.testing.assert_array_equal(raised[0][:, k], whole[0][:, k + 1] + 0.4)
    part = solve_events(tables[:k + 1], lengths[:k], q[:, :k + 1],
                        Boundary.stage(whole[0][:, k + 1] + 0.4), options=opts)
    for e, prof in enumerate(part):
        np.testing.assert_allclose(raised[0][e, :k + 1], prof.wse, rtol=0, atol=1e-12)
