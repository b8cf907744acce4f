"""Benchmarks are collected only when pytest is pointed at this folder (``pytest benchmarks/``).

Files named ``bench_*.py`` are collected here (the project's ``testpaths`` is ``tests``, so a
plain ``pytest`` never sees them), and the measurement helpers in ``tests/`` are importable.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

_TESTS = Path(__file__).resolve().parent.parent / "tests"
if str(_TESTS) not in sys.path:
    sys.path.insert(0, str(_TESTS))


def pytest_collect_file(file_path: Path, parent: pytest.Collector) -> pytest.Module | None:
    if file_path.suffix != ".py" or not file_path.name.startswith("bench_"):
        return None
    if parent.session.isinitpath(file_path):
        return None  # named on the command line: pytest collects it already
    return pytest.Module.from_parent(parent, path=file_path)
