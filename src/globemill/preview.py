"""Pictures of a bake: shaded views of the world colored by material layer, chunk, level or
measured error, and a histogram of measured errors.

The views are rasterised here with numpy (orthographic camera, z-buffer, normals interpolated
across each triangle, Lambert shading, a supersampled box filter), because a world has up to
millions of triangles and a vector renderer would spend minutes on them. matplotlib (the `preview`
extra) only lays the finished views out with titles, a legend or a color bar, and writes the PNG.

Colors are handled in linear RGB (layer colors are linear by the spec) and turned into sRGB
with the sRGB transfer function (IEC 61966-2-1) for the picture.
"""

from __future__ import annotations

import io
import json
import math
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from ._atomic import write_files_atomically
from .attributes import NO_LAYER, layer_palette
from .bake import BakeResult
from .spec import unit_vector

COLOR_MODES = ("layer", "altitude", "slope", "chunk", "level", "error")
# what a finished bake's files hold (the others need the bake in memory)
GROUND_COLOR_MODES = ("layer", "altitude", "slope", "chunk")
PICTURE_FORMATS = {".png": "png", ".jpg": "jpeg", ".jpeg": "jpeg"}
GRID_STEP_DEG = 30.0  # latitude/longitude lines every so many degrees by default
MIN_GRID_DEG = 1.0
LABEL_MIN_COS = 0.25  # names are written where the ground faces the camera at most ~75° away
GRID_RGB = np.array([0.85, 0.85, 0.85])  # linear RGB of the grid lines
GRID_MIX = 0.55
VIEWS: dict[str, tuple[tuple[float, float, float], tuple[float, float, float]]] = {
    # name: (direction from the centre towards the camera, screen up); Y up, +Z is (0°, 0°)
    "front": ((0.0, 0.0, 1.0), (0.0, 1.0, 0.0)),
    "back": ((0.0, 0.0, -1.0), (0.0, 1.0, 0.0)),
    "east": ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0)),
    "west": ((-1.0, 0.0, 0.0), (0.0, 1.0, 0.0)),
    "north": ((0.0, 1.0, 0.0), (0.0, 0.0, -1.0)),
    "south": ((0.0, -1.0, 0.0), (0.0, 0.0, 1.0)),
}
DEFAULT_VIEWS = ("front", "back", "north")
DEFAULT_SIZE = (1600, 640)
MIN_SIZE, MAX_SIZE = 64, 8192
BACKGROUND = "#11151c"
FOREGROUND = "#e8e8e8"
# six colors far apart in hue (sRGB), for chunks (adjacent chunks never share one) and levels
PALETTE = np.array(
    [
        [0.90, 0.62, 0.00],
        [0.34, 0.71, 0.91],
        [0.00, 0.62, 0.45],
        [0.94, 0.89, 0.26],
        [0.80, 0.47, 0.65],
        [0.84, 0.37, 0.00],
    ]
)

F64 = npt.NDArray[np.float64]
I64 = npt.NDArray[np.int64]


def srgb_to_linear(c: npt.ArrayLike) -> F64:
    """The sRGB transfer function inverted (IEC 61966-2-1)."""
    c = np.asarray(c, dtype=np.float64)
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def linear_to_srgb(c: npt.ArrayLike) -> F64:
    """The sRGB transfer function (IEC 61966-2-1), input clipped to 0..1."""
    c = np.clip(np.asarray(c, dtype=np.float64), 0.0, 1.0)
    return np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)


def parse_size(text: str) -> tuple[int, int]:
    """'WxH' -> (W, H) in pixels, each in MIN_SIZE..MAX_SIZE."""
    parts = text.lower().replace("×", "x").split("x")
    try:
        w, h = (int(p) for p in parts)
    except ValueError:
        raise ValueError(
            f"size: must be WIDTHxHEIGHT in pixels, e.g. 1600x640, got {text!r}"
        ) from None
    if not (MIN_SIZE <= w <= MAX_SIZE and MIN_SIZE <= h <= MAX_SIZE):
        raise ValueError(
            f"size: width and height must be {MIN_SIZE}..{MAX_SIZE} pixels, got {w}x{h}"
        )
    return w, h


def view_frame(view: str) -> tuple[F64, F64, F64]:
    """(towards camera d, screen right, screen up) of a named view or of 'LAT,LON' degrees."""
    if view in VIEWS:
        d = np.array(VIEWS[view][0])
        up = np.array(VIEWS[view][1])
    else:
        try:
            lat, lon = (math.radians(float(x)) for x in view.split(","))
        except ValueError:
            names = ", ".join(VIEWS)
            raise ValueError(
                f"view: must be one of {names} or LAT,LON in degrees, got {view!r}"
            ) from None
        d = np.array([math.cos(lat) * math.sin(lon), math.sin(lat), math.cos(lat) * math.cos(lon)])
        up = np.array([0.0, 1.0, 0.0]) if abs(d[1]) < 0.999 else np.array([0.0, 0.0, -1.0])
    right = np.cross(up, d)
    right /= np.linalg.norm(right)
    return d, right, np.cross(d, right)


# ---- the rasteriser ----------------------------------------------------------------------------


@dataclass
class Raster:
    """Per pixel of an (h, w) view: the triangle seen (-1: none) and its barycentrics."""

    tri: npt.NDArray[np.int64]
    bary: npt.NDArray[np.float32]  # (h, w, 3)


