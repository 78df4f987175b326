"""Generate geoflow's invented demo scenario: a meandering lowland valley.

Writes, into ``--out`` (default: this folder):

* ``dem.tif``          float32 GeoTIFF, 2 m cells, EPSG:32630, tiled, DEFLATE + float predictor
* ``centrelines.gpkg`` layer ``centrelines``: two reaches drawn upstream -> downstream
* ``landcover.gpkg``   layer ``landcover``: gap-free, non-overlapping polygons, field ``cover``
* ``dem_lidar.tif``    the first meander of the main river as a LiDAR survey would record it: the
                       channel filled up to a flat water surface (the flow of the flight day)
* ``lidar.gpkg``       layers ``centreline`` (that stretch of the main river) and ``survey``
                       (a handful of surveyed cross-sections of the true channel, field ``z_m``)
* ``README.md``        description of the scenario with the numbers computed here

Everything is invented: the river names, the village and the terrain. The grid sits over open sea
in UTM zone 30N on purpose, so that nobody mistakes the terrain for a real place. The output is
deterministic for a given ``--seed`` (numpy ``default_rng``).

Usage::

    python sample_gis/make_demo.py [--out DIR] [--seed 20261202]
"""
from __future__ import annotations

import argparse
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import shapely
import shapely.ops
from scipy import ndimage
from scipy.spatial import cKDTree

DEFAULT_SEED = 20261202
HERE = Path(__file__).resolve().parent


@dataclass(frozen=True)
class Params:
    """Fixed design of the invented valley (local metres: x east from the west edge, y north)."""

    width_m: float = 4000.0          # DEM extent east-west
    height_m: float = 1400.0         # DEM extent north-south
    cell_m: float = 2.0              # DEM cell size
    origin_e: float = 300000.0       # easting of the west edge (open sea, UTM 30N)
    origin_n: float = 5200000.0      # northing of the south edge
    epsg: int = 32630
    axis_y: float = 720.0            # valley axis (local y)
    z0: float = 52.0                 # floodplain level on the axis at the west edge, m
    valley_slope: float = 0.0015     # down-valley slope of the floodplain, m/m
    cross_fall: float = 0.0004       # floodplain rises northwards by this slope
    margin_m: float = 30.0           # main centreline starts/ends this far inside the DEM
    wavelengths: int = 4             # full meander wavelengths along the valley
    trib_start_y: float = 220.0      # the tributary reach starts this far north of the DEM edge
    vertex_m: float = 2.0            # centreline vertex spacing along the arc
    main: dict = field(default_factory=lambda: dict(bottom_half=6.0, top_half=10.0, below_fp=2.35,
                                                    thalweg=0.2, levee=0.15))
    trib: dict = field(default_factory=lambda: dict(bottom_half=2.5, top_half=4.5, below_fp=1.4,
                                                    thalweg=0.1, levee=0.1, slope=0.003))
    n_channel: float = 0.040         # Chow (1959) Table 5-6, minor stream c, "normal"
    nodata: float = -9999.0


