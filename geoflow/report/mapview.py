"""Map of a reach: hillshade of the DEM, depth per event, outlines, numbered sections.

Needs a :class:`MapLayers` (arrays and geometries, already read by the caller) and the reach
geometry. One panel per event, north up, axes in the DEM CRS (m); flagged sections in red.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import shapely
from matplotlib.collections import LineCollection
from matplotlib.colors import LightSource
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from .markup import FLAG_COLOUR, NOTE_COLOUR, event_colour

MAX_LABELS = 20         # section numbers written on a panel (every k-th, plus all flagged ones)


@dataclass(frozen=True, eq=False)
class MapLayers:
    """What the map shows besides the reach geometry.

    ``dem``: (elevation array m, (left, bottom, right, top)) or None; ``depth``: {event: (array
    m, bounds)}; ``outlines``: {event: [shapely polygons]}; ``other_lines``: {reach id:
    LineString} of the other reaches nearby; ``structures``: [(x, y, label)] drawn as
    markers (the hook for structures on the reach).
    """

    dem: tuple | None = None
    depth: dict = field(default_factory=dict)
    outlines: dict = field(default_factory=dict)
    other_lines: dict = field(default_factory=dict)
    structures: tuple = ()


def hillshade(z: np.ndarray, dx: float, dy: float) -> np.ndarray:
    """Grey shade 0..1 of an elevation grid, light from the north-west at 45 degrees
    (matplotlib LightSource, azimuth 315, altitude 45: the usual cartographic choice, common
    practice, no source). NaN cells stay NaN."""
    bad = ~np.isfinite(z)
    filled = np.where(bad, np.nanmean(z) if (~bad).any() else 0.0, z)
    shade = LightSource(azdeg=315, altdeg=45).hillshade(filled, vert_exag=2.0, dx=dx, dy=dy)
    return np.where(bad, np.nan, shade)


def _bounds(geom, layers: MapLayers) -> tuple[float, float, float, float]:
    coords = np.concatenate([np.asarray(s.line.coords)[:, :2] for s in geom.sections])
    (x0, y0), (x1, y1) = coords.min(axis=0), coords.max(axis=0)
    pad = 0.03 * max(x1 - x0, y1 - y0)
    return x0 - pad, y0 - pad, x1 + pad, y1 + pad


def _layout(bounds, n_panels: int):
    """Figure size (in) and axes rectangles (figure fractions): stacked for long reaches, side by
    side otherwise; each panel has the map's own aspect, so nothing is wasted around it."""
    aspect = (bounds[2] - bounds[0]) / max(bounds[3] - bounds[1], 1e-9)
    cols = 1 if aspect >= 1.6 or n_panels == 1 else min(n_panels, 2)
    rows = int(np.ceil(n_panels / cols))
    left, right, gap_x, top, bottom, gap_y = 0.75, 1.05, 0.25, 0.1, 0.35, 0.4   # inches
    panel_w = (11.0 - left - right - gap_x * (cols - 1)) / cols
    panel_h = panel_w / aspect
    if panel_h > 7.0:
        panel_h, panel_w = 7.0, 7.0 * aspect
    panel_h = max(panel_h, 1.0)
    width, height = 11.0, top + bottom + rows * panel_h + (rows - 1) * gap_y
    rects = []
    for k in range(n_panels):
        r, c = divmod(k, cols)
        x = left + c * (panel_w + gap_x)
        y = height - top - (r + 1) * panel_h - r * gap_y
        rects.append([x / width, y / height, panel_w / width, panel_h / height])
    return (width, height), rects


