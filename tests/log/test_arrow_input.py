"""Arrow and polars tables as events and units: the same log and the same features as the pandas path."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import rulefeat
from rulefeat.simulate import tutor_logs
from rulefeat.units import as_unit

pa = pytest.importorskip("pyarrow")
pl = pytest.importorskip("polars")

ROOT = Path(__file__).resolve().parents[2]
RULES = rulefeat.RuleSet.from_toml(ROOT / "rulefeat" / "data" / "demo_rules.toml")


@pytest.fixture(scope="module")
def data():
    return tutor_logs(n_students=24, seed=5, windows_per_student=4)


class StreamOnly:
    """An object that offers nothing but the Arrow PyCapsule stream interface (like many Arrow producers)."""

    def __init__(self, table):
        self._table = table

    def __arrow_c_stream__(self, requested_schema=None):
        return self._table.__arrow_c_stream__(requested_schema)


def _forms(frame: pd.DataFrame) -> dict:
    table = pa.Table.from_pandas(frame, preserve_index=False)
    return {"pyarrow": table, "record batch": table.combine_chunks().to_batches()[0],
            "polars": pl.from_pandas(frame), "polars lazy": pl.from_pandas(frame).lazy(),
            "arrow stream": StreamOnly(table)}


def _same_log(a: rulefeat.EventLog, b: rulefeat.EventLog) -> None:
    assert a.summary() == b.summary()
    assert a.fields == b.fields
    for name in a.fields:
        assert a.kind(name) == b.kind(name), name
        np.testing.assert_array_equal(a.values(name), b.values(name), err_msg=name)
        if a.kind(name) == "category":
            assert a.categories(name).astype(str).tolist() == b.categories(name).astype(str).tolist(), name
    np.testing.assert_array_equal(a.row_numbers, b.row_numbers)


def test_event_log_from_arrow_and_polars_equals_pandas(data):
    reference = rulefeat.EventLog(data.events)
    for form, table in _forms(data.events).items():
        try:
            _same_log(reference, rulefeat.EventLog(table))
        except AssertionError as exc:
            raise AssertionError(f"{form}: {exc}") from exc


def test_csv_read_by_pandas_and_polars_gives_the_same_log(data, tmp_path):
    # the path a polars user takes: polars reads the file, rulefeat takes the frame
    file = tmp_path / "events.csv"
    data.events.to_csv(file, index=False)
    _same_log(rulefeat.EventLog(pd.read_csv(file)), rulefeat.EventLog(pl.read_csv(file)))


def test_columns_mapping_and_errors_work_on_polars(data):
    renamed = pl.from_pandas(data.events).rename({"student": "learner"})
    log = rulefeat.EventLog(renamed, columns={"student": "learner"})
    assert log.n_students == 24
    with pytest.raises(rulefeat.LogSchemaError, match="required field 'student'"):
        rulefeat.EventLog(renamed)


def test_units_from_arrow_and_polars_resolve_and_featurize_the_same(data):
    log = rulefeat.EventLog(data.events)
    X = data.windows[["student", "start", "end"]]
    reference = as_unit("window").resolve(log, X)
    rules_ref = rulefeat.RuleFeatures(rules=RULES, log=log).fit(X)
    mined_ref = rulefeat.LogFeatures(log, random_state=0).fit(X)
    expected_rules, expected_mined = rules_ref.transform(X), mined_ref.transform(X)
    for form, units in _forms(X).items():
        index = as_unit("window").resolve(log, units)
        np.testing.assert_array_equal(index.indptr, reference.indptr, err_msg=form)
        np.testing.assert_array_equal(index.events, reference.events, err_msg=form)
        got = rulefeat.RuleFeatures(rules=RULES, log=log).fit(units).transform(units)
        pd.testing.assert_frame_equal(got.reset_index(drop=True), expected_rules.reset_index(drop=True))
        pd.testing.assert_frame_equal(rules_ref.transform(units).reset_index(drop=True),
                                      expected_rules.reset_index(drop=True))
        got = rulefeat.LogFeatures(log, random_state=0).fit_transform(units)
        pd.testing.assert_frame_equal(got.reset_index(drop=True), expected_mined.reset_index(drop=True))
        pd.testing.assert_frame_equal(mined_ref.transform(units).reset_index(drop=True),
                                      expected_mined.reset_index(drop=True))


def test_polars_units_in_incremental_value(data):
    log = rulefeat.EventLog(data.events)
    units = data.windows[["student", "start", "end", "label"]]
    kwargs = dict(cv=3, n_boot=20, learning_curve=None, ablation=False, transfer=False, random_state=0, n_jobs=1,
                  repeats=1)
    a = rulefeat.incremental_value(log, units, "label", RULES, **kwargs)
    b = rulefeat.incremental_value(log, pl.from_pandas(units), "label", RULES, **kwargs)
    assert a.to_json() == b.to_json()


def test_pyarrow_and_polars_are_not_imported_at_module_level():
    # optional dependencies: no module of the package imports them when it is imported
    for path in (ROOT / "rulefeat").rglob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in tree.body:
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                names = [node.module or ""]
            assert not any(n.split(".")[0] in ("pyarrow", "polars") for n in names), path.name
    out = subprocess.run([sys.executable, "-c", "import sys, rulefeat, rulefeat.cli; print('polars' in sys.modules)"],
                         capture_output=True, text=True, env={"PYTHONPATH": str(ROOT), "PATH": ""}, check=True)
    assert out.stdout.strip() == "False"