def rasterize(
    positions: F64,
    triangles: npt.NDArray[Any],
    d: F64,
    right: F64,
    up: F64,
    size: int,
    extent: float,
) -> Raster:
    """Orthographic z-buffer rasterisation of the triangles facing the camera.

    The view is `size` x `size` pixels showing [-extent, extent] metres on both screen axes;
    pixel (i, j) samples the screen point at its centre. A pixel belongs to the nearest triangle
    whose closed area holds its centre (edge functions, Pineda 1988), so triangles sharing an
    edge leave no gap. Vectorised by scanline: every (triangle, pixel row) pair gets its span of
    pixel centres from the three edge functions, so the work follows the pixels covered.
    """
    tri = np.asarray(triangles, dtype=np.int64).reshape(-1, 3)
    out_tri = np.full(size * size, -1, dtype=np.int64)
    out_bary = np.zeros((size * size, 3), dtype=np.float32)
    scale = size / (2.0 * extent)
    sx = (positions @ right) * scale + size / 2.0
    sy = size / 2.0 - (positions @ up) * scale
    depth = positions @ d
    # face culling: counter-clockwise from outside, so the geometric normal faces the camera
    p = positions[tri]
    ids = np.flatnonzero(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]) @ d > 0)
    tri = tri[ids]
    x, y = sx[tri], sy[tri]
    # lambda_k(P) = (a_k * Px + b_k * Py + c_k) / area, the barycentric of corner k: the edge
    # function of the edge opposite corner k
    area = (x[:, 1] - x[:, 0]) * (y[:, 2] - y[:, 0]) - (x[:, 2] - x[:, 0]) * (y[:, 1] - y[:, 0])
    ok = area != 0
    y0 = np.maximum(np.ceil(y.min(axis=1) - 0.5), 0).astype(np.int64)
    y1 = np.minimum(np.floor(y.max(axis=1) - 0.5), size - 1).astype(np.int64)
    ok &= y1 >= y0
    sel = np.flatnonzero(ok)
    x, y, area, y0, y1 = x[sel], y[sel], area[sel], y0[sel], y1[sel]
    a = np.empty((len(sel), 3))
    b = np.empty((len(sel), 3))
    c = np.empty((len(sel), 3))
    for k in range(3):
        i, j = (k + 1) % 3, (k + 2) % 3
        a[:, k] = -(y[:, j] - y[:, i]) / area
        b[:, k] = (x[:, j] - x[:, i]) / area
        c[:, k] = ((y[:, j] - y[:, i]) * x[:, i] - (x[:, j] - x[:, i]) * y[:, i]) / area
    # (triangle, row) pairs
    rows = y1 - y0 + 1
    t_of_row = np.repeat(np.arange(len(sel)), rows)
    first = np.cumsum(rows) - rows
    row = y0[t_of_row] + (np.arange(len(t_of_row)) - first[t_of_row])
    cy = row + 0.5
    # span of x where a_k x + (b_k cy + c_k) >= 0 for every k
    ar = a[t_of_row]
    br = b[t_of_row] * cy[:, None] + c[t_of_row]
    slack = 1e-9
    with np.errstate(divide="ignore", invalid="ignore"):
        bound = -br / ar
    lo = np.where(ar > 0, bound, -np.inf).max(axis=1)
    hi = np.where(ar < 0, bound, np.inf).min(axis=1)
    flat_out = ((ar == 0) & (br < -slack)).any(axis=1)
    xl = np.maximum(np.ceil(lo - 0.5 - slack), 0)
    xr = np.minimum(np.floor(hi - 0.5 + slack), size - 1)
    n = np.where(flat_out | ~(xr >= xl), 0, xr - xl + 1).astype(np.int64)
    # pixels
    p_row = np.repeat(np.arange(len(t_of_row)), n)
    start = np.cumsum(n) - n
    col = xl.astype(np.int64)[p_row] + (np.arange(len(p_row)) - start[p_row])
    t = t_of_row[p_row]
    cx = col + 0.5
    pyc = cy[p_row]
    lam = a[t] * cx[:, None] + b[t] * pyc[:, None] + c[t]
    lam = np.clip(lam, 0.0, 1.0)
    lam /= np.maximum(lam.sum(axis=1, keepdims=True), 1e-12)
    dep = np.einsum("pk,pk->p", lam, depth[tri[sel[t]]])
    pix = row[p_row] * size + col
    if len(pix):
        zbuf = np.full(size * size, -np.inf)
        np.maximum.at(zbuf, pix, dep)
        win = dep >= zbuf[pix]
        out_tri[pix[win]] = ids[sel[t[win]]]
        out_bary[pix[win]] = lam[win]
    return Raster(out_tri.reshape(size, size), out_bary.reshape(size, size, 3))


