"""Quantized positions and normals for KHR_mesh_quantization, only within a share of the tolerance.

Positions: every vertex of the world is rounded to one grid of step `s` metres (a power of two,
the smallest that lets every chunk's vertices fit int16 around its own grid point), stored as
int16 (SHORT, not normalized) offsets from the chunk's grid point `c`; the node carries
`translation = s·c` and `scale = s`. Because `s` is a power of two and `|c + q| < 2^24`, a float32
transform `s·q + s·c` is exact, so a vertex that two chunks (or a chunk and its coarser neighbour)
share lands on the same point in both: stitched seams stay closed. The worst rounding error is
measured (not bounded from the step) against the core's float64 positions.

Normals: int8 normalized (BYTE), rounded to nearest per component; the worst angle is reported.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

# a quantized level's worst rounding error stays within this share of its tolerance by default
QUANTIZE_SHARE = 0.1
_I16 = 32767
_F32_EXACT = 2**24


@dataclass
class QuantizedMesh:
    """positions : (n, 3) int16 offsets; origin : (3,) int64 grid point; normals : (n, 3) int8"""

    positions: npt.NDArray[np.int16]
    origin: npt.NDArray[np.int64]
    normals: npt.NDArray[np.int8]


def grid_step(positions: Sequence[npt.NDArray[np.float64]]) -> float:
    """The smallest power of two s (metres) for which every mesh's vertices, rounded to the grid
    s·Z³, fit int16 offsets around the grid point nearest its bounding-box centre."""
    half = 0.0
    for p in positions:
        if len(p):
            half = max(half, float(np.max(np.ptp(p, axis=0))) / 2.0)
    # half/s + 1 (the centre's rounding) + 1/2 (the vertex's) <= 32767
    s = 2.0 ** math.ceil(math.log2(max(half, 1e-30) / (_I16 - 2)))
    while half / s + 1.5 > _I16:
        s *= 2.0
    return s


def quantize(
    positions: npt.NDArray[np.float64], normals: npt.NDArray[np.float64], step: float
) -> QuantizedMesh:
    g = np.rint(positions / step).astype(np.int64)
    lo, hi = (g.min(axis=0), g.max(axis=0)) if len(g) else (np.zeros(3, np.int64),) * 2
    origin = (lo + hi) // 2
    q = g - origin
    if len(q) and (np.abs(q).max() > _I16 or np.abs(g).max() >= _F32_EXACT):
        raise ValueError(f"quantization: step {step} m leaves a vertex outside int16 or float32")
    n = np.clip(np.rint(normals * 127.0), -127, 127).astype(np.int8)
    return QuantizedMesh(q.astype(np.int16), origin, n)


def position_error(positions: npt.NDArray[np.float64], qm: QuantizedMesh, step: float) -> float:
    """Largest distance (m) between a vertex and its quantized position, s·(c + q)."""
    if not len(positions):
        return 0.0
    back = step * (qm.origin + qm.positions.astype(np.int64))
    return float(np.linalg.norm(back - positions, axis=1).max())


def normal_error_deg(normals: npt.NDArray[np.float64], qm: QuantizedMesh) -> float:
    """Largest angle (degrees) between a unit normal and its int8 one, max(c / 127, -1)
    (glTF 2.0 normalized signed byte), renormalized as a renderer does."""
    if not len(normals):
        return 0.0
    back = np.maximum(qm.normals.astype(np.float64) / 127.0, -1.0)
    back /= np.linalg.norm(back, axis=1, keepdims=True)
    cos = np.clip(np.sum(back * normals, axis=1), -1.0, 1.0)
    return float(np.degrees(np.arccos(cos)).max())
