"""Where a bake came from: the content hash of its spec and the globemill version that baked it.

The report (`<name>.report.json`) and the scene extras of both `.glb` files carry these two
values under the keys `SPEC_HASH_KEY` and `VERSION_KEY`, so `globemill check` can tell a bake
of another spec (or of an older globemill) from a bake of the spec it is given.

The hash is SHA-256 (FIPS 180-4) of the spec's canonical form: the validated model (defaults
filled in, numbers as the model holds them) dumped to JSON with sorted keys, no spaces, UTF-8.
So two files describing the same world hash the same whatever their format (TOML or JSON), key
order, layout, comments or number spelling (400 or 400.0); any change of a value changes it.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

from . import __version__
from .spec import WorldSpec

SPEC_HASH_KEY = "spec_sha256"
VERSION_KEY = "globemill"
# hashes are shown to people by their first SHORT_HASH hex digits (64 bits)
SHORT_HASH = 16


def canonical_spec(spec: WorldSpec) -> str:
    """The spec as canonical JSON text: validated values, keys sorted, no whitespace."""
    return json.dumps(
        spec.model_dump(mode="json"),
        sort_keys=True,
        separators=(",", ":"),
        ensure_ascii=False,
        allow_nan=False,
    )


def spec_hash(spec: WorldSpec) -> str:
    """SHA-256 of `canonical_spec(spec)` encoded as UTF-8: 64 lowercase hex digits."""
    return hashlib.sha256(canonical_spec(spec).encode("utf-8")).hexdigest()


def short_hash(digest: str) -> str:
    """The first `SHORT_HASH` hex digits of a digest, for messages."""
    return digest[:SHORT_HASH]


def provenance(spec: WorldSpec) -> dict[str, Any]:
    """The metadata every output of a bake of `spec` carries: {SPEC_HASH_KEY, VERSION_KEY}."""
    return {SPEC_HASH_KEY: spec_hash(spec), VERSION_KEY: __version__}