# ----------------------------------------------------------------------------- centrelines
def sine_generated_path(omega1: float, omega3: float, span_x: float, waves: int,
                        step: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Sine-generated meander (direction theta(s) = w1 sin(ks) + w3 sin(3ks)).

    Scaled so that ``waves`` full wavelengths span ``span_x`` down-valley. Returns vertex x, y
    (relative to the start) every ``step`` metres of arc and the arc wavelength M. The direction is
    down-valley at both ends and the lateral drift over full wavelengths is zero.
    """
    fine = 20000 * waves
    s = np.linspace(0.0, float(waves), fine + 1)             # arc in wavelengths
    theta = omega1 * np.sin(2 * np.pi * s) + omega3 * np.sin(6 * np.pi * s)
    ds = np.diff(s)
    x = np.concatenate([[0.0], np.cumsum(0.5 * (np.cos(theta[1:]) + np.cos(theta[:-1])) * ds)])
    y = np.concatenate([[0.0], np.cumsum(0.5 * (np.sin(theta[1:]) + np.sin(theta[:-1])) * ds)])
    wavelength = span_x / x[-1]
    s_m, x_m, y_m = s * wavelength, x * wavelength, y * wavelength
    total = s_m[-1]
    n_seg = int(np.ceil(total / step))
    s_v = np.linspace(0.0, total, n_seg + 1)
    return np.interp(s_v, s_m, x_m), np.interp(s_v, s_m, y_m), wavelength


def main_centreline(rng: np.random.Generator, p: Params) -> tuple[np.ndarray, float]:
    """Vertices (N, 2) of the main river in local metres, west (upstream) to east."""
    omega1 = rng.uniform(0.52, 0.60) * rng.choice([-1.0, 1.0])
    omega3 = rng.uniform(-0.05, 0.05)
    span = p.width_m - 2 * p.margin_m
    x, y, wavelength = sine_generated_path(omega1, omega3, span, p.wavelengths, p.vertex_m)
    y = y - 0.5 * (y.max() + y.min()) + p.axis_y + rng.uniform(-10.0, 10.0)
    return np.column_stack([x + p.margin_m, y]), wavelength


def tributary_centreline(rng: np.random.Generator, p: Params, main: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
    """Vertices of the tributary and of its smooth side-valley axis, both upstream first.

    The brook runs from the south edge, through a side valley, to the main line.

    The junction is the southernmost main-line vertex in the middle third of the valley, so the
    brook leaves its side valley and crosses only a short strip of the main floodplain. It meets
    the main river at about 45 degrees, pointing downstream.
    """
    mid = (main[:, 0] > p.width_m / 3) & (main[:, 0] < 2 * p.width_m / 3)
    j = np.flatnonzero(mid)[np.argmin(main[mid, 1])]
    xc, yc = main[j]
    t = np.linspace(0.0, yc - 10.0, int(np.ceil((yc - 10.0) / 0.25)) + 1)   # distance south
    amp, lam = rng.uniform(6.0, 10.0), rng.uniform(320.0, 380.0)
    phase = rng.uniform(0, 2 * np.pi)
    x = (xc - 160.0 * (1 - np.exp(-t / 160.0))
         + amp * (1 - np.exp(-t / 120.0)) * np.sin(2 * np.pi * t / lam + phase) * np.tanh(t / 60))
    pts = np.column_stack([x, yc - t])[::-1]                  # south (upstream) -> junction
    axis = np.column_stack([xc - 160.0 * (1 - np.exp(-t / 160.0)), yc - t])[::-1]
    return resample_line(pts, p.vertex_m), axis


def resample_line(pts: np.ndarray, step: float) -> np.ndarray:
    """Resample a polyline at equal arc-length spacing close to ``step`` (ends kept)."""
    seg = np.hypot(*np.diff(pts, axis=0).T)
    s = np.concatenate([[0.0], np.cumsum(seg)])
    s_v = np.linspace(0.0, s[-1], int(np.ceil(s[-1] / step)) + 1)
    return np.column_stack([np.interp(s_v, s, pts[:, 0]), np.interp(s_v, s, pts[:, 1])])


def chainage(pts: np.ndarray) -> np.ndarray:
    """Cumulative distance along a polyline."""
    return np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(pts, axis=0).T))])


def extend_line(pts: np.ndarray, before: float, after: float) -> tuple[np.ndarray, float]:
    """Extend a polyline straight past both ends; returns points and the chainage offset."""
    d0 = (pts[0] - pts[1]) / np.hypot(*(pts[0] - pts[1]))
    d1 = (pts[-1] - pts[-2]) / np.hypot(*(pts[-1] - pts[-2]))
    head = [pts[0] + d0 * before] if before > 0 else []
    tail = [pts[-1] + d1 * after] if after > 0 else []
    return np.vstack(head + [pts] + tail), before


def nearest_on_line(line: np.ndarray, xy: np.ndarray, s_offset: float,
                    bound: float) -> tuple[np.ndarray, np.ndarray]:
    """Distance from each point to a polyline and the chainage of the nearest point.

    A k-d tree over vertices spaced ~4 m finds the nearest vertex; the point is then projected
    exactly onto the two segments that meet there. Points farther than ``bound`` get distance
    ``inf`` and chainage ``nan``.
    """
    pts = resample_line(line, 4.0)
    s = chainage(pts) - s_offset
    d0, idx = cKDTree(pts).query(xy, distance_upper_bound=bound, workers=2)
    ok = np.flatnonzero(np.isfinite(d0))
    best_d = np.full(len(ok), np.inf)
    best_s = np.zeros(len(ok))
    for shift in (-1, 0):                     # segment before and after the nearest vertex
        a = np.clip(idx[ok] + shift, 0, len(pts) - 2)
        seg = pts[a + 1] - pts[a]
        length = np.hypot(seg[:, 0], seg[:, 1])
        t = np.clip(np.einsum("ij,ij->i", xy[ok] - pts[a], seg) / length**2, 0.0, 1.0)
        d = np.hypot(*(xy[ok] - pts[a] - t[:, None] * seg).T)
        better = d < best_d
        best_d[better], best_s[better] = d[better], (s[a] + t * length)[better]
    d_out = np.full(len(xy), np.inf)
    s_out = np.full(len(xy), np.nan)
    d_out[ok], s_out[ok] = best_d, best_s
    return d_out, s_out


# ----------------------------------------------------------------------------- terrain
def smooth_noise(rng: np.random.Generator, shape: tuple[int, ...], corr_cells: float) -> np.ndarray:
    """Smooth random field with unit standard deviation and correlation length ~corr_cells.

    White noise on a coarse lattice (spacing corr_cells) interpolated by cubic splines.
    Works for 1-D and 2-D shapes.
    """
    coarse_shape = tuple(int(np.ceil(n / corr_cells)) + 4 for n in shape)
    coarse = rng.standard_normal(coarse_shape)
    axes = [np.arange(n) / corr_cells + 1.5 for n in shape]
    coords = np.meshgrid(*axes, indexing="ij")
    field_ = ndimage.map_coordinates(coarse, coords, order=3, mode="nearest")
    return (field_ - field_.mean()) / field_.std()


def softplus(v: np.ndarray, width: float) -> np.ndarray:
    """Smooth ramp max(v, 0) with a rounded knee of about ``width``."""
    return width * np.logaddexp(0.0, v / width)


def wall_rise(e: np.ndarray, height: float, length: float, grade: float) -> np.ndarray:
    """Valley-wall rise at distance e beyond the toe: steep first, flattening upwards."""
    return height * (1.0 - np.exp(-e / length)) + grade * e


def valley_edges(rng: np.random.Generator, p: Params, x: np.ndarray) -> dict[str, np.ndarray]:
    """Wavy down-valley lines (offsets from the axis) of the valley-floor edges."""
    n = len(x)
    return {"south_toe": -205.0 + 15.0 * smooth_noise(rng, (n,), 150.0),
            "terrace": 185.0 + 12.0 * smooth_noise(rng, (n,), 120.0),
            "north_toe": 335.0 + 20.0 * smooth_noise(rng, (n,), 150.0)}


def valley_surface(rng: np.random.Generator, p: Params, x: np.ndarray, yv: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Floodplain, terrace step and valley walls, before any channel is carved.

    ``x`` (1-D, columns) and ``yv`` (1-D, rows; offset north of the valley axis). Returns the
    full surface and its two noise fields (small-scale floor roughness in metres, unit-variance
    hill undulation), which the side valley reuses.
    """
    edges = valley_edges(rng, p, x)
    X, Y = np.meshgrid(x, yv)
    plane = p.z0 - p.valley_slope * X + p.cross_fall * Y
    e_south = softplus(edges["south_toe"][None, :] - Y, 6.0)
    e_north = softplus(Y - edges["north_toe"][None, :], 8.0)
    above_step = Y - edges["terrace"][None, :]
    terrace = 2.0 / (1.0 + np.exp(-above_step / 3.0)) + 0.004 * softplus(above_step, 5.0)
    walls = wall_rise(e_south, 24.0, 110.0, 0.03) + wall_rise(e_north, 26.0, 130.0, 0.03)
    cells = p.cell_m
    micro = 0.055 * smooth_noise(rng, X.shape, 10.0 / cells) \
        + 0.05 * smooth_noise(rng, X.shape, 40.0 / cells)
    hills = smooth_noise(rng, X.shape, 120.0 / cells) * np.clip((e_south + e_north) / 80.0, 0, 1)
    surface = plane + terrace + walls + micro + 3.0 * hills
    return surface, micro, hills


def channel_profile(d: np.ndarray, spec: dict) -> np.ndarray:
    """Channel shape above the bed line at distance d from the centreline.

    Slightly dished bed (thalweg ``thalweg`` m below the nominal bed on the centreline) across
    the bottom half-width, then straight banks reaching the levee crest at the top half-width.
    """
    b, t = spec["bottom_half"], spec["top_half"]
    bank = spec["below_fp"] + spec["levee"]
    return np.where(d < b, -spec["thalweg"] * (1.0 - (d / b) ** 2), (d - b) / (t - b) * bank)


def levee_rise(d: np.ndarray, spec: dict) -> np.ndarray:
    """Natural levee: ``levee`` m at the bank top, falling to zero 60 m beyond it."""
    extra = np.where(np.isfinite(d), d - spec["top_half"], np.inf)
    return spec["levee"] * np.clip(1.0 - extra / 60.0, 0.0, 1.0) ** 2


@dataclass
class Layout:
    """Generated geometry and the numbers derived from it (local metres)."""

    main: np.ndarray
    trib: np.ndarray            # the reach as published (starts clear of the DEM edge)
    trib_full: np.ndarray       # the carved brook, from the south edge
    trib_axis: np.ndarray
    wavelength: float
    bed_slope_main: float
    bed_slope_trib: float
    bed_main_start: float
    bed_trib_end: float
    confluence_chainage: float
    road_x: float
    pit_xy: tuple[float, float]
    village_xy: tuple[float, float]

    def bed_main(self, s: np.ndarray) -> np.ndarray:
        """Nominal bed level of the main river at chainage s (linear)."""
        return self.bed_main_start - self.bed_slope_main * s

    def bed_trib(self, s: np.ndarray) -> np.ndarray:
        """Nominal bed level of the tributary at chainage s of ``trib_full`` (linear)."""
        return self.bed_trib_end + self.bed_slope_trib * (chainage(self.trib_full)[-1] - s)


def make_layout(rng: np.random.Generator, p: Params) -> Layout:
    """Draw both centrelines, pick structure sites and derive the bed lines."""
    main, wavelength = main_centreline(rng, p)
    trib_full, trib_axis = tributary_centreline(rng, p, main)
    s_main = chainage(main)
    junction = int(np.argmin(np.hypot(*(main - trib_full[-1]).T)))
    trib_full[-1] = main[junction]
    trib = trib_full[trib_full[:, 1] >= p.trib_start_y]
    slope_main = p.valley_slope * (main[-1, 0] - main[0, 0]) / s_main[-1]
    plane0 = p.z0 - p.valley_slope * main[0, 0] + p.cross_fall * (main[0, 1] - p.axis_y)
    bed0 = plane0 - p.main["below_fp"]
    bed_junction = bed0 - slope_main * s_main[junction]
    in_third = (main[:, 0] > 0.68 * p.width_m) & (main[:, 0] < 0.8 * p.width_m)
    road_x = float(main[np.flatnonzero(in_third)[np.argmin(main[in_third, 1])], 0])
    in_first = (main[:, 0] > 0.25 * p.width_m) & (main[:, 0] < 0.45 * p.width_m)
    pit_x = float(main[np.flatnonzero(in_first)[np.argmax(main[in_first, 1])], 0])
    return Layout(main=main, trib=trib, trib_full=trib_full, trib_axis=trib_axis,
                  wavelength=wavelength, bed_slope_main=slope_main,
                  bed_slope_trib=p.trib["slope"], bed_main_start=bed0,
                  bed_trib_end=bed_junction + p.main["below_fp"] - p.trib["below_fp"],
                  confluence_chainage=float(s_main[junction]), road_x=road_x,
                  pit_xy=(pit_x, p.axis_y - 130.0),
                  village_xy=(road_x + 40.0, p.axis_y + 250.0))


def add_pit(z: np.ndarray, X: np.ndarray, Y: np.ndarray, level: float,
            centre: tuple[float, float]) -> np.ndarray:
    """Closed depression: a flooded-out pit 0.9 m deep ringed by a bund 1.5 m high.

    Elevations relative to ``level`` (the smooth floodplain at the centre). The bund crest is meant
    to stay above the rare flood so that connected-water mapping keeps the pit dry.
    """
    r = np.hypot(X - centre[0], Y - centre[1])
    inner = level + np.interp(r, [0.0, 30.0, 41.0, 45.0, 47.0], [-0.9, -0.6, 0.0, 1.5, 1.5])
    outer = level + 1.5 - np.clip(r - 47.0, 0, None) / 3.0
    return np.where(r < 47.0, inner, np.maximum(z, outer))


def add_road(z: np.ndarray, X: np.ndarray, crest: np.ndarray, road_x: float,
             d_main: np.ndarray) -> np.ndarray:
    """Raised road across the floodplain: 7 m crest, 1:2.5 side slopes, bridge gap at the river."""
    down = np.clip(np.abs(X - road_x) - 3.5, 0, None) / 2.5 + np.clip(30.0 - d_main, 0, None) / 2.0
    return np.maximum(z, crest - down)


def grid_centres(p: Params) -> tuple[np.ndarray, np.ndarray]:
    """Local x of column centres and local y of row centres (row 0 = north)."""
    nx, ny = int(round(p.width_m / p.cell_m)), int(round(p.height_m / p.cell_m))
    x = (np.arange(nx) + 0.5) * p.cell_m
    y = p.height_m - (np.arange(ny) + 0.5) * p.cell_m
    return x, y


def side_valley(p: Params, lay: Layout, X: np.ndarray, Y: np.ndarray, d_t: np.ndarray,
                micro: np.ndarray, hills: np.ndarray) -> np.ndarray:
    """Surface of the tributary's side valley: 90 m floor along a smooth axis, walls beyond.

    The floor level depends on northing only (bank-top level of the brook at that northing), so
    the surface has no steps where the meandering brook's nearest point jumps.
    """
    spec = p.trib
    s_brook = chainage(lay.trib_full)
    floor = np.interp(Y, lay.trib_full[:, 1], lay.bed_trib(s_brook)) + spec["below_fp"]
    ax_x, ax_y = lay.trib_axis[:, 0], lay.trib_axis[:, 1]
    dxdy = np.interp(Y, ax_y[1:], np.diff(ax_x) / np.diff(ax_y))
    across = np.abs(X - np.interp(Y, ax_y, ax_x)) / np.sqrt(1.0 + dxdy**2)
    d_axis = np.hypot(across, np.clip(Y - ax_y[-1], 0.0, None))      # closed beyond the mouth
    e = softplus(d_axis - 45.0, 6.0)
    walls = wall_rise(e, 22.0, 90.0, 0.02) + 3.0 * hills * np.clip(e / 80.0, 0.0, 1.0)
    return floor + walls + micro + levee_rise(d_t, spec)


def smooth_min(a: np.ndarray, b: np.ndarray, k: float) -> np.ndarray:
    """Minimum of two surfaces with the crease rounded over about ``k`` metres of height."""
    return -k * np.logaddexp(-a / k, -b / k)


def build_dem(rng: np.random.Generator, p: Params, lay: Layout) -> np.ndarray:
    """Assemble the DEM (rows north to south), rounded to 1 cm, float32."""
    x, y = grid_centres(p)
    surface, micro, hills = valley_surface(rng, p, x, y - p.axis_y)
    X, Y = np.meshgrid(x, y)
    xy = np.column_stack([X.ravel(), Y.ravel()])
    main_ext, off_m = extend_line(lay.main, 60.0, 60.0)
    d_m, s_m = (a.reshape(X.shape) for a in nearest_on_line(main_ext, xy, off_m, 300.0))
    trib_ext, off_t = extend_line(lay.trib_full, 60.0, 0.0)
    d_t, s_t = (a.reshape(X.shape) for a in nearest_on_line(trib_ext, xy, off_t, 70.0))
    z = surface + levee_rise(d_m, p.main)
    z = smooth_min(z, side_valley(p, lay, X, Y, d_t, micro, hills), 0.25)
    level = p.z0 - p.valley_slope * lay.pit_xy[0] + p.cross_fall * (lay.pit_xy[1] - p.axis_y)
    z = add_pit(z, X, Y, level, lay.pit_xy)
    crest = p.z0 - p.valley_slope * lay.road_x + p.cross_fall * (Y - p.axis_y) + 1.3
    z = add_road(z, X, crest, lay.road_x, np.where(np.isfinite(d_m), d_m, 1e9))
    carve_m = np.where(np.isfinite(d_m), lay.bed_main(s_m) + channel_profile(d_m, p.main), np.inf)
    carve_t = np.where(np.isfinite(d_t), lay.bed_trib(s_t) + channel_profile(d_t, p.trib), np.inf)
    z = np.minimum(z, np.minimum(carve_m, carve_t))
    return np.round(z, 2).astype(np.float32)


# ----------------------------------------------------------------------------- land cover
COVER_CLASSES = ("channel", "paved", "built_up", "woodland", "grassland", "crops")


def channel_polygons(p: Params, lay: Layout):
    """River channels: each centreline (extended past the DEM) buffered by its top half-width."""
    main_ext, _ = extend_line(lay.main, 60.0, 60.0)
    trib_ext, _ = extend_line(lay.trib_full, 60.0, 0.0)
    return shapely.union(shapely.buffer(shapely.linestrings(main_ext), p.main["top_half"],
                                        cap_style="flat"),
                         shapely.buffer(shapely.linestrings(trib_ext), p.trib["top_half"]))


def village_polygon(rng: np.random.Generator, lay: Layout):
    """Irregular built-up area: house plots scattered along two streets, merged and smoothed."""
    vx, vy = lay.village_xy
    along_road = np.column_stack([np.full(14, lay.road_x) + rng.normal(0, 12, 14),
                                  np.linspace(vy - 90, vy + 80, 14)])
    along_street = np.column_stack([np.linspace(vx - 230, vx + 200, 18),
                                    np.full(18, vy) + rng.normal(0, 15, 18)])
    plots = np.vstack([along_road, along_street])
    radius = rng.uniform(22.0, 38.0, len(plots))
    blobs = shapely.buffer(shapely.points(plots), radius)
    return shapely.buffer(shapely.buffer(shapely.union_all(blobs), 12.0), -8.0)


def riparian_woods(rng: np.random.Generator, lay: Layout):
    """Strips of bankside wood along three random stretches of the main river."""
    line = shapely.linestrings(lay.main)
    starts = np.sort(rng.uniform(0.05, 0.85, 3)) * line.length
    lengths = rng.uniform(150.0, 320.0, 3)
    strips = [shapely.ops.substring(line, a, a + b) for a, b in zip(starts, lengths)]
    widths = rng.uniform(22.0, 35.0, 3)
    return shapely.union_all(shapely.buffer(strips, widths))


def field_class(rng: np.random.Generator, p: Params, cx: np.ndarray, cy: np.ndarray
                ) -> np.ndarray:
    """Land use of each field by its centroid: woods on the walls, crops on the terrace,
    meadows on the floodplain (with some arable and small woods)."""
    yv = cy - p.axis_y
    zone = np.where((yv < -230) | (yv > 360), 0, np.where(yv > 185, 1, 2))   # wall/terrace/plain
    table = np.array([[0.65, 0.35, 0.00],       # woodland, grassland, crops
                      [0.10, 0.25, 0.65],
                      [0.05, 0.60, 0.35]])
    u = rng.uniform(size=len(cx))
    cum = np.cumsum(table[zone], axis=1)
    pick = (u[:, None] > cum).sum(axis=1)
    return np.array(["woodland", "grassland", "crops"])[np.minimum(pick, 2)]


def field_polygons(rng: np.random.Generator, p: Params, box):
    """Voronoi fields from a jittered 160 m lattice of seeds, clipped to the extent."""
    gx, gy = np.meshgrid(np.arange(80.0, p.width_m, 160.0), np.arange(60.0, p.height_m, 160.0))
    seeds = np.column_stack([gx.ravel(), gy.ravel()]) + rng.uniform(-55, 55, (gx.size, 2))
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(seeds),
                                                       extend_to=box, ordered=True))
    return shapely.intersection(cells, box)


