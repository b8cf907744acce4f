"""Warnings about a valid spec that probably does not say what its author meant.

Today: layer rules that leave part of the ground uncovered (it gets the no-layer color and
_LAYER = NO_LAYER). The share is measured on the true surface at equal-area sample directions
(a Fibonacci lattice: Gonzalez 2010, "Measurement of areas on a sphere using Fibonacci and
latitude-longitude lattices"), so it does not depend on a bake.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import numpy.typing as npt

from .attributes import NO_LAYER, assign_layers, slope_and_altitude
from .field import Field
from .spec import WorldSpec

SAMPLES = 20_000
# uncovered ground below this share is not worth a warning (a few sample points on a crease)
WARN_SHARE = 0.005


def fibonacci_directions(n: int) -> npt.NDArray[np.float64]:
    """(n, 3) unit directions of the Fibonacci lattice, each standing for an equal area:
    z_i = 1 - (2i + 1)/n, longitude i * golden angle (Gonzalez 2010)."""
    i = np.arange(n, dtype=np.float64)
    y = 1.0 - (2.0 * i + 1.0) / n
    r = np.sqrt(np.maximum(0.0, 1.0 - y * y))
    phi = i * math.pi * (3.0 - math.sqrt(5.0))
    return np.stack([r * np.sin(phi), y, r * np.cos(phi)], axis=1)


def layer_coverage(spec: WorldSpec, samples: int = SAMPLES) -> dict[str, Any]:
    """Share of the ground (by area) each layer rule takes, and the uncovered share with the
    slope and altitude ranges found there."""
    u = fibonacci_directions(samples)
    slope, alt = slope_and_altitude(Field(spec), u)
    layer = assign_layers(spec.layers, slope, alt)
    counts = np.bincount(layer, minlength=256) / samples
    bare = layer == NO_LAYER
    out: dict[str, Any] = {
        "layers": {rule.name: float(counts[i]) for i, rule in enumerate(spec.layers)},
        "uncovered": float(counts[NO_LAYER]),
    }
    if bare.any():
        out["uncovered_slope_deg"] = [float(slope[bare].min()), float(slope[bare].max())]
        out["uncovered_altitude_m"] = [float(alt[bare].min()), float(alt[bare].max())]
    return out


def warnings_for(spec: WorldSpec) -> list[str]:
    """Plain-words warnings about `spec` (empty when there is nothing to say)."""
    out = []
    if spec.layers:
        cov = layer_coverage(spec)
        if cov["uncovered"] >= WARN_SHARE:
            s0, s1 = cov["uncovered_slope_deg"]
            a0, a1 = cov["uncovered_altitude_m"]
            out.append(
                f"layers: no rule covers {100 * cov['uncovered']:.0f}% of the ground (slopes "
                f"{s0:.3g} to {s1:.3g} degrees, altitudes {a0:.4g} to {a1:.4g} m there); it gets "
                f"no layer (_LAYER {NO_LAYER}) and the grey no-layer color. Widen a rule's "
                "slope_deg or altitude_m band, or add a catch-all last rule"
            )
    return out
