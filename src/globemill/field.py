"""The terrain field of a world: height and gradient at many directions at once (C++ core)."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from . import _core
from .spec import WorldSpec

FloatArray = npt.NDArray[np.float64]


class Field:
    """Height `H(u)` and its gradient over unit directions, exactly as docs/terrain.md defines.

    Directions are rows of an (N, 3) array; each row is normalised (zero or non-finite rows raise
    ValueError). The work runs in C++ with the GIL released.
    """

    def __init__(self, spec: WorldSpec) -> None:
        self.spec = spec
        self.radius_m: float = float(spec.radius_m)
        self._core = _core.Field(self.radius_m, spec.core_features())

    def height(self, directions: npt.ArrayLike) -> FloatArray:
        """directions : (N, 3) float64 -> (N,) float64 metres above `radius_m`."""
        return self._core.height(np.asarray(directions, dtype=np.float64))

    def gradient(self, directions: npt.ArrayLike) -> FloatArray:
        """directions : (N, 3) float64 -> (N, 3) float64, tangent, metres per radian."""
        return self._core.gradient(np.asarray(directions, dtype=np.float64))

    def surface(self, directions: npt.ArrayLike) -> FloatArray:
        """directions : (N, 3) -> (N, 3) ground points `(R + H(u)) u` in metres."""
        u = np.asarray(directions, dtype=np.float64)
        u = u / np.linalg.norm(u, axis=1, keepdims=True)
        return (self.radius_m + self.height(u))[:, None] * u

    def normals(self, directions: npt.ArrayLike) -> FloatArray:
        """directions : (N, 3) -> (N, 3) unit outward normals of the ground (analytic).

        The ground is the zero set of F(p) = |p| - R - H(p/|p|); its gradient at the ground point
        is u - grad H / (R + H).
        """
        normals, _, _ = _core.surface_attributes(self._core, np.asarray(directions, np.float64))
        return normals


def field(spec: WorldSpec) -> Field:
    """The terrain field of `spec`: `.height(directions)` and `.gradient(directions)`."""
    return Field(spec)