def shade_view(
    positions: F64,
    normals: F64,
    triangles: npt.NDArray[Any],
    *,
    view: str,
    size: int,
    extent: float,
    vertex_rgb: F64 | None = None,
    face_rgb: F64 | None = None,
    supersample: int = 2,
    ambient: float = 0.18,
    grid_deg: float = 0.0,
) -> tuple[F64, F64]:
    """One view: (size, size, 3) linear RGB and the (size, size) share of each pixel covered.

    Color comes from `vertex_rgb` (interpolated) or `face_rgb` (flat), in linear RGB; light is a
    directional key light from the viewer's upper left (Lambert) plus `ambient`. With
    `grid_deg` > 0, lines of latitude and longitude every `grid_deg` degrees are drawn on the
    ground, one pixel wide on screen.
    """
    d, right, up = view_frame(view)
    big = size * supersample
    tri = np.asarray(triangles, dtype=np.int64).reshape(-1, 3)
    ras = rasterize(positions, tri, d, right, up, big, extent)
    flat = ras.tri.reshape(-1)
    hit = np.flatnonzero(flat >= 0)
    t = flat[hit]
    b = ras.bary.reshape(-1, 3)[hit]
    corners = tri[t]
    nrm = normals.astype(np.float32)
    n = (
        b[:, 0, None] * nrm[corners[:, 0]]
        + b[:, 1, None] * nrm[corners[:, 1]]
        + b[:, 2, None] * nrm[corners[:, 2]]
    )
    light = -0.45 * right + 0.55 * up + 0.70 * d
    light = (light / np.linalg.norm(light)).astype(np.float32)
    cos = (n @ light) / np.maximum(np.sqrt(np.einsum("pj,pj->p", n, n)), 1e-12)
    lam = ambient + (1.0 - ambient) * np.clip(cos, 0.0, 1.0)
    if vertex_rgb is not None:
        col = vertex_rgb.astype(np.float32)
        albedo = (
            b[:, 0, None] * col[corners[:, 0]]
            + b[:, 1, None] * col[corners[:, 1]]
            + b[:, 2, None] * col[corners[:, 2]]
        )
    elif face_rgb is not None:
        albedo = face_rgb.astype(np.float32)[t]
    else:
        albedo = np.full((len(t), 3), 0.5, dtype=np.float32)
    img = np.zeros((big * big, 3), dtype=np.float32)
    img[hit] = albedo * lam[:, None]
    if grid_deg > 0 and len(hit):
        pos = positions[corners]  # (h, 3 corners, 3)
        line = grid_lines(np.einsum("pk,pkj->pj", b.astype(np.float64), pos), hit, big, grid_deg)
        img[hit[line]] = (1 - GRID_MIX) * img[hit[line]] + GRID_MIX * GRID_RGB.astype(np.float32)
    cover = np.zeros(big * big, dtype=np.float32)
    cover[hit] = 1.0
    img = img.reshape(size, supersample, size, supersample, 3).mean(axis=(1, 3))
    cover = cover.reshape(size, supersample, size, supersample).mean(axis=(1, 3))
    # un-premultiply the covered share so rims blend with the background later
    rgb = (img / np.maximum(cover, 1e-9)[:, :, None]).astype(np.float64)
    return rgb, cover.astype(np.float64)


def grid_lines(points: F64, hit: I64, big: int, step_deg: float) -> npt.NDArray[np.bool_]:
    """Which of the covered pixels (flat ids `hit` of a big x big view, surface points `points`
    (h, 3)) lie on a line of latitude or longitude every `step_deg` degrees: pixels whose grid
    cell differs from the next pixel's to the right or below (and that next pixel), so lines
    are as wide on screen wherever they run. Meridians stop short of the poles, where they
    would merge."""
    r = np.maximum(np.linalg.norm(points, axis=1), 1e-300)
    lat = np.degrees(np.arcsin(np.clip(points[:, 1] / r, -1.0, 1.0)))
    lon = np.degrees(np.arctan2(points[:, 0], points[:, 2]))
    polar = np.abs(lat) > 90.0 - min(step_deg, 15.0)
    covered = np.zeros((big, big), dtype=np.bool_)
    covered.reshape(-1)[hit] = True
    on = np.zeros((big, big), dtype=np.bool_)
    for values, usable in ((lat, np.ones(len(hit), np.bool_)), (lon, ~polar)):
        cell = np.zeros((big, big), dtype=np.int64)
        cell.reshape(-1)[hit] = np.floor(values / step_deg).astype(np.int64)
        ok = np.zeros((big, big), dtype=np.bool_)
        ok.reshape(-1)[hit] = usable
        ok &= covered
        for a, b in (
            ((slice(None), slice(0, -1)), (slice(None), slice(1, None))),
            ((slice(0, -1), slice(None)), (slice(1, None), slice(None))),
        ):
            edge = ok[a] & ok[b] & (cell[a] != cell[b])
            on[a] |= edge
            on[b] |= edge
    return on.reshape(-1)[hit]


# ---- what to draw ------------------------------------------------------------------------------


def chunk_colors(neighbors: npt.NDArray[Any]) -> I64:
    """A palette index per chunk such that chunks sharing an edge differ: greedy coloring
    (every chunk has 3 neighbours, so 4 colors always suffice, Brooks 1941), each chunk taking
    the least used color its neighbours leave free, so the whole palette shows."""
    n = len(neighbors)
    color = np.full(n, -1, dtype=np.int64)
    used = np.zeros(len(PALETTE), dtype=np.int64)
    for c in range(n):
        taken = {int(color[int(x)]) for x in neighbors[c] if color[int(x)] >= 0}
        free = [i for i in range(len(PALETTE)) if i not in taken]
        color[c] = min(free, key=lambda i: (used[i], i))
        used[color[c]] += 1
    return color


