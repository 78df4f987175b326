"""Cross-section property tables: area, wetted perimeter, top width and conveyance.

A section is a ground profile (station, elevation) with Manning's n and a part code
(0 left floodplain, 1 channel, 2 right floodplain) per segment between consecutive points.
Ground is linear between points; a partly wet segment is clipped exactly at the water line.

Subdivision rule (vertical division lines, which carry no wetted perimeter):
- the channel part is one subdivision; where n varies inside it the composite n is
  Horton/Einstein's n_c = [sum P_i n_i^1.5 / P]^(2/3) over the wetted perimeter under water
  (Chow 1959, Open-Channel Hydraulics, ch. 6, from memory);
- each floodplain is split at every change of n (so its composite n is its own n).
Conveyance K_i = (1/n_i) A_i R_i^(2/3) (Manning, SI); kinetic-energy and momentum coefficients
alpha = A_t^2 sum(K_i^3/A_i^2) / K_t^3 and beta = A_t sum(K_i^2/A_i) / K_t^2 (Chow 1959, ch. 2
and 6, from memory).

Where the water surface rises above an end of the section, a vertical wall is added at that
end: it bounds the area and its wetted height counts in P (with the end segment's n and
subdivision); ``not_contained`` reports it. Water in low ground that is not connected to the
channel counts as flow area unless it is marked as storage (below).

Storage: ``build_table(..., storage=mask (m-1,))`` marks floodplain segments that hold water but
carry no flow. They form subdivisions of their own whose numerator N = sum P n^1.5 is zero, so
their conveyance is zero (K = A (A/N)^(2/3) is taken as 0 where N = 0) while their area and top
width count as usual. The velocity head alpha V^2/2g = Q^2 sum(K_i^3/A_i^2) / (2 g K_t^3) does not
depend on the storage area. Channel segments are never storage.

Stage-dependent n: ``build_table(..., n_depth=(depths (k,), n_values (k, m-1)))`` gives n per
segment as a piecewise-linear function of the local flow depth over that segment (its wet
area / wet top width; for a vertical segment the depth at its foot), clamped outside ``depths``. n that varies by discharge is supported by
rebuilding the tables for each event.

Two evaluations: ``properties`` clips every segment at the water line (the reference, cost
proportional to the number of ground points); ``fast_properties`` and its lean subset
``flow_state`` evaluate the exact interval polynomials of ``lookup.py`` built once per table
(cost independent of the number of ground points; equal to ``properties`` up to rounding).
Sections with a depth law for n always use the clipping.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from geoflow.constants import G
from geoflow.errors import GeometryError
from geoflow.hydraulics.lookup import LevelTable, build_level_table, evaluate, flow_terms

CHANNEL_CODE = 1
N_PARTS = 3


@dataclass(frozen=True, eq=False)
class SectionProperties:
    """Exact section properties at k water-surface elevations (arrays (k,) or (k, S))."""

    wse: np.ndarray              # m
    depth: np.ndarray            # m above the thalweg
    area: np.ndarray             # m2
    wetted_perimeter: np.ndarray  # m, ground (and end walls) under water
    top_width: np.ndarray        # m
    conveyance: np.ndarray       # m3/s, sum of subdivision conveyances
    alpha: np.ndarray            # kinetic-energy coefficient (1 when dry)
    beta: np.ndarray             # momentum coefficient (1 when dry)
    first_moment: np.ndarray     # m3, A * ybar (centroid depth below the surface)
    hydraulic_depth: np.ndarray  # m, A / T (0 when dry)
    sub_area: np.ndarray         # (k, S) m2
    sub_perimeter: np.ndarray    # (k, S) m
    sub_n: np.ndarray            # (k, S) composite n (nan when dry)
    sub_conveyance: np.ndarray   # (k, S) m3/s
    part_area: np.ndarray        # (k, 3) m2, left floodplain / channel / right floodplain
    part_conveyance: np.ndarray  # (k, 3) m3/s
    not_contained: np.ndarray    # (k,) bool, water above an end of the section


@dataclass(frozen=True, eq=False)
class SectionTable:
    """A section prepared for repeated evaluation at ``levels`` (every ground elevation plus
    refinement and some levels above the top). ``lookup`` holds the exact interval polynomials
    of ``lookup.py``; ``flow_at_levels`` the ``flow_state`` at ``levels``."""

    name: str
    station: np.ndarray          # (m,)
    elevation: np.ndarray        # (m,)
    n: np.ndarray                # (m-1,) base n per segment
    part: np.ndarray             # (m-1,) part codes
    subdivision: np.ndarray      # (m-1,) subdivision index per segment
    subdivision_part: np.ndarray  # (S,) part code of each subdivision
    n_depth: tuple | None        # (depths (k,), n_values (k, m-1)) or None
    levels: np.ndarray           # (L,) ascending trial water-surface elevations
    lookup: LevelTable | None    # None with a depth law for n (exact clipping is used then)
    flow_at_levels: tuple = ()   # (area, conveyance, alpha (L,), part conveyance (L, 3))
    storage: np.ndarray | None = None  # (m-1,) bool: segments with area but no conveyance

    @property
    def thalweg(self) -> float:
        """Lowest ground elevation, m."""
        return float(self.elevation.min())

    @property
    def top(self) -> float:
        """Highest ground elevation, m."""
        return float(self.elevation.max())


def build_table(station, elevation, n, part, *, n_depth=None, name="section",
                min_levels=60, extra_height=None, storage=None) -> SectionTable:
    """Check a ground profile and precompute its property table.

    ``station`` must be non-decreasing (equal stations make a vertical segment), ``n`` > 0,
    ``part`` codes 0/1/2. ``extra_height`` (m, default max(relief, 1)) sets how far the table
    levels extend above the highest ground point (walls are added there). ``storage``: optional
    (m-1,) bool mask of segments without conveyance (module notes).
    """
    x, z, nn, pp = _checked_arrays(station, elevation, n, part, name)
    nd = _checked_n_depth(n_depth, x.size - 1, name)
    store = _checked_storage(storage, pp, name)
    sub, sub_part = _subdivisions(nn, pp, nd, store)
    relief = max(float(z.max() - z.min()), 1e-3)
    extra = max(relief, 1.0) if extra_height is None else float(extra_height)
    levels = _levels(z, relief, int(min_levels), extra)
    to_part = np.zeros((sub_part.size, N_PARTS))
    to_part[np.arange(sub_part.size), sub_part] = 1.0
    lookup = None if nd is not None else build_level_table(x, z, _n15(nn, store), sub, to_part, levels)
    table = SectionTable(name, x, z, nn, pp, sub, sub_part, nd, levels, lookup, storage=store)
    object.__setattr__(table, "flow_at_levels", flow_state(table, levels))
    return table


def _checked_arrays(station, elevation, n, part, name):
    x = np.asarray(station, dtype=float).ravel()
    z = np.asarray(elevation, dtype=float).ravel()
    nn = np.asarray(n, dtype=float).ravel()
    pp = np.asarray(part).ravel()
    m = x.size
    if m < 2 or z.size != m:
        raise GeometryError(f"section {name!r}: station and elevation need the same length >= 2 "
                            f"(got {x.size} and {z.size}); check the sampled ground profile")
    if nn.size != m - 1 or pp.size != m - 1:
        raise GeometryError(f"section {name!r}: n and part need one value per segment ({m - 1}), "
                            f"got {nn.size} and {pp.size}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(z))):
        raise GeometryError(f"section {name!r}: station/elevation contain NaN or inf; "
                            "check the DEM nodata handling")
    if np.any(np.diff(x) < 0) or x[-1] <= x[0]:
        raise GeometryError(f"section {name!r}: stations must not decrease from left to right "
                            "and the section must have a width > 0")
    if not np.all(np.isfinite(nn) & (nn > 0)):
        raise GeometryError(f"section {name!r}: Manning's n must be finite and > 0 on every segment")
    if not np.all((pp == 0) | (pp == 1) | (pp == 2)):
        raise GeometryError(f"section {name!r}: part codes must be 0 (left floodplain), "
                            "1 (channel) or 2 (right floodplain)")
    return x, z, nn, pp.astype(np.int8)


def _checked_storage(storage, part, name):
    """The storage mask as bool (m-1,) with channel segments cleared, or None."""
    if storage is None:
        return None
    mask = np.asarray(storage, dtype=bool).ravel()
    if mask.size != part.size:
        raise GeometryError(f"section {name!r}: storage needs one value per segment ({part.size}), got {mask.size}")
    mask = mask & (part != CHANNEL_CODE)
    return mask if mask.any() else None


def _n15(n, storage):
    """n^1.5 per segment, zero on storage segments (no conveyance)."""
    n15 = n ** 1.5
    return n15 if storage is None else np.where(storage, 0.0, n15)


def _checked_n_depth(n_depth, nseg, name):
    if n_depth is None:
        return None
    depths = np.asarray(n_depth[0], dtype=float).ravel()
    values = np.asarray(n_depth[1], dtype=float)
    if values.ndim != 2 or values.shape != (depths.size, nseg) or depths.size < 1:
        raise GeometryError(f"section {name!r}: n_depth needs depths (k,) and n values (k, {nseg})")
    if np.any(np.diff(depths) <= 0) or not np.all(np.isfinite(values) & (values > 0)):
        raise GeometryError(f"section {name!r}: n_depth depths must increase and n values be > 0")
    return depths, values


def _subdivisions(n, part, n_depth, storage=None):
    """Subdivision index per segment: break where the part changes, and inside a floodplain
    where n (or its depth law) or storage changes; the channel part stays one subdivision."""
    n_cols = n[None, :] if n_depth is None else np.vstack([n[None, :], n_depth[1]])
    n_change = np.any(n_cols[:, 1:] != n_cols[:, :-1], axis=0)
    if storage is not None:
        n_change = n_change | (storage[1:] != storage[:-1])
    brk = (part[1:] != part[:-1]) | (n_change & (part[1:] != CHANNEL_CODE))
    sub = np.concatenate([[0], np.cumsum(brk)]).astype(np.intp)
    first = np.concatenate([[True], brk])
    return sub, part[first].astype(np.int8)


def _levels(z, relief, min_levels, extra):
    lo, hi = float(z.min()), float(z.max())
    near_bed = lo + relief * np.array([1e-4, 1e-3, 3e-3, 1e-2, 3e-2])
    fine = np.linspace(lo, hi, max(min_levels, 2) + 1)
    above = hi + extra * np.linspace(0.0, 1.0, 11)[1:]
    return np.unique(np.concatenate([z, near_bed, fine, above]))


def wet_segments(station, elevation, wse, _geom=None):
    """Wet area, top width, perimeter and first moment of each segment, arrays (k, m-1).

    The ground is linear between points; the water line cuts a partly wet segment where the
    depth is zero. First moment about the surface of a strip with end depths a, b and width w:
    w (a^2 + a b + b^2) / 6 (exact for a linear depth)."""
    z1, z2, dx, seglen, inv_dz = _geom or _segment_geometry(station, elevation)
    w = np.asarray(wse, dtype=float).reshape(-1, 1)
    p1 = np.maximum(w - z1, 0.0)
    p2 = np.maximum(w - z2, 0.0)
    frac = np.minimum((p1 + p2) * inv_dz, 1.0)
    frac[(p1 > 0) & (p2 > 0)] = 1.0
    top = frac * dx
    perim = frac * seglen
    area = 0.5 * top * (p1 + p2)
    moment = top * (p1 * p1 + p1 * p2 + p2 * p2) / 6.0
    return area, top, perim, moment


def _segment_geometry(station, elevation):
    z1, z2 = elevation[:-1], elevation[1:]
    dx = np.diff(station)
    dz = np.abs(z2 - z1)
    inv_dz = np.divide(1.0, dz, out=np.zeros_like(dz), where=dz > 1e-12)
    return z1, z2, dx, np.hypot(dx, z2 - z1), inv_dz


def _segment_n(table, w, area, top):
    """n per segment at each level from the depth law at the local flow depth."""
    depths, values = table.n_depth
    foot = np.minimum(table.elevation[:-1], table.elevation[1:])
    depth_at_foot = np.maximum(w[:, None] - foot, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        local = np.where(top > 0, area / top, depth_at_foot)
    d = np.clip(local, depths[0], depths[-1])
    if depths.size == 1:
        return np.broadcast_to(values[0], area.shape)
    j = np.clip(np.searchsorted(depths, d, side="right") - 1, 0, depths.size - 2)
    t = (d - depths[j]) / (depths[j + 1] - depths[j])
    cols = np.arange(area.shape[1])
    return values[j, cols] * (1.0 - t) + values[j + 1, cols] * t


def _cached(table):
    """Per-table constants: segment geometry, n^1.5 and indicator matrices
    (segment -> subdivision, subdivision -> part)."""
    cache = table.__dict__.get("_cache")
    if cache is None:
        nseg, nsub = table.subdivision.size, table.subdivision_part.size
        onehot = np.zeros((nseg, nsub))
        onehot[np.arange(nseg), table.subdivision] = 1.0
        to_part = np.zeros((nsub, N_PARTS))
        to_part[np.arange(nsub), table.subdivision_part] = 1.0
        geom = _segment_geometry(table.station, table.elevation)
        cache = (onehot, to_part, geom, _n15(table.n, table.storage))
        object.__setattr__(table, "_cache", cache)
    return cache


def properties(table: SectionTable, wse) -> SectionProperties:
    """Exact properties of ``table`` at an array of water-surface elevations (flattened), by
    clipping every ground segment at the water line (the reference evaluation)."""
    w = np.asarray(wse, dtype=float).ravel()
    onehot, to_part, geom, n15 = _cached(table)
    area, top, perim, moment = wet_segments(table.station, table.elevation, w, geom)
    n15 = n15 if table.n_depth is None else _n15(_segment_n(table, w, area, top), table.storage)
    left = np.maximum(w - table.elevation[0], 0.0)
    right = np.maximum(w - table.elevation[-1], 0.0)
    perim[:, 0] += left
    perim[:, -1] += right
    return _assemble(table, w, area @ onehot, perim @ onehot, (perim * n15) @ onehot,
                     top.sum(axis=1), moment.sum(axis=1))


def fast_properties(table: SectionTable, wse) -> SectionProperties:
    """Properties of ``table`` at elevations ``wse`` from its level table (``lookup``): the
    same quantities as ``properties``, exact for the piecewise-linear ground up to rounding,
    at a cost independent of the number of ground points. Sections with a depth law for n
    use the exact clipping (n then varies non-linearly with the level)."""
    if table.lookup is None:
        return properties(table, wse)
    w = np.asarray(wse, dtype=float).ravel()
    sub_a, sub_t, sub_p, sub_ns, sub_m = evaluate(table.lookup, w)
    return _assemble(table, w, sub_a, sub_p, sub_ns, sub_t.sum(axis=1), sub_m.sum(axis=1))


def flow_state(table: SectionTable, wse):
    """(area, conveyance, alpha, part conveyance (k, 3)) at ``wse``: the subset of
    ``fast_properties`` that an energy balance needs, with less overhead."""
    if table.lookup is None:
        p = properties(table, wse)
        return p.area, p.conveyance, p.alpha, p.part_conveyance
    return flow_terms(table.lookup, wse)


def _assemble(table, w, sub_a, sub_p, sub_ns, t_t, moment):
    """SectionProperties from per-subdivision area, perimeter and N = sum P n^1.5: composite n
    (N/P)^(2/3), Manning conveyance, alpha and beta (equations in the module docstring)."""
    to_part = _cached(table)[1]
    with np.errstate(divide="ignore", invalid="ignore"):
        sub_n = (sub_ns / sub_p) ** (2.0 / 3.0)
        sub_k = sub_a * (sub_a / sub_p) ** (2.0 / 3.0) / sub_n
        sub_k[~((sub_a > 0) & (sub_p > 0) & (sub_ns > 0))] = 0.0     # storage: N = 0, no conveyance
        a_t, k_t = sub_a.sum(axis=1), sub_k.sum(axis=1)
        # alpha = sum u_i v_i^2, beta = sum u_i v_i with u_i = K_i/K_t and v_i = V_i/V_mean =
        # (K_i/A_i)/(K_t/A_t): the Chow (1959, ch. 2) formulas in scale-free form (no underflow)
        vel = np.where(sub_k > 0, sub_k / np.where(sub_k > 0, sub_a, 1.0), 0.0)
        u = sub_k / k_t[:, None]
        v = vel * (a_t / k_t)[:, None]
        alpha = (u * v * v).sum(axis=1)
        beta = (u * v).sum(axis=1)
        dry = ~(k_t > 0)
        alpha[dry], beta[dry] = 1.0, 1.0
        hyd = np.where(t_t > 0, a_t / t_t, 0.0)
    return SectionProperties(
        wse=w, depth=w - table.thalweg, area=a_t, wetted_perimeter=sub_p.sum(axis=1),
        top_width=t_t, conveyance=k_t, alpha=alpha, beta=beta,
        first_moment=moment, hydraulic_depth=hyd, sub_area=sub_a,
        sub_perimeter=sub_p, sub_n=sub_n, sub_conveyance=sub_k,
        part_area=sub_a @ to_part, part_conveyance=sub_k @ to_part,
        not_contained=(w > table.elevation[0]) | (w > table.elevation[-1]))


def specific_force(props, discharge, g: float = G):
    """Specific force (momentum function) M = beta Q^2 / (g A) + A ybar, m3
    (Chow 1959, ch. 3, from memory); inf where the section is dry."""
    q = np.asarray(discharge, dtype=float)
    with np.errstate(divide="ignore"):
        return props.beta * q * q / (g * props.area) + props.first_moment
