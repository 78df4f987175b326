"""The level-table fast path (lookup.py) against the exact segment clipping of
``geometry.properties`` (itself checked against shapely in test_geometry) and against shapely
polygon clipping directly, on random ground profiles with flat, vertical and steep segments."""
import numpy as np
import pytest
import shapely
from hypothesis import given, note, settings
from hypothesis import strategies as st

from geoflow.hydraulics.critical import critical_many, critical_wse
from geoflow.hydraulics.geometry import build_table, fast_properties, flow_state, properties
from geoflow.hydraulics.lookup import flow_in_windows, windows

FIELDS = ("area", "top_width", "wetted_perimeter", "conveyance", "alpha", "beta",
          "first_moment", "hydraulic_depth", "sub_area", "sub_perimeter", "sub_conveyance",
          "part_area", "part_conveyance")


@st.composite
def sections(draw):
    """Ground with repeated elevations (flat segments), repeated stations (vertical segments)
    and near-flat segments; n changes so floodplains split into several subdivisions. Station
    steps are 0 or >= 1 mm (subnormal widths would make both paths round differently)."""
    m = draw(st.integers(3, 30))
    z = np.array(draw(st.lists(st.sampled_from([0.0, 0.5, 1.0, 1.0 + 1e-9, 2.0, 3.5])
                               | st.floats(0.0, 6.0), min_size=m, max_size=m)))
    dx = np.array(draw(st.lists(st.sampled_from([0.0, 1.0]) | st.floats(1e-3, 25.0),
                                min_size=m - 1, max_size=m - 1)))
    dx[(m - 1) // 2] += 0.5
    n = np.array(draw(st.lists(st.sampled_from([0.03, 0.05, 0.1]), min_size=m - 1,
                               max_size=m - 1)))
    lb = draw(st.integers(0, m - 2))
    rb = draw(st.integers(lb + 1, m - 1))
    part = np.r_[np.zeros(lb), np.ones(rb - lb), np.full(m - 1 - rb, 2)].astype(int)
    return build_table(np.concatenate([[0.0], np.cumsum(dx)]), z, n, part)


def trial_levels(t, frac):
    """Random levels plus every table level and points just beside them."""
    span = max(t.top - t.thalweg, 0.1)
    w = t.thalweg - 0.1 * span + np.asarray(frac) * 1.6 * span
    return np.concatenate([w, t.levels, t.levels + 1e-9, t.levels - 1e-9, [t.top + 50.0]])


def usable(t, w):
    """Levels not within 1e-60 m above the thalweg: there conveyances underflow to subnormal
    floats (or 0) and both paths round differently."""
    return ~((w > t.thalweg) & (w - t.thalweg < 1e-60))


def assert_close(exact, fast, name):
    exact, fast = np.asarray(exact, dtype=float), np.asarray(fast, dtype=float)
    assert np.array_equal(np.isfinite(exact), np.isfinite(fast)), name
    ok = np.isfinite(exact)
    scale = np.maximum(np.abs(exact[ok]), 1e-9)
    bad = np.abs(fast[ok] - exact[ok]) > 1e-9 * scale + 1e-12
    assert not bad.any(), (name, np.flatnonzero(ok)[bad][:3], exact[ok][bad][:3], fast[ok][bad][:3])


@settings(max_examples=150, deadline=None)
@given(t=sections(), frac=st.lists(st.floats(0.0, 1.0), min_size=1, max_size=40))
def test_fast_path_matches_exact_clipping(t, frac):
    note(f"station={t.station.tolist()} elevation={t.elevation.tolist()} n={t.n.tolist()} "
         f"part={t.part.tolist()}")
    w = trial_levels(t, frac)
    w = w[usable(t, w)]
    exact, fast = properties(t, w), fast_properties(t, w)
    for f in FIELDS:
        assert_close(getattr(exact, f), getattr(fast, f), f)
    np.testing.assert_array_equal(exact.not_contained, fast.not_contained)
    area, conv, alpha, part_k = flow_state(t, w)
    for got, ref, name in ((area, exact.area, "area"), (conv, exact.conveyance, "K"),
                           (alpha, exact.alpha, "alpha"), (part_k, exact.part_conveyance, "Kp")):
        assert_close(ref, got, name)


@settings(max_examples=60, deadline=None)
@given(t=sections(), frac=st.floats(0.0, 1.0))
def test_fast_area_matches_shapely(t, frac):
    # water polygon = section box below w minus the ground (shapely as the outside reference)
    x, z = t.station, t.elevation
    w = t.thalweg + frac * max(t.top - t.thalweg, 0.1)
    big = z.max() + 100.0
    ground = shapely.Polygon(np.vstack([np.c_[x, z], [[x[-1], big], [x[0], big]]]))
    water = ground.intersection(shapely.box(x[0], z.min() - 1.0, x[-1], w))
    assert fast_properties(t, w).area[0] == pytest.approx(water.area, rel=1e-9, abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(ts=st.lists(sections(), min_size=1, max_size=4), data=st.data())
def test_windows_match_single_tables(ts, data):
    # windows of several tables evaluate exactly like each table's own lookup
    sec = np.array(data.draw(st.lists(st.integers(0, len(ts) - 1), min_size=1, max_size=8)))
    lo = np.array([data.draw(st.sampled_from(list(ts[i].levels))) for i in sec])
    win = windows([t.lookup for t in ts], sec, lo)
    pts = np.array([data.draw(st.floats(0.0, 1.0)) for _ in sec])
    nxt = np.array([ts[i].levels[min(np.searchsorted(ts[i].levels, v) + 2,
                                     ts[i].levels.size - 1)] for i, v in zip(sec, lo)])
    x = lo + pts * np.where(nxt > lo, nxt - lo, 1.0)
    area, conv, alpha = flow_in_windows(win, np.arange(sec.size), x)
    for q, i in enumerate(sec):
        if not usable(ts[i], x[q]):
            continue
        ref = properties(ts[i], x[q])
        assert_close(ref.area, area[q:q + 1], "area")
        assert_close(ref.conveyance, conv[q:q + 1], "K")
        assert_close(ref.alpha, alpha[q:q + 1], "alpha")


def test_critical_many_equals_one_section_at_a_time():
    # the batched refinement over several sections gives each section's own critical WSE
    # (single-section results are checked against closed forms in test_critical)
    ts = [build_table([0, 0, 5 + k, 5 + k], [4, 0, 0, 4], [0.03] * 3, [1] * 3) for k in range(3)]
    q = np.array([[5.0, 12.0, 30.0], [40.0, 2.0, 9.0]])
    wse, _, _ = critical_many(ts, q, g=9.81)
    for i, t in enumerate(ts):
        np.testing.assert_allclose(wse[:, i], critical_wse(t, q[:, i], g=9.81).wse, rtol=1e-12)
        width = 5.0 + i
        np.testing.assert_allclose(wse[:, i], ((q[:, i] / width) ** 2 / 9.81) ** (1 / 3), rtol=1e-6)