def view_levels(result: BakeResult, view: str) -> I64:
    """The level each chunk is drawn at in the `level` picture: finest facing the viewer,
    coarser with the angle from the view centre (one level per 90° / levels), then coarsened
    neighbours refined until neighbouring chunks differ by at most one level, as the stitched
    seams require."""
    nlev = len(result.levels)
    d, _, _ = view_frame(view)
    centres = np.array(
        [result.directions[ch.vertex_ids].mean(axis=0) for ch in result.levels[0].chunks]
    )
    centres /= np.linalg.norm(centres, axis=1, keepdims=True)
    angle = np.degrees(np.arccos(np.clip(centres @ d, -1.0, 1.0)))
    level = np.minimum((angle / (90.0 / nlev)).astype(np.int64), nlev - 1)
    nb = result.chunk_neighbors.astype(np.int64)
    while True:
        lowest = level[nb].min(axis=1) + 1
        new = np.minimum(level, lowest)
        if np.array_equal(new, level):
            return level
        level = new


def level_mix(result: BakeResult, levels: I64) -> tuple[F64, F64, I64, I64]:
    """Chunks at the given levels, each with the stitched variant its coarser neighbours call
    for: positions, normals, triangles (one buffer) and the level of each triangle."""
    pos, nrm, tris, lev = [], [], [], []
    base = 0
    for c, lv in enumerate(levels):
        ch = result.levels[int(lv)].chunks[c]
        mask = 0
        for i, n in enumerate(result.chunk_neighbors[c]):
            if levels[int(n)] == lv + 1:
                mask |= 1 << i
        border = ch.stitched.get(mask, ch.triangles[ch.interior :]) if mask else None
        t = (
            ch.triangles
            if border is None
            else np.concatenate([ch.triangles[: ch.interior], border])
        )
        nsurf = len(ch.vertex_ids)
        pos.append(ch.positions[:nsurf])
        nrm.append(ch.normals[:nsurf])
        tris.append(t.astype(np.int64) + base)
        lev.append(np.full(len(t), lv, dtype=np.int64))
        base += nsurf
    return np.concatenate(pos), np.concatenate(nrm), np.concatenate(tris), np.concatenate(lev)


@dataclass
class PreviewStats:
    """What a preview drew: triangles of the drawn mesh and seconds spent rendering."""

    path: Path
    size: tuple[int, int]
    triangles: int
    seconds: float


def picture_format(path: str | Path) -> str:
    """The matplotlib format of a picture file, from its suffix: png, or jpeg for .jpg/.jpeg."""
    suffix = Path(path).suffix.lower()
    if suffix not in PICTURE_FORMATS:
        allowed = ", ".join(PICTURE_FORMATS)
        raise ValueError(
            f"output: the picture must end in one of {allowed}, got {suffix or '(no suffix)'!r}"
        )
    return PICTURE_FORMATS[suffix]


@dataclass
class Ground:
    """One level of a bake as a single mesh, with what the pictures color it by.

    positions, normals : (V, 3) float64; triangles : (T, 3) int64; chunk : (T,) int64
    slope_deg, altitude_m : (V,) float64; layer : (V,) uint8 (NO_LAYER: no rule)
    layers : [(name, (3,) linear RGB)] the layer rules; neighbors : (C, 3) chunks across edges
    labels : [(feature name, (3,) unit direction of its centre)]
    """

    name: str
    level: int
    tolerance_m: float
    positions: F64
    normals: F64
    triangles: I64
    chunk: I64
    slope_deg: F64
    altitude_m: F64
    layer: npt.NDArray[np.uint8]
    layers: list[tuple[str, Sequence[float]]]
    neighbors: I64
    labels: list[tuple[str, F64]]


def feature_labels(spec: Any) -> list[tuple[str, F64]]:
    """(name, unit direction) of every named feature with a centre (a ridge: its midpoint)."""
    out = []
    for f in spec.features:
        dirs = f.directions()
        if not getattr(f, "name", None) or not dirs:
            continue
        u = np.sum(dirs, axis=0)
        out.append((str(f.name), u / np.linalg.norm(u)))
    return out


def ground_of(result: BakeResult, level: int = 0) -> Ground:
    """The Ground of one level of a bake in memory."""
    lv = result.levels[level]
    positions, tris = result.mesh(level)
    ids = np.flatnonzero(lv.present)
    return Ground(
        name=result.spec.name,
        level=level,
        tolerance_m=lv.tolerance_m,
        positions=positions,
        normals=result.normals[ids],
        triangles=tris.astype(np.int64),
        chunk=lv.chunk.astype(np.int64),
        slope_deg=result.slope_deg[ids],
        altitude_m=result.altitude_m[ids],
        layer=result.layer[ids],
        layers=[(r.name, tuple(r.color)) for r in result.spec.layers],
        neighbors=result.chunk_neighbors.astype(np.int64),
        labels=feature_labels(result.spec),
    )


def _layer_key(g: Ground) -> tuple[F64, list[Any], str]:
    """Vertex colors of the layer picture and its key (each layer's share of the area)."""
    from matplotlib.patches import Patch

    vertex_rgb = layer_palette([])[g.layer]
    for i, (_, rgb) in enumerate(g.layers):
        vertex_rgb[g.layer == i] = rgb
    # share of the ground's area: each vertex stands for a third of its triangles' area
    corner = g.positions[g.triangles]
    area = 0.5 * np.linalg.norm(
        np.cross(corner[:, 1] - corner[:, 0], corner[:, 2] - corner[:, 0]), axis=1
    )
    vertex_area = np.zeros(len(g.positions))
    for k in range(3):
        np.add.at(vertex_area, g.triangles[:, k], area / 3.0)
    share = 100.0 * np.bincount(g.layer, weights=vertex_area, minlength=256)
    share /= max(float(vertex_area.sum()), 1e-300)
    legend = [
        Patch(color=linear_to_srgb(rgb), label=f"{name} {share[i]:.0f}%")
        for i, (name, rgb) in enumerate(g.layers)
    ]
    if share[NO_LAYER] > 0 or not g.layers:
        legend.append(
            Patch(
                color=linear_to_srgb(layer_palette([])[0]),
                label=f"no rule {share[NO_LAYER]:.0f}%",
            )
        )
    return vertex_rgb, legend, "colored by material layer (key: share of the ground's area)"


