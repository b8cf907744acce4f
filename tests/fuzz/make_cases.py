"""Write the large edge cases the sanitizer run feeds to the C ABI driver (too big to keep in the
corpus): thousands of features, nesting far past the depth limit, text past the size limit, a
million values, a long string, many keys, every problem at once.

    python tests/fuzz/make_cases.py OUTDIR
"""

from __future__ import annotations

import json
import random
import sys
from pathlib import Path


def main(out: Path) -> None:
    out.mkdir(parents=True, exist_ok=True)
    rng = random.Random(3)
    hills = [
        {
            "kind": "hill",
            "lat_deg": rng.uniform(-90, 90),
            "lon_deg": rng.uniform(-180, 180),
            "amplitude_m": rng.uniform(0.05, 0.2),
            "sigma_m": rng.uniform(5, 40),
        }
        for _ in range(3000)
    ]
    world = {"name": "many", "radius_m": 1000, "tolerance_m": 4, "features": hills}
    (out / "thousands_of_features.json").write_text(json.dumps(world))
    bad = {"name": "bad", "radius_m": 1000, "tolerance_m": 4, "features": [{"kind": "hill"}] * 5000}
    (out / "thousands_of_problems.json").write_text(json.dumps(bad))
    (out / "deep_100000.json").write_text("[" * 100000 + "]" * 100000)
    (out / "deep_objects.json").write_text('{"a":' * 5000 + "1" + "}" * 5000)
    (out / "over_size_limit.json").write_text('{"name": "' + "x" * (9 * 1024 * 1024) + '"}')
    (out / "million_values.json").write_text("[" + "0," * 1_000_000 + "0]")
    (out / "long_name.json").write_text(json.dumps({"name": "n" * 100000, "radius_m": 10}))
    keys = {f"k{i}": i for i in range(50000)}
    (out / "many_keys.json").write_text(json.dumps({"name": "k", **keys}))
    numbers = '{"name":"n","radius_m":' + "9" * 100000 + ',"tolerance_m":1e-99999}'
    (out / "long_numbers.json").write_text(numbers)


if __name__ == "__main__":
    main(Path(sys.argv[1]))
