"""Without the dask extra the core works, and the cluster path says which extra to install."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest
from _scale_data import simulated

from rulefeat import MissingExtraError, RulefeatError, RuleFeatures, scale
from rulefeat.errors import ParameterError
from rulefeat.evaluate.value.engine import demo_rules_path


@pytest.mark.parametrize("hidden", ["fsspec", "pyarrow.parquet"])
def test_writing_without_the_extra_names_it(monkeypatch, tmp_path, hidden):
    events, _ = simulated(12)
    monkeypatch.setitem(sys.modules, hidden, None)  # a None entry makes `import hidden` fail
    with pytest.raises(MissingExtraError, match=r'pip install "rulefeat\[dask\]"') as info:
        dlog = scale.write_partitioned(events, tmp_path / "ds", 2)
        dlog.load(0)
    assert isinstance(info.value, RulefeatError) and isinstance(info.value, ImportError)


def test_the_cluster_functions_without_distributed_name_the_extra(monkeypatch, tmp_path):
    events, windows = simulated(12)
    dlog = scale.write_partitioned(events, tmp_path / "ds", 2)
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(MissingExtraError, match="'distributed', which is not installed"):
        scale.fit(object(), dlog, windows)


def test_no_cluster_to_run_on_is_a_parameter_error(monkeypatch, tmp_path):
    distributed = pytest.importorskip("distributed")
    events, windows = simulated(12)
    dlog = scale.write_partitioned(events, tmp_path / "ds", 2)

    def no_client():  # what distributed.default_client raises when no client exists in the process
        raise ValueError("No clients found")

    # Other test modules may leave a client in this process; the answer to "no client" must not depend on them.
    monkeypatch.setattr(distributed, "default_client", no_client)
    with pytest.raises(ParameterError, match="no dask cluster to run on"):
        scale.fit(RuleFeatures(None, demo_rules_path()), dlog, windows)


def test_the_core_imports_and_fits_when_dask_cannot_be_imported():
    # A fresh interpreter in which importing dask, distributed, fsspec or pyarrow fails.
    code = textwrap.dedent("""
        import importlib.abc, sys
        class Block(importlib.abc.MetaPathFinder):
            def find_spec(self, name, path=None, target=None):
                if name.split(".")[0] in {"dask", "distributed", "fsspec", "pyarrow"}:
                    raise ImportError(f"blocked {name}")
                return None
        sys.meta_path.insert(0, Block())
        import pandas as pd
        import rulefeat, rulefeat.scale
        from rulefeat import EventLog, Rule, RuleFeatures
        log = EventLog(pd.DataFrame({"student": ["a", "a", "b"], "time": [0.0, 1.0, 0.0],
                                     "action": ["hint", "hint", "attempt"]}))
        quick = Rule("quick", when="action == 'hint' and gap < 3s")
        out = RuleFeatures(log, [quick], unit="student").fit_transform(pd.DataFrame({"student": ["a", "b"]}))
        assert out.shape == (2, 3), out
        assert not any(m.split(".")[0] in {"dask", "distributed"} for m in sys.modules)
        try:
            rulefeat.scale.write_partitioned(log, "unused", 2)
        except rulefeat.MissingExtraError as exc:
            assert 'pip install "rulefeat[dask]"' in str(exc)
            print("ok")
    """)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().endswith("ok")