def _ramp(values: F64, cmap_name: str, unit: str, what: str) -> tuple[F64, Any]:
    """Vertex colors of `values` on a color map from their least to their largest value."""
    from matplotlib import colormaps
    from matplotlib.colors import Normalize

    lo = float(values.min()) if len(values) else 0.0
    hi = float(values.max()) if len(values) else 1.0
    norm = Normalize(lo, hi if hi > lo else lo + 1.0)
    cmap = colormaps[cmap_name]
    rgb = srgb_to_linear(cmap(norm(values))[:, :3])
    return rgb, (cmap, norm, f"{what} ({unit})")


def ground_views(g: Ground, color: str, views: Sequence[str]) -> _Views:
    """What the picture of `g` draws for the color modes a Ground holds (GROUND_COLOR_MODES)."""
    if color not in GROUND_COLOR_MODES:
        allowed = ", ".join(GROUND_COLOR_MODES)
        raise ValueError(f"color: must be one of {allowed} for a finished bake, got {color!r}")
    vertex_rgb = face_rgb = None
    legend: list[Any] = []
    colorbar = None
    if color == "layer":
        vertex_rgb, legend, subtitle = _layer_key(g)
    elif color == "altitude":
        vertex_rgb, colorbar = _ramp(g.altitude_m, "cividis", "m above radius_m", "altitude")
        subtitle = (
            f"colored by altitude ({g.altitude_m.min():.4g} to {g.altitude_m.max():.4g} m)"
            if len(g.altitude_m)
            else "colored by altitude"
        )
    elif color == "slope":
        vertex_rgb, colorbar = _ramp(g.slope_deg, "viridis", "degrees", "slope")
        worst = float(g.slope_deg.max()) if len(g.slope_deg) else 0.0
        subtitle = f"colored by slope (up to {worst:.3g}°)"
    else:
        pal = srgb_to_linear(PALETTE)[chunk_colors(g.neighbors)]
        face_rgb = pal[g.chunk]
        subtitle = f"colored by chunk ({len(g.neighbors)} chunks)"
    what = f"level {g.level}: {len(g.triangles):,} triangles, tolerance {g.tolerance_m:g} m"
    return _Views(
        title=f"{g.name} — {what}",
        subtitle=subtitle,
        per_view=[(g.positions, g.normals, g.triangles, vertex_rgb, face_rgb)] * len(views),
        legend=legend,
        colorbar=colorbar,
        labels=_label_points(g.positions, g.labels),
        triangles=len(g.triangles),
    )


def _label_points(positions: F64, labels: list[tuple[str, F64]]) -> list[tuple[str, F64]]:
    """Each label on the ground: its direction scaled to the radius of the mesh vertex nearest
    in direction (no field needed, so a finished bake's files suffice)."""
    if not labels or not len(positions):
        return []
    r = np.linalg.norm(positions, axis=1)
    unit = positions / np.maximum(r, 1e-300)[:, None]
    out = []
    for name, u in labels:
        i = int(np.argmax(unit @ u))
        out.append((name, u * r[i]))
    return out


@dataclass
class _Views:
    """What the layout draws: title lines, per view (positions, normals, triangles, vertex or
    face colors), a key (legend patches or a color bar) and labelled surface points."""

    title: str
    subtitle: str
    per_view: list[tuple[F64, F64, npt.NDArray[Any], F64 | None, F64 | None]]
    legend: list[Any]
    colorbar: tuple[Any, Any, str] | None
    labels: list[tuple[str, F64]]
    triangles: int


def preview_png(
    result: BakeResult,
    *,
    color: str = "layer",
    level: int = 0,
    size: tuple[int, int] = DEFAULT_SIZE,
    views: Sequence[str] = DEFAULT_VIEWS,
    supersample: int = 2,
    grid_deg: float = GRID_STEP_DEG,
    names: bool = True,
    fmt: str = "png",
) -> tuple[bytes, int]:
    """The picture as PNG (or `fmt`) bytes, and the number of triangles drawn per view.

    color : layer (the layer rules' colors), altitude, slope, chunk, level (chunks at mixed
    levels joined by stitched seams) or error (measured deviation of each triangle, a heat map
    from 0 to the level's tolerance with a color bar). level : which level to draw (not for
    color=level). grid_deg : latitude/longitude lines every so many degrees (0: none).
    names : write the names of named features at their centres.
    """
    if color not in COLOR_MODES:
        raise ValueError(f"color: must be one of {', '.join(COLOR_MODES)}, got {color!r}")
    nlev = len(result.levels)
    if not isinstance(level, int) or not 0 <= level < nlev:
        raise ValueError(f"level: must be an integer in 0..{nlev - 1}, got {level!r}")
    check_views(views, grid_deg)
    extent = 1.02 * float(np.linalg.norm(result.vertices, axis=1).max())
    if color in GROUND_COLOR_MODES:
        v = ground_views(ground_of(result, level), color, views)
    else:
        v = _bake_views(result, color, level, views)
    if not names:
        v.labels = []
    return _compose(v, views, size, extent, supersample, grid_deg, fmt), v.triangles