def map_figure(geom, layers: MapLayers, events, flagged=(), noted=()) -> Figure:
    """The map (see module docstring); ``flagged``: section ids to review, drawn in red and always
    numbered; ``noted``: section ids with notes only, drawn in purple and numbered."""
    panels = list(events) or [None]
    bounds = _bounds(geom, layers)
    size, rects = _layout(bounds, len(panels))
    fig = Figure(figsize=size)
    shade = None
    if layers.dem is not None:
        z, (l, b, r, t) = layers.dem
        shade = (hillshade(z, (r - l) / z.shape[1], (t - b) / z.shape[0]), (l, r, b, t))
    vmax = max([float(np.nanpercentile(a, 99.5)) for a, _ in layers.depth.values() if np.isfinite(a).any()],
               default=1.0)
    image = None
    for k, (event, rect) in enumerate(zip(panels, rects)):
        ax = fig.add_axes(rect)
        if shade is not None:
            ax.imshow(shade[0], extent=shade[1], cmap="gray", vmin=0, vmax=1, interpolation="bilinear")
        if event in layers.depth:
            a, (l, b, r, t) = layers.depth[event]
            image = ax.imshow(np.where(a > 0, a, np.nan), extent=(l, r, b, t), cmap="Blues", vmin=-0.3 * vmax,
                              vmax=vmax, alpha=0.85, interpolation="nearest")
        _outline(ax, layers.outlines.get(event, ()), event_colour(k))
        _lines(ax, geom, layers, flagged, noted)
        ax.set_xlim(bounds[0], bounds[2])
        ax.set_ylim(bounds[1], bounds[3])
        ax.set_aspect("equal")
        ax.xaxis.set_major_locator(MaxNLocator(8))
        ax.yaxis.set_major_locator(MaxNLocator(4))
        ax.ticklabel_format(useOffset=False, style="plain")
        ax.tick_params(labelsize=7)
        ax.text(0.005, 0.99, f"{event}" if event else "", transform=ax.transAxes, fontsize=10, fontweight="bold",
                va="top", color=event_colour(k), bbox=dict(facecolor="white", alpha=0.8, lw=0))
    if image is not None:
        right = max(r[0] + r[2] for r in rects)
        cax = fig.add_axes([right + 0.015, rects[-1][1], 0.012, rects[0][1] + rects[0][3] - rects[-1][1]])
        bar = fig.colorbar(image, cax=cax, boundaries=np.linspace(0, vmax, 65))
        bar.set_ticks(MaxNLocator(6).tick_values(0, vmax)[MaxNLocator(6).tick_values(0, vmax) <= vmax])
        bar.set_label("depth (m)", fontsize=8)
        bar.ax.tick_params(labelsize=7)
    return fig


def _outline(ax, polygons, colour: str) -> None:
    rings = []
    for p in polygons:
        for part in shapely.get_parts(p):
            rings.extend(np.asarray(r.coords)[:, :2] for r in [part.exterior, *part.interiors])
    if rings:
        ax.add_collection(LineCollection(rings, colors=colour, linewidths=1.0))


def _lines(ax, geom, layers: MapLayers, flagged, noted=()) -> None:
    """Section lines (numbered), this reach's centreline, other reaches and structures."""
    flagged, noted = set(flagged), set(noted) - set(flagged)
    segs = [np.asarray(s.line.coords)[:, :2] for s in geom.sections]
    colour = [FLAG_COLOUR if s.section_id in flagged else NOTE_COLOUR if s.section_id in noted else None
              for s in geom.sections]
    ax.add_collection(LineCollection([g for g, c in zip(segs, colour) if c is None], colors="#333333",
                                     linewidths=0.5, alpha=0.7))
    ax.add_collection(LineCollection([g for g, c in zip(segs, colour) if c == NOTE_COLOUR], colors=NOTE_COLOUR,
                                     linewidths=1.0))
    ax.add_collection(LineCollection([g for g, c in zip(segs, colour) if c == FLAG_COLOUR], colors=FLAG_COLOUR,
                                     linewidths=1.6))
    step = max(1, int(np.ceil(len(segs) / MAX_LABELS)))
    for k, (s, g, c) in enumerate(zip(geom.sections, segs, colour)):
        if k % step and c is None and k != len(segs) - 1:
            continue
        ax.text(g[0, 0], g[0, 1], str(s.section_id), fontsize=7, ha="center", va="center", fontweight="bold",
                color=c or "#111")
    c = np.asarray(geom.centreline.coords)[:, :2]
    ax.plot(c[:, 0], c[:, 1], color="#0b3c8c", lw=1.4)
    for rid, line in layers.other_lines.items():
        o = np.asarray(line.coords)[:, :2]
        ax.plot(o[:, 0], o[:, 1], color="#555", lw=1.1, ls="--")
        mid = o[len(o) // 2]
        ax.text(mid[0], mid[1], f" {rid}", fontsize=7, color="#333", clip_on=True)
    for x, y, label in layers.structures:
        ax.plot([x], [y], marker="s", color="k", ms=5)
        ax.text(x, y, f" {label}", fontsize=7)
