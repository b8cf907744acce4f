"""Surface attributes per vertex: slope, altitude, material layer and the layer's color.

- slope (degrees) = atan(|grad H| / (R + H)) at the vertex direction (docs/terrain.md, "Gradient"),
  from the analytic gradient, so it is the slope of the true surface, not of the mesh;
- altitude (metres above `radius_m`) = H at the vertex direction;
- layer = index of the first rule of `spec.layers` whose slope band and altitude band (both
  closed intervals [lo, hi]) hold the vertex, or NO_LAYER (255) when none does;
- color = that layer's linear RGB color, NO_LAYER_COLOR where no rule matched.

Every number is computed by the C++ core (csrc/attributes.cpp), the very code a bake runs, so
these equal the attributes a bake stores on its vertices bit for bit; this module only wraps it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from . import _core
from .field import Field
from .spec import Layer, WorldSpec

NO_LAYER: int = _core.NO_LAYER
"""_LAYER value of a vertex that no layer rule matches."""
NO_LAYER_COLOR = (0.5, 0.5, 0.5)
"""Linear RGB color of a vertex that no layer rule matches (mid grey)."""
MAX_LAYERS = 255
"""Layer indices 0..254 fit the 8-bit attribute beside NO_LAYER."""

F64 = npt.NDArray[np.float64]
U8 = npt.NDArray[np.uint8]


@dataclass
class VertexAttributes:
    """slope_deg, altitude_m : (N,) float64; layer : (N,) uint8; color : (N, 3) float64 linear."""

    slope_deg: F64
    altitude_m: F64
    layer: U8
    color: F64

    def take(self, index: npt.ArrayLike) -> VertexAttributes:
        """The attributes of the vertices `index` (any integer index array)."""
        i = np.asarray(index)
        return VertexAttributes(self.slope_deg[i], self.altitude_m[i], self.layer[i], self.color[i])

    @staticmethod
    def concatenate(parts: Sequence[VertexAttributes]) -> VertexAttributes:
        return VertexAttributes(
            np.concatenate([p.slope_deg for p in parts]),
            np.concatenate([p.altitude_m for p in parts]),
            np.concatenate([p.layer for p in parts]),
            np.concatenate([p.color for p in parts]),
        )


def layer_rows(layers: Sequence[Layer]) -> F64:
    """The layer rules as the core reads them: (n, 7) slope lo, hi, altitude lo, hi, color."""
    if len(layers) > MAX_LAYERS:
        raise ValueError(f"layers: at most {MAX_LAYERS} layer rules fit _LAYER, got {len(layers)}")
    rows = [[*r.slope_deg, *r.altitude_m, *r.color] for r in layers]
    return np.asarray(rows, dtype=np.float64).reshape(-1, 7)


def slope_and_altitude(fld: Field, directions: npt.ArrayLike) -> tuple[F64, F64]:
    """(slope degrees, altitude metres) of the true surface at each direction (rows of any
    length are normalised first; zero or non-finite rows raise ValueError)."""
    u = np.asarray(directions, dtype=np.float64).reshape(-1, 3)
    _, slope, alt = _core.surface_attributes(fld._core, u)
    return slope, alt


def assign_layers(
    layers: Sequence[Layer], slope_deg: npt.ArrayLike, altitude_m: npt.ArrayLike
) -> U8:
    """Index of the first layer whose closed slope and altitude bands hold each vertex, else
    NO_LAYER. slope_deg, altitude_m : (N,) -> (N,) uint8."""
    s = np.ascontiguousarray(slope_deg, dtype=np.float64).reshape(-1)
    a = np.ascontiguousarray(altitude_m, dtype=np.float64).reshape(-1)
    layer, _ = _core.assign_layers(layer_rows(layers), s, a)
    return layer


def layer_palette(layers: Sequence[Layer]) -> F64:
    """(256, 3) linear RGB: row i is layer i's color, every other row NO_LAYER_COLOR."""
    pal = np.tile(np.asarray(NO_LAYER_COLOR, dtype=np.float64), (256, 1))
    for i, rule in enumerate(layers[:MAX_LAYERS]):
        pal[i] = rule.color
    return pal


def vertex_attributes(
    spec: WorldSpec, directions: npt.ArrayLike, fld: Field | None = None
) -> VertexAttributes:
    """Slope, altitude, layer and color at every direction of `directions` (N, 3)."""
    fld = fld if fld is not None else Field(spec)
    slope, alt = slope_and_altitude(fld, directions)
    layer, color = _core.assign_layers(layer_rows(spec.layers), slope, alt)
    return VertexAttributes(slope, alt, layer, color)


def layer_table(spec: WorldSpec) -> list[dict[str, Any]]:
    """The layer rules as plain data (what `_LAYER` values mean), for file metadata."""
    return [
        {
            "index": i,
            "name": rule.name,
            "color": [float(c) for c in rule.color],
            "slope_deg": [float(x) for x in rule.slope_deg],
            "altitude_m": [float(x) for x in rule.altitude_m],
        }
        for i, rule in enumerate(spec.layers)
    ]
