"""Every benchmark script imports: a renamed module must not leave a benchmark broken until someone runs it."""
from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

BENCHMARKS = sorted((Path(__file__).resolve().parents[1] / "benchmarks").glob("*.py"))


@pytest.mark.parametrize("path", BENCHMARKS, ids=[p.stem for p in BENCHMARKS])
def test_benchmark_imports(path):
    spec = importlib.util.spec_from_file_location(f"benchmark_{path.stem}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)          # runs the imports only: every script guards its main
    assert callable(getattr(module, "main", None)), f"{path.name} has no main()"