def check_views(views: Sequence[str], grid_deg: float) -> None:
    if not views:
        raise ValueError("views: name at least one view")
    for v in views:
        view_frame(v)  # raises on a bad view
    if isinstance(grid_deg, bool) or not isinstance(grid_deg, (int, float)):
        raise ValueError(f"grid: must be a number of degrees in 0..90, got {grid_deg!r}")
    if not (grid_deg == 0 or MIN_GRID_DEG <= grid_deg <= 90):
        raise ValueError(
            f"grid: must be 0 (no grid) or {MIN_GRID_DEG:g}..90 degrees, got {grid_deg!r}"
        )


def _bake_views(result: BakeResult, color: str, level: int, views: Sequence[str]) -> _Views:
    """The color modes that need the bake in memory: error and level."""
    from matplotlib.colors import Normalize
    from matplotlib.patches import Patch

    nlev = len(result.levels)
    lv = result.levels[level]
    legend: list[Any] = []
    colorbar = None
    per_view: list[tuple[F64, F64, npt.NDArray[Any], F64 | None, F64 | None]] = []
    labels = feature_labels(result.spec)
    if color == "error":
        from matplotlib import colormaps

        g = ground_of(result, level)
        cmap = colormaps["inferno"]
        norm = Normalize(0.0, lv.tolerance_m)
        face_rgb = srgb_to_linear(cmap(norm(lv.errors.astype(np.float64)))[:, :3])
        colorbar = (cmap, norm, f"measured deviation (m), tolerance {lv.tolerance_m:g} m")
        worst = float(lv.errors.max()) if len(lv.errors) else 0.0
        subtitle = f"colored by measured error (max {worst:.3g} m)"
        per_view = [(g.positions, g.normals, g.triangles, None, face_rgb)] * len(views)
        title = f"level {level}: {len(g.triangles):,} triangles, tolerance {lv.tolerance_m:g} m"
        ntris = len(g.triangles)
        points = _label_points(g.positions, labels)
    else:
        subtitle = "colored by level: finest facing the viewer, seams stitched"
        for k in range(nlev):
            tol = result.levels[k].tolerance_m
            legend.append(Patch(color=PALETTE[k % len(PALETTE)], label=f"level {k}, {tol:g} m"))
        ntris = 0
        for view in views:
            p, n, t, lev_of_tri = level_mix(result, view_levels(result, view))
            face = srgb_to_linear(PALETTE)[lev_of_tri % len(PALETTE)]
            per_view.append((p, n, t, None, face))
            ntris = max(ntris, len(t))
        title = "mixed levels"
        points = _label_points(result.vertices, labels)
    return _Views(
        title=f"{result.spec.name} — {title}",
        subtitle=subtitle,
        per_view=per_view,
        legend=legend,
        colorbar=colorbar,
        labels=points,
        triangles=ntris,
    )