def build_landcover(rng: np.random.Generator, p: Params, lay: Layout
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Gap-free, non-overlapping land-cover polygons (local metres) and their classes.

    Priority: channel > paved road > built-up > bankside wood > fields. Each layer is cut by the
    ones above it, and the fields fill whatever is left of the extent.
    """
    box = shapely.box(0.0, 0.0, p.width_m, p.height_m)
    channel = shapely.intersection(channel_polygons(p, lay), box)
    road_line = shapely.linestrings([[lay.road_x, -10.0], [lay.road_x, p.height_m + 10.0]])
    road = shapely.difference(shapely.intersection(
        shapely.buffer(road_line, 3.5, cap_style="flat"), box), channel)
    taken = shapely.union(channel, road)
    village = shapely.difference(shapely.intersection(village_polygon(rng, lay), box), taken)
    taken = shapely.union(taken, village)
    wood_strip = shapely.difference(shapely.intersection(riparian_woods(rng, lay), box), taken)
    taken = shapely.union(taken, wood_strip)
    fields = shapely.difference(field_polygons(rng, p, box), taken)
    centroids = shapely.get_coordinates(shapely.centroid(fields))
    f_class = field_class(rng, p, centroids[:, 0], centroids[:, 1])
    woods = shapely.union_all(np.append(fields[f_class == "woodland"], wood_strip))
    geoms = [channel, road, village, woods, *fields[f_class != "woodland"]]
    classes = ["channel", "paved", "built_up", "woodland", *f_class[f_class != "woodland"]]
    parts, index = shapely.get_parts(geoms, return_index=True)
    keep = shapely.area(parts) > 0.0
    return parts[keep], np.asarray(classes)[index[keep]]


# ----------------------------------------------------------------------------- writing
def to_world(p: Params, geoms: np.ndarray) -> np.ndarray:
    """Shift local-metre geometries to the projected CRS."""
    return shapely.transform(geoms, lambda c: c + np.array([p.origin_e, p.origin_n]))


def write_dem(path: Path, p: Params, z: np.ndarray, west: float = 0.0, north: float | None = None) -> None:
    """Float32 GeoTIFF, north-up, 256 px tiles, DEFLATE with the floating-point predictor.

    ``west`` / ``north``: local metres of the raster's west and north edges (default: the full extent).
    """
    import rasterio
    from affine import Affine

    north = p.height_m if north is None else north
    profile = dict(driver="GTiff", width=z.shape[1], height=z.shape[0], count=1,
                   dtype="float32", crs=f"EPSG:{p.epsg}", nodata=p.nodata,
                   transform=Affine(p.cell_m, 0.0, p.origin_e + west,
                                    0.0, -p.cell_m, p.origin_n + north),
                   tiled=True, blockxsize=256, blockysize=256, compress="deflate", predictor=3,
                   zlevel=9)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(z, 1)
        dst.update_tags(1, UNITS="m")
        dst.update_tags(SOURCE="invented terrain from sample_gis/make_demo.py; not a real place")


def write_vectors(out: Path, p: Params, lay: Layout, lc_geoms: np.ndarray,
                  lc_classes: np.ndarray) -> None:
    """centrelines.gpkg (layer centrelines) and landcover.gpkg (layer landcover)."""
    import geopandas as gpd

    crs = f"EPSG:{p.epsg}"
    lines = to_world(p, np.array([shapely.linestrings(lay.main), shapely.linestrings(lay.trib)]))
    gpd.GeoDataFrame({"reach_id": ["main", "tributary"], "name": list(RIVER_NAMES)},
                     geometry=lines, crs=crs).to_file(out / "centrelines.gpkg",
                                                      layer="centrelines", driver="GPKG")
    world, classes = valid_polygons(to_world(p, lc_geoms), lc_classes)
    gpd.GeoDataFrame({"cover": classes}, geometry=world, crs=crs).to_file(
        out / "landcover.gpkg", layer="landcover", driver="GPKG")


def valid_polygons(geoms: np.ndarray, classes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Repair polygons that the shift to large coordinates left touching themselves.

    ``make_valid`` splits such a sliver into valid parts; only polygonal parts with area are kept
    (the area lost is far below a square metre).
    """
    geoms = geoms.copy()
    bad = ~shapely.is_valid(geoms)
    geoms[bad] = shapely.make_valid(geoms[bad])
    parts1, index1 = shapely.get_parts(geoms, return_index=True)
    parts, index2 = shapely.get_parts(parts1, return_index=True)   # collections nest one level
    index = index1[index2]
    keep = (shapely.get_type_id(parts) == 3) & (shapely.area(parts) > 0.0)
    return parts[keep], classes[index[keep]]


RIVER_NAMES = ("River Olvane", "Hobbenlow Brook")
VILLAGE_NAME = "Tessmarrow"

# Design flows (m3/s) at the upstream ends; the main river gains the tributary's flow at the
# confluence. "q2": a frequent flood that stays in bank (about 75 % of the main channel's capacity
# to floodplain level). "q100": a rare flood, several times bankfull, over the floodplain.
EVENTS = {"q2": {"main": 30.0, "tributary": 8.0}, "q100": {"main": 150.0, "tributary": 40.0}}


def manning_trapezoid(spec: dict, slope: float, n: float, to_crest: bool = True
                      ) -> tuple[float, float, float]:
    """Bankfull discharge of the design channel by Manning: Q = A R^(2/3) S^(1/2) / n (SI).

    Trapezoid with the design bottom width and bank slope, filled from the bed line to the levee
    crest (``to_crest``) or to the general floodplain level behind the levee; the small dished
    thalweg is ignored. Returns (Q, depth, area).
    """
    bottom, crest = 2 * spec["bottom_half"], spec["below_fp"] + spec["levee"]
    depth = crest if to_crest else spec["below_fp"]
    top = bottom + (2 * spec["top_half"] - bottom) * depth / crest
    area = 0.5 * (bottom + top) * depth
    perimeter = bottom + 2 * np.hypot(0.5 * (top - bottom), depth)
    return area * (area / perimeter) ** (2 / 3) * np.sqrt(slope) / n, depth, area


def min_bend_radius(pts: np.ndarray, window: int = 10) -> float:
    """Smallest radius of curvature along a polyline (turning angle averaged over ``window``)."""
    d = np.diff(pts, axis=0)
    heading = np.unwrap(np.arctan2(d[:, 1], d[:, 0]))
    ds = np.hypot(d[:, 0], d[:, 1])
    k = np.abs(np.diff(heading)) / (0.5 * (ds[1:] + ds[:-1]))
    return float(1.0 / np.convolve(k, np.ones(window) / window, "same").max())


def summary(p: Params, lay: Layout, z: np.ndarray, lc_geoms: np.ndarray,
            lc_classes: np.ndarray, seed: int) -> dict:
    """Numbers quoted in the README and printed by the command line."""
    q_main = manning_trapezoid(p.main, lay.bed_slope_main, p.n_channel)
    q_trib = manning_trapezoid(p.trib, lay.bed_slope_trib, p.n_channel)
    q_main_fp = manning_trapezoid(p.main, lay.bed_slope_main, p.n_channel, to_crest=False)[0]
    q_trib_fp = manning_trapezoid(p.trib, lay.bed_slope_trib, p.n_channel, to_crest=False)[0]
    areas = {c: float(shapely.area(lc_geoms[lc_classes == c]).sum()) / 1e4 for c in COVER_CLASSES}
    return dict(seed=seed, len_main=float(chainage(lay.main)[-1]),
                len_trib=float(chainage(lay.trib)[-1]), slope_main=lay.bed_slope_main,
                slope_trib=lay.bed_slope_trib, conf=lay.confluence_chainage,
                sinuosity=float(chainage(lay.main)[-1] / (lay.main[-1, 0] - lay.main[0, 0])),
                bankfull_main=q_main, bankfull_trib=q_trib, fp_main=q_main_fp,
                fp_trib=q_trib_fp, zmin=float(z.min()), zmax=float(z.max()), areas=areas,
                radius=min_bend_radius(lay.main), wavelength=lay.wavelength,
                road_e=p.origin_e + lay.road_x, pit_e=p.origin_e + lay.pit_xy[0],
                pit_n=p.origin_n + lay.pit_xy[1], bed_main_end=float(lay.bed_main(
                    chainage(lay.main)[-1])), bed_main_start=lay.bed_main_start)


def readme_text(p: Params, s: dict) -> str:
    """README.md for the generated scenario (numbers from ``summary``): intro, files, CRS."""
    e0, n0 = p.origin_e, p.origin_n
    return f"""# Demo scenario: the invented Olvane valley

Everything here is **invented**: the {RIVER_NAMES[0]}, {RIVER_NAMES[1]}, the village of
{VILLAGE_NAME} and the terrain. It is synthetic data made by `make_demo.py` to exercise geoflow;
it does not represent any real place. The grid lies over open sea (Bay of Biscay) in UTM zone 30N
on purpose, so that it cannot be mistaken for real ground.

Regenerate (deterministic; numpy `default_rng(seed)`):

    python sample_gis/make_demo.py --seed {s['seed']}            # writes into sample_gis/
    python sample_gis/make_demo.py --out /tmp/demo --seed {s['seed']}

## Files
| file | content |
|---|---|
| `dem.tif` | float32 GeoTIFF, {p.cell_m:g} m cells, {int(p.width_m / p.cell_m)} x {int(p.height_m / p.cell_m)} cells, north-up, nodata {p.nodata:g}, 256 px tiles, DEFLATE + floating-point predictor, elevations rounded to 1 cm (range {s['zmin']:.2f} to {s['zmax']:.2f} m) |
| `centrelines.gpkg` | layer `centrelines`: two LineStrings drawn upstream -> downstream, vertices every ~{p.vertex_m:g} m; fields `reach_id`, `name` |
| `landcover.gpkg` | layer `landcover`: polygons covering the whole DEM extent without gaps or overlaps; field `cover` |
| `dem_lidar.tif` | the first meander of the main river as a LiDAR flight records it (below); same format, {s['lidar']['shape'][1]} x {s['lidar']['shape'][0]} cells |
| `lidar.gpkg` | layers `centreline` (that stretch of `main`, fields `reach_id`, `name`) and `survey` ({s['lidar']['survey_points']} surveyed ground points, field `z_m`) |

CRS: EPSG:{p.epsg} (WGS 84 / UTM zone 30N), metres; vertical unit metres (invented datum).
Extent: E {e0:.0f}-{e0 + p.width_m:.0f}, N {n0:.0f}-{n0 + p.height_m:.0f}
({p.width_m / 1000:g} km x {p.height_m / 1000:g} km).
""" + readme_valley(p, s)


def readme_valley(p: Params, s: dict) -> str:
    """README sections on the valley, the reaches and the design flows."""
    qm, dm, am = s["bankfull_main"]
    qt, dt, at = s["bankfull_trib"]
    ev = EVENTS
    q2_below = ev["q2"]["main"] + ev["q2"]["tributary"]
    return f"""
## The valley
- Valley floor about 390 m wide, falling east at {p.valley_slope * 1000:g} m/km, with a gentle
  cross-fall ({p.cross_fall * 1000:g} m/km rising to the north), small-scale roughness of a few cm
  to about 0.2 m, and natural levees up to 0.15 m high beside the channels.
- North side: a terrace step about 2 m high some 185 m north of the valley axis, a terrace about
  150 m wide, then the valley wall. South side: the valley wall rises steeply from the floor.
- {RIVER_NAMES[0]} (`main`) meanders along the floor (sine-generated curve, arc wavelength
  {s['wavelength']:.0f} m, sinuosity {s['sinuosity']:.3f}, smallest bend radius {s['radius']:.0f} m, i.e.
  {s['radius'] / (2 * p.main['top_half']):.0f} channel widths).
- {RIVER_NAMES[1]} (`tributary`) leaves a side valley in the south wall and joins the main river
  at about 45 degrees, pointing downstream.
- A raised road (crest 1.3 m above the floodplain, 7 m wide, 1:2.5 side slopes) crosses the valley
  floor north-south at E {s['road_e']:.0f}, with a bridge opening about 55 m wide over the river
  (the bare-earth DEM has no deck). {VILLAGE_NAME} lies on and just below the terrace beside it.
- A closed depression (a flooded-out pit 0.9 m deep, ringed by a bund whose crest is 1.5 m above
  the floodplain) sits on the south floodplain at E {s['pit_e']:.0f}, N {s['pit_n']:.0f}. The rare
  flood reaches the bund but does not overtop it, so a flood map must leave the pit dry.

## Reaches
| reach_id | name | length | bed slope | channel (bottom / top width x depth to levee crest) | bankfull Q, Manning n = {p.n_channel}: to levee crest / to floodplain level |
|---|---|---|---|---|---|
| main | {RIVER_NAMES[0]} | {s['len_main']:.1f} m | {s['slope_main']:.7f} | {2 * p.main['bottom_half']:g} / {2 * p.main['top_half']:g} m x {dm:g} m (A = {am:g} m2) | {qm:.1f} / {s['fp_main']:.1f} m3/s |
| tributary | {RIVER_NAMES[1]} | {s['len_trib']:.1f} m | {s['slope_trib']:.7f} | {2 * p.trib['bottom_half']:g} / {2 * p.trib['top_half']:g} m x {dt:g} m (A = {at:g} m2) | {qt:.1f} / {s['fp_trib']:.1f} m3/s |

The bed lines are straight in chainage (main: {s['bed_main_start']:.2f} m at chainage 0 to
{s['bed_main_end']:.2f} m at the end; the thalweg is 0.2 m lower on the centreline). The main bed
slope is the valley slope divided by the sinuosity. The tributary ends on the main centreline at
main chainage **{s['conf']:.2f} m** (the confluence).

Bankfull capacity: Q = A R^(2/3) S^(1/2) / n for the design trapezoid, with n = {p.n_channel}
(Chow 1959, Table 5-6, natural minor stream "clean, winding, some pools and shoals", normal value).

## Design flows (configs/demo.toml)
| event | main (upstream) | main below the confluence | tributary |
|---|---|---|---|
| q2 | {ev['q2']['main']:g} | {ev['q2']['main'] + ev['q2']['tributary']:g} | {ev['q2']['tributary']:g} |
| q100 | {ev['q100']['main']:g} | {ev['q100']['main'] + ev['q100']['tributary']:g} | {ev['q100']['tributary']:g} |

Why: `q2` is a frequent flood, set below the confluence at
{100 * q2_below / s['fp_main']:.0f} % of the main channel's capacity to the general floodplain level
({s['fp_main']:.1f} m3/s; {qm:.1f} m3/s to the levee crest) and on the brook at
{100 * ev['q2']['tributary'] / s['fp_trib']:.0f} % of its capacity ({s['fp_trib']:.1f} m3/s), so it
should stay in bank; the margin allows for the small-scale lows behind the levees.

`q100` is a rare flood of about three times bankfull. A trial run of configs/demo.toml put its
water level about 0.3-0.9 m (typically 0.5 m) above the general floodplain level: it covers the
floodplain up to the south wall and the terrace step, stands against the pit's bund (crest about
0.9 m higher; pit floor about 1.5 m lower) and against the road embankment (crest about 0.4 m
higher), and overtops neither. The event names are labels only; no hydrology stands behind them.

## Land cover (`cover`)
| class | area (ha) | meaning |
|---|---|---|
""" + landcover_rows(s)


def landcover_rows(s: dict) -> str:
    """Land-cover table rows and the closing note of the README."""
    meaning = {"channel": "river channels: each centreline buffered by its channel top half-width",
               "paved": "the raised road (7 m crest)",
               "built_up": f"the village of {VILLAGE_NAME}",
               "woodland": "woods on the valley walls and bankside strips along the river",
               "grassland": "meadows and pasture (fields from a Voronoi partition)",
               "crops": "arable fields, mostly on the terrace"}
    rows = "".join(f"| {c} | {s['areas'][c]:.2f} | {meaning[c]} |\n" for c in COVER_CLASSES)
    return rows + """
Manning's n per class is set in `configs/demo.toml` (Chow 1959, Table 5-6, "normal" column, with
the minimum and maximum as the low and high values for sensitivity runs).
""" + readme_lidar(s) + """
Results computed on this scenario are screening-level 1D steady estimates for a made-up valley.
"""


# ----------------------------------------------------------------------------- LiDAR-like variant
# The first meander of the main river as a LiDAR flight records it: where the flight-day flow covers
# the channel the DEM holds the flat water surface, not the bed. A handful of surveyed cross-sections
# of the true channel (sampled from the true DEM) go with it. No random numbers are drawn here.
FLOWN_Q = 10.0                               # m3/s in the main river on the flight day (invented)
LIDAR_BOX = (0.0, 1100.0, -380.0, 380.0)     # local x west/east, y south/north of the valley axis
SURVEY_CHAINAGES = (20.0, 280.0, 540.0, 800.0, 1060.0)   # m along the stretch (it is 1063.8 m long)
SURVEY_HALF_WIDTH, SURVEY_STEP = 14.0, 1.0   # m: points from 14 m left to 14 m right of the centreline


def flown_depth(p: Params, lay: Layout) -> float:
    """Depth (m) of the flight-day flow in the design trapezoid, Manning normal depth (brentq)."""
    from scipy.optimize import brentq

    spec = p.main
    bottom, side = 2 * spec["bottom_half"], (spec["top_half"] - spec["bottom_half"]) / (
        spec["below_fp"] + spec["levee"])

    def excess(h):
        area, perim = (bottom + side * h) * h, bottom + 2 * h * np.hypot(1.0, side)
        return area * (area / perim) ** (2 / 3) * np.sqrt(lay.bed_slope_main) / p.n_channel - FLOWN_Q
    return float(brentq(excess, 1e-6, 10.0, xtol=1e-10))


def lidar_stretch(lay: Layout) -> np.ndarray:
    """Vertices of the main river over its first meander wavelength (down-valley at both ends)."""
    return lay.main[chainage(lay.main) <= lay.wavelength + 1e-9]


def lidar_dem(p: Params, lay: Layout, z: np.ndarray) -> tuple[np.ndarray, float, float, int]:
    """The DEM cut to LIDAR_BOX with the main channel filled to the flight-day water surface.

    The water surface is the bed line plus the flown depth at the chainage of the nearest
    centreline point; only channel cells below it are raised. Returns (z, west, north in local
    metres, number of cells raised).
    """
    x0, x1, s0, n0 = LIDAR_BOX
    north, south = p.axis_y + n0, p.axis_y + s0
    r0, r1 = int(round((p.height_m - north) / p.cell_m)), int(round((p.height_m - south) / p.cell_m))
    c0, c1 = int(round(x0 / p.cell_m)), int(round(x1 / p.cell_m))
    crop = z[r0:r1, c0:c1].astype(np.float64)
    x, y = grid_centres(p)
    X, Y = np.meshgrid(x[c0:c1], y[r0:r1])
    main_ext, off = extend_line(lay.main, 60.0, 60.0)
    d, s = (a.reshape(X.shape) for a in nearest_on_line(main_ext, np.column_stack([X.ravel(), Y.ravel()]),
                                                       off, 300.0))
    water = lay.bed_main(np.nan_to_num(s)) + flown_depth(p, lay)
    flooded = np.isfinite(d) & (d < p.main["top_half"]) & (crop < water)
    return np.round(np.where(flooded, water, crop), 2).astype(np.float32), x0, north, int(flooded.sum())


def survey_points(p: Params, lay: Layout, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Surveyed points (local xy) across the stretch at SURVEY_CHAINAGES and their ground (true DEM,
    bilinear between cell centres, rounded to 1 cm)."""
    line = lidar_stretch(lay)
    s = chainage(line)
    xy = []
    for c in SURVEY_CHAINAGES:
        k = min(int(np.searchsorted(s, c)), len(line) - 1)
        tangent = line[k] - line[k - 1]
        normal = np.array([-tangent[1], tangent[0]]) / np.hypot(*tangent)      # to the left
        centre = np.array([np.interp(c, s, line[:, 0]), np.interp(c, s, line[:, 1])])
        offsets = np.arange(SURVEY_HALF_WIDTH, -SURVEY_HALF_WIDTH - 1e-9, -SURVEY_STEP)
        xy.append(centre + offsets[:, None] * normal)
    xy = np.vstack(xy)
    rows = (p.height_m - xy[:, 1]) / p.cell_m - 0.5
    cols = xy[:, 0] / p.cell_m - 0.5
    ground = ndimage.map_coordinates(z.astype(np.float64), [rows, cols], order=1)
    return xy, np.round(ground, 2)


def write_lidar(out: Path, p: Params, lay: Layout, z: np.ndarray) -> dict:
    """dem_lidar.tif and lidar.gpkg (layers centreline, survey); returns numbers for the README."""
    import geopandas as gpd

    zl, west, north, raised = lidar_dem(p, lay, z)
    write_dem(out / "dem_lidar.tif", p, zl, west=west, north=north)
    crs = f"EPSG:{p.epsg}"
    gpd.GeoDataFrame({"reach_id": ["main"], "name": [RIVER_NAMES[0]]},
                     geometry=to_world(p, np.array([shapely.linestrings(lidar_stretch(lay))])), crs=crs).to_file(
        out / "lidar.gpkg", layer="centreline", driver="GPKG")
    xy, ground = survey_points(p, lay, z)
    gpd.GeoDataFrame({"z_m": ground}, geometry=to_world(p, shapely.points(xy)), crs=crs).to_file(
        out / "lidar.gpkg", layer="survey", driver="GPKG")
    return dict(flown_depth=flown_depth(p, lay), stretch=float(chainage(lidar_stretch(lay))[-1]),
                survey_points=len(ground), raised_cells=raised, shape=zl.shape)


def readme_lidar(s: dict) -> str:
    """README section on the LiDAR-like stretch and its survey."""
    li = s["lidar"]
    x0, x1, s0, n0 = LIDAR_BOX
    return f"""
## The channel the DEM cannot see (`dem_lidar.tif`, `lidar.gpkg`, configs/demo_lidar.toml)
A LiDAR DEM shows the water surface of the day it was flown, not the river bed. `dem_lidar.tif` is
`dem.tif` cut to the first meander of the {RIVER_NAMES[0]} (local x {x0:g}-{x1:g} m, {-s0:g} m south to
{n0:g} m north of the valley axis) with the channel filled up to the water surface of an invented
flight day: {FLOWN_Q:g} m3/s, {li['flown_depth']:.3f} m deep in the design trapezoid (Manning normal
depth, n = {Params().n_channel:g}), so {li['raised_cells']} channel cells hold a flat water surface instead of the bed.
Layer `centreline` of `lidar.gpkg` is that stretch of `main` ({li['stretch']:.1f} m, one meander
wavelength). Layer `survey` holds {len(SURVEY_CHAINAGES)} surveyed cross-sections of the true channel at
chainages {", ".join(f"{c:g}" for c in SURVEY_CHAINAGES)} m of the stretch: points every
{SURVEY_STEP:g} m from {SURVEY_HALF_WIDTH:g} m left to {SURVEY_HALF_WIDTH:g} m right of the centreline,
`z_m` = the true ground (`dem.tif`, bilinear), rounded to 1 cm. The outer points lie on the banks beyond
the channel, where geoflow checks the survey's datum against the DEM.
"""


def generate(out: Path, seed: int = DEFAULT_SEED, params: Params | None = None) -> dict:
    """Generate the whole scenario into ``out``; returns the summary numbers."""
    p = params or Params()
    rng = np.random.default_rng(seed)
    lay = make_layout(rng, p)
    z = build_dem(rng, p, lay)
    lc_geoms, lc_classes = build_landcover(rng, p, lay)
    out.mkdir(parents=True, exist_ok=True)
    write_dem(out / "dem.tif", p, z)
    write_vectors(out, p, lay, lc_geoms, lc_classes)
    s = summary(p, lay, z, lc_geoms, lc_classes, seed)
    s["lidar"] = write_lidar(out, p, lay, z)
    (out / "README.md").write_text(readme_text(p, s), encoding="utf-8")
    return s


def main(argv: list[str] | None = None) -> None:
    """Command line: generate and print the numbers the configs need."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", type=Path, default=HERE, help="output folder (default: this folder)")
    ap.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    args = ap.parse_args(argv)
    s = generate(args.out, args.seed)
    print(f"wrote {args.out}")
    print(f"main: length {s['len_main']:.1f} m, bed slope {s['slope_main']:.7f}, "
          f"bankfull {s['bankfull_main'][0]:.1f} m3/s")
    print(f"tributary: length {s['len_trib']:.1f} m, bed slope {s['slope_trib']:.7f}, "
          f"bankfull {s['bankfull_trib'][0]:.1f} m3/s")
    print(f"confluence chainage on main: {s['conf']:.2f} m")


if __name__ == "__main__":
    main()
