"""Bake a world: adaptive mesh within tolerance, measured a posteriori, ready to export."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from dataclasses import field as dc_field
from typing import Any

import numpy as np
import numpy.typing as npt

from . import _core
from .field import Field
from .spec import WorldSpec

OFFSET_MODES = {"radial": 0, "normal": 1, "exact": 2}
# a posteriori verification: a barycentric grid of this order on every triangle
# ((k+1)(k+2)/2 samples), exact projection onto the surface; triangles found beyond the
# tolerance are split until none is
MEASURE_ORDER = 3

# the guaranteed smallest angle of any triangle of directions (the mesh projected onto the unit
# sphere): newest-vertex bisection keeps three planar shape classes with angles >= 30 degrees
# (Mitchell 1989); projecting the first, large triangles onto the sphere bends that to 24.6
MIN_ANGLE_DEG = 24.0

Progress = Callable[[int, int], None]


@dataclass
class BakeResult:
    """The baked ground of one world.

    vertices : (V, 3) float64 metres, planet centre at the origin, Y up
    directions : (V, 3) float64 unit directions of the vertices
    triangles : (T, 3) uint32, counter-clockwise seen from outside
    normals : (V, 3) float64 analytic unit normals of the true surface at the vertices
    errors : (T,) float32 measured two-sided deviation of each triangle (m)
    report : dict with the keys the design names (planet, tolerance_m, lods, collision, ...)
    """

    spec: WorldSpec
    vertices: npt.NDArray[np.float64]
    directions: npt.NDArray[np.float64]
    triangles: npt.NDArray[np.uint32]
    normals: npt.NDArray[np.float64]
    errors: npt.NDArray[np.float32]
    report: dict[str, Any] = dc_field(default_factory=dict)


def _validate_options(tolerance_m: float, offset: str, threads: int, radius_m: float) -> None:
    if not isinstance(tolerance_m, (int, float)) or not np.isfinite(tolerance_m):
        raise ValueError(
            "tolerance_m: must be a finite number (allowed: > 0 and <= radius_m/10), "
            f"got {tolerance_m!r}"
        )
    if not (0 < tolerance_m <= radius_m / 10):
        raise ValueError(
            f"tolerance_m: must be > 0 and <= radius_m/10 = {radius_m / 10:g}, got {tolerance_m:g}"
        )
    if offset not in OFFSET_MODES:
        raise ValueError(f"offset: must be one of {', '.join(OFFSET_MODES)}, got {offset!r}")
    if not isinstance(threads, int) or threads < 0 or threads > 1024:
        raise ValueError(f"threads: must be an integer in 0..1024 (0 = all cores), got {threads!r}")


def bake(
    spec: WorldSpec,
    *,
    tolerance_m: float | None = None,
    offset: str | None = None,
    threads: int = 0,
    progress: Progress | None = None,
) -> BakeResult:
    """Mesh `spec` adaptively to within `tolerance_m` (default: the spec's) of the true surface.

    The result is deterministic: the same spec gives the same arrays whatever `threads` is.
    `progress(round, triangles)` is called between refinement rounds.
    Raises ValueError for bad options or a tolerance that would exceed `spec.max_triangles`.
    """
    tol = float(spec.tolerance_m if tolerance_m is None else tolerance_m)
    mode = spec.offset if offset is None else offset
    _validate_options(tol, mode, threads, spec.radius_m)
    t0 = time.perf_counter()
    fld = Field(spec)
    out = _core.refine(
        fld._core,
        tol,
        OFFSET_MODES[mode],
        int(spec.max_triangles),
        threads,
        MEASURE_ORDER,
        progress,
    )
    t_refine = time.perf_counter() - t0
    vertices = out["vertices"]
    triangles = out["triangles"]
    stats = dict(out["stats"])
    normals = fld.normals(out["directions"])
    total = time.perf_counter() - t0
    report: dict[str, Any] = {
        "planet": spec.name,
        "radius_m": spec.radius_m,
        "tolerance_m": tol,
        "offset": mode,
        "lods": [
            {
                "level": 0,
                "tolerance_m": tol,
                "chunks": 1,
                "vertices": int(vertices.shape[0]),
                "triangles": int(triangles.shape[0]),
                "max_error_m": float(stats.pop("max_error_m")),
                "mesh_to_surface_m": float(stats.pop("mesh_to_surface_m")),
                "surface_to_mesh_m": float(stats.pop("surface_to_mesh_m")),
                "seconds": t_refine,
            }
        ],
        "collision": None,
        "refine": stats,
        "seconds_total": total,
    }
    return BakeResult(
        spec=spec,
        vertices=vertices,
        directions=out["directions"],
        triangles=triangles,
        normals=normals,
        errors=out["errors"],
        report=report,
    )