def _compose(
    v: _Views,
    views: Sequence[str],
    size: tuple[int, int],
    extent: float,
    supersample: int,
    grid_deg: float,
    fmt: str,
) -> bytes:
    """Lay the views out in a row under a title band, the key on the right; encode as `fmt`."""
    from matplotlib import patheffects
    from matplotlib.figure import Figure

    width, height = size
    dpi = 100
    key_w = 0 if not (v.legend or v.colorbar) else min(260, max(150, width // 6))
    title_h = min(64, max(28, height // 10))
    label_h = min(24, max(14, height // 30))
    side = int(min((width - key_w) / len(views), height - title_h - label_h))
    side = max(side, 8)
    fig = Figure(figsize=(width / dpi, height / dpi), dpi=dpi, facecolor=BACKGROUND)
    fs = max(6.0, min(14.0, title_h * 0.28))
    fig.text(
        0.01,
        1 - 0.45 * title_h / height,
        v.title,
        color=FOREGROUND,
        fontsize=fs * 1.15,
        va="center",
        ha="left",
        weight="bold",
    )
    subtitle = v.subtitle
    if grid_deg:
        subtitle += f"; grid every {grid_deg:g}° of latitude and longitude"
    fig.text(
        0.01,
        1 - 0.85 * title_h / height,
        subtitle,
        color=FOREGROUND,
        fontsize=fs * 0.85,
        va="center",
        ha="left",
        alpha=0.8,
    )
    bg = np.array([int(BACKGROUND[i : i + 2], 16) / 255 for i in (1, 3, 5)])
    row_w = side * len(views)
    left0 = (width - key_w - row_w) / 2
    # the row of views sits in the middle of the space under the title
    bottom0 = max(label_h, (height - title_h - side - label_h) / 2 + label_h)
    outline = [patheffects.withStroke(linewidth=2.0, foreground=BACKGROUND)]
    for i, (view, (p, n, t, vrgb, frgb)) in enumerate(zip(views, v.per_view, strict=True)):
        rgb, cover = shade_view(
            p,
            n,
            t,
            view=view,
            size=side,
            extent=extent,
            vertex_rgb=vrgb,
            face_rgb=frgb,
            supersample=supersample,
            grid_deg=grid_deg,
        )
        srgb = linear_to_srgb(rgb)
        img = srgb * cover[:, :, None] + bg[None, None, :] * (1 - cover[:, :, None])
        ax = fig.add_axes(
            (
                (left0 + i * side) / width,
                bottom0 / height,
                side / width,
                side / height,
            )
        )
        ax.imshow(img, interpolation="nearest")
        ax.set_axis_off()
        d, right, up = view_frame(view)
        scale = side / (2.0 * extent)
        for name, point in v.labels:
            # on the half facing the camera, away from the rim where labels would crowd
            if float(point @ d) / max(float(np.linalg.norm(point)), 1e-300) < LABEL_MIN_COS:
                continue
            x = float(point @ right) * scale + side / 2.0 - 0.5
            y = side / 2.0 - float(point @ up) * scale - 0.5
            ax.plot([x], [y], marker="o", markersize=2.5, color=FOREGROUND, linestyle="none")
            ax.text(
                x + 3,
                y - 3,
                name,
                color=FOREGROUND,
                fontsize=fs * 0.6,
                ha="left",
                va="bottom",
                path_effects=outline,
                clip_on=True,
            )
        ax.set_xlim(-0.5, side - 0.5)
        ax.set_ylim(side - 0.5, -0.5)
        fig.text(
            (left0 + (i + 0.5) * side) / width,
            (bottom0 - label_h * 0.6) / height,
            view,
            color=FOREGROUND,
            fontsize=fs * 0.8,
            ha="center",
            va="center",
        )
    if v.legend:
        fig.legend(
            handles=v.legend,
            loc="center right",
            frameon=False,
            labelcolor=FOREGROUND,
            fontsize=fs * 0.8,
            bbox_to_anchor=(1.0, 0.5),
        )
    if v.colorbar is not None:
        from matplotlib.cm import ScalarMappable

        cmap, norm, label = v.colorbar
        cax = fig.add_axes(
            (
                (width - key_w + 0.25 * key_w) / width,
                0.15,
                min(0.12 * key_w, 24) / width,
                0.7,
            )
        )
        cb = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=cax)
        cb.set_label(label, color=FOREGROUND, fontsize=fs * 0.75)
        cb.ax.tick_params(colors=FOREGROUND, labelsize=fs * 0.7)
        cb.outline.set_edgecolor(FOREGROUND)
    buf = io.BytesIO()
    if fmt == "jpeg":
        fig.savefig(buf, format="jpeg", dpi=dpi, facecolor=BACKGROUND, pil_kwargs={"quality": 92})
    else:
        fig.savefig(buf, format="png", dpi=dpi, facecolor=BACKGROUND, metadata={"Software": None})
    return buf.getvalue()


def write_preview(
    source: BakeResult | str | Path,
    path: str | Path,
    *,
    color: str = "layer",
    level: int = 0,
    size: tuple[int, int] = DEFAULT_SIZE,
    views: Sequence[str] = DEFAULT_VIEWS,
    supersample: int = 2,
    grid_deg: float = GRID_STEP_DEG,
    names: bool = True,
) -> PreviewStats:
    """Render the picture of `source` and write it to `path` atomically, PNG or JPEG by the
    suffix (.png, .jpg, .jpeg; any other is refused before rendering).

    source : a bake in memory (see preview_png for the colors), or a finished bake's folder (or
        its `<name>.report.json`), drawn from its files without baking again, in the colors
        the files hold (GROUND_COLOR_MODES).
    """
    t0 = time.perf_counter()
    fmt = picture_format(path)
    if isinstance(source, BakeResult):
        data, ntris = preview_png(
            source,
            color=color,
            level=level,
            size=size,
            views=views,
            supersample=supersample,
            grid_deg=grid_deg,
            names=names,
            fmt=fmt,
        )
    else:
        if color not in GROUND_COLOR_MODES:
            allowed = ", ".join(GROUND_COLOR_MODES)
            raise ValueError(f"color: must be one of {allowed} for a finished bake, got {color!r}")
        check_views(views, grid_deg)
        g = read_ground(source, level)
        v = ground_views(g, color, views)
        if not names:
            v.labels = []
        extent = 1.02 * float(np.linalg.norm(g.positions, axis=1).max())
        data, ntris = _compose(v, views, size, extent, supersample, grid_deg, fmt), v.triangles
    out = Path(path)
    write_files_atomically({out: data})
    return PreviewStats(out, size, ntris, time.perf_counter() - t0)


# ---- pictures of a finished bake, read back from its files ---------------------------------------


def find_report(path: str | Path) -> Path:
    """The report of the bake in folder `path` (it must hold exactly one), or `path` itself when
    it names a `<name>.report.json`."""
    p = Path(path)
    if p.is_file() and p.name.endswith(".report.json"):
        return p
    if not p.is_dir():
        raise ValueError(f"bake: {p} is neither a bake folder nor a <name>.report.json")
    reports = sorted(p.glob("*.report.json"))
    if not reports:
        raise ValueError(f"bake: {p} holds no <name>.report.json (bake a world into it first)")
    if len(reports) > 1:
        names = ", ".join(r.name for r in reports[:6]) + (", ..." if len(reports) > 6 else "")
        raise ValueError(
            f"bake: {p} holds {len(reports)} bakes ({names}); name one by its report, e.g. "
            f"{reports[0]}"
        )
    return reports[0]


def read_ground(path: str | Path, level: int = 0) -> Ground:
    """One level of the bake in folder `path` (or of the report `path` names), read from its
    `<name>.glb` and `<name>.report.json` alone (quantized positions and normals included).
    Raises ValueError when the files are missing or not a bake's."""
    from .check import CheckInputError, read_glb

    report_path = find_report(path)
    name = report_path.name[: -len(".report.json")]
    glb_path = report_path.with_name(f"{name}.glb")
    try:
        report = json.loads(report_path.read_text(encoding="utf-8"))
        glb = read_glb(glb_path)
        return _ground_from_glb(glb, report, name, level)
    except FileNotFoundError as exc:
        raise ValueError(f"bake: {exc.filename} is missing") from None
    except (CheckInputError, json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise ValueError(f"bake: {exc}") from None
    except (KeyError, IndexError, TypeError) as exc:
        raise ValueError(f"bake: {glb_path} lacks what a bake writes ({exc!r})") from None


def _ground_from_glb(glb: Any, report: dict[str, Any], name: str, level: int) -> Ground:
    doc = glb.doc
    extras = doc["scenes"][doc.get("scene", 0)].get("extras", {})
    roots = doc["scenes"][doc.get("scene", 0)]["nodes"]
    nlev = int(extras.get("levels", len(report["lods"])))
    if isinstance(level, bool) or not isinstance(level, int) or not 0 <= level < nlev:
        raise ValueError(f"level: must be an integer in 0..{nlev - 1}, got {level!r}")
    pos, nrm, tris, chunk, slope, alt, layer = [], [], [], [], [], [], []
    neighbors = []
    base = 0
    for c, root in enumerate(roots):
        node = doc["nodes"][root]
        chain = [root] + list(node.get("extensions", {}).get("MSFT_lod", {}).get("ids", []))
        if "level_file" in extras:
            chain = [root]  # one level per file: the root is that level
        nd = doc["nodes"][chain[level if len(chain) > 1 else 0]]
        mesh = doc["meshes"][nd["mesh"]]
        prim = mesh["primitives"][0]
        attr = prim["attributes"]
        p = glb.accessor(attr["POSITION"]).astype(np.float64)
        p = p * np.asarray(nd.get("scale", [1.0, 1.0, 1.0])) + np.asarray(
            nd.get("translation", [0.0, 0.0, 0.0])
        )
        n = glb.accessor(attr["NORMAL"])
        n = np.maximum(n / 127.0, -1.0) if n.dtype == np.int8 else n.astype(np.float64)
        t = glb.accessor(prim["indices"]).reshape(-1, 3).astype(np.int64)
        skirt = int(mesh.get("extras", {}).get("skirt_triangles", 0) or 0)
        if skirt:
            t = t[: len(t) - skirt]  # skirts hang below the ground: not drawn
        pos.append(p)
        nrm.append(n)
        tris.append(t + base)
        chunk.append(np.full(len(t), c, dtype=np.int64))
        slope.append(glb.accessor(attr["_SLOPE"]).reshape(-1).astype(np.float64))
        alt.append(glb.accessor(attr["_ALTITUDE"]).reshape(-1).astype(np.float64))
        layer.append(glb.accessor(attr["_LAYER"]).reshape(-1).astype(np.uint8))
        neighbors.append([int(x) for x in mesh.get("extras", {}).get("neighbors", [c, c, c])])
        base += len(p)
    layers = [(str(x["name"]), tuple(x["color"])) for x in extras.get("layers", [])]
    labels = [
        (str(f["name"]), unit_vector(float(f["lat_deg"]), float(f["lon_deg"])))
        for f in report.get("features", [])
        if f.get("name") and f.get("lat_deg") is not None
    ]
    return Ground(
        name=name,
        level=level,
        tolerance_m=float(report["lods"][level]["tolerance_m"]),
        positions=np.concatenate(pos),
        normals=np.concatenate(nrm),
        triangles=np.concatenate(tris),
        chunk=np.concatenate(chunk),
        slope_deg=np.concatenate(slope),
        altitude_m=np.concatenate(alt),
        layer=np.concatenate(layer),
        layers=layers,
        neighbors=np.asarray(neighbors, dtype=np.int64),
        labels=labels,
    )


def error_histogram_png(
    errors: npt.ArrayLike,
    tolerance: float,
    path: str | Path,
    *,
    size: tuple[int, int] = (900, 500),
    title: str = "measured deviation per triangle",
) -> Path:
    """A histogram of measured errors (metres) with the tolerance marked, written atomically to
    `path` as PNG. Counts are on a log scale, so the few worst triangles stay visible."""
    from matplotlib.figure import Figure

    e = np.asarray(errors, dtype=np.float64).reshape(-1)
    e = e[np.isfinite(e)]
    tol = float(tolerance)
    width, height = size
    dpi = 100
    fig = Figure(figsize=(width / dpi, height / dpi), dpi=dpi)
    ax = fig.add_axes((0.1, 0.14, 0.86, 0.74))
    top = max(tol, float(e.max()) if len(e) else 0.0) * 1.05 or 1.0
    bins = np.linspace(0.0, top, 61)
    if len(e):
        ax.hist(e, bins=bins, color="#3b75af", log=True)
    ax.axvline(tol, color="#c0392b", linestyle="--", linewidth=1.5, label=f"tolerance {tol:g} m")
    over = int(np.sum(e > tol))
    if len(e):
        stats = (
            f"{len(e):,} triangles, max {e.max():.4g} m, median {np.median(e):.4g} m, "
            f"{over:,} over the tolerance"
        )
    else:
        stats = "no triangles"
    ax.set_title(f"{title}\n{stats}", fontsize=10)
    ax.set_xlabel("deviation from the true surface (m)")
    ax.set_ylabel("triangles (log scale)")
    ax.set_xlim(0.0, top)
    ax.legend(loc="upper right", frameon=False)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    out = Path(path)
    write_files_atomically({out: buf.getvalue()})
    return out
