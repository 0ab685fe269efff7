"""The fit-time feature budget, the Aggregator methods the mined families added, and the docstring example."""

from __future__ import annotations

import doctest

import numpy as np
import pytest
from scipy.stats import spearmanr

import rulefeat.mined.transformer as log_features
from rulefeat._aggregate import Aggregator
from rulefeat.errors import UnitError
from rulefeat.mined.select import is_constant, score, select
from rulefeat.units import UnitIndex


# ----------------------------------------------------------------------------- select
def test_constant_duplicate_and_nan_handling():
    cols = {
        "a": np.array([1.0, 2.0, np.nan, 4.0]),
        "b": np.array([5.0, 5.0, 5.0, 5.0]),                # constant
        "c": np.array([np.nan] * 4),                        # constant (all NaN)
        "d": np.array([1.0, 2.0, np.nan, 4.0]),            # duplicate of a
        "e": np.array([3.0, 3.0, np.nan, 3.0]),            # not constant: NaN carries information
        "f": np.array([-0.0, 1.0, 1.0, 1.0]),
        "g": np.array([0.0, 1.0, 1.0, 1.0]),                # duplicate of f (-0.0 == 0.0)
    }
    out = select(cols)
    assert out.kept == ["a", "e", "f"]
    assert out.dropped == {"b": "constant on the training units", "c": "constant on the training units",
                           "d": "duplicate of 'a' on the training units",
                           "g": "duplicate of 'f' on the training units"}
    assert select(cols, prune=False).kept == list(cols)
    assert is_constant(np.array([2.0])) and not is_constant(np.array([2.0, np.nan]))


def test_budget_with_y_uses_absolute_spearman():
    rng = np.random.default_rng(0)
    y = rng.integers(0, 2, 200)
    cols = {"noise": rng.random(200), "neg": -y + rng.random(200) * 0.5, "pos": y + rng.random(200)}
    out = select(cols, y=y, max_features=2)
    assert out.kept == ["neg", "pos"]
    # Spearman from scipy as the outside reference.
    assert out.scores["pos"] == pytest.approx(abs(spearmanr(cols["pos"], y).statistic))
    assert "rank 3" in out.dropped["noise"] and "|Spearman correlation| with y" in out.dropped["noise"]


def test_budget_multiclass_takes_best_one_vs_rest():
    y = np.array(["a", "b", "c"] * 20)
    flag_c = (y == "c").astype(float)
    cols = {"c_detector": flag_c + np.linspace(0, 0.1, 60), "ramp": np.linspace(0, 1, 60)}
    out = select(cols, y=y, max_features=1)
    assert out.kept == ["c_detector"]
    assert out.scores["c_detector"] == pytest.approx(abs(spearmanr(cols["c_detector"], flag_c).statistic))


def test_budget_without_y_prefers_distinct_values_and_breaks_ties_by_name():
    many = np.arange(10.0)
    cols = {"z_distinct": many, "a_distinct": many[::-1] * 2, "ties": np.array([0.0] * 5 + [1.0] * 5)}
    out = select(cols, max_features=2, prune=False)
    assert out.kept == ["z_distinct", "a_distinct"]
    assert score(many, None) == pytest.approx(1.0)
    # Two tied blocks of 5: mid-ranks 3 and 8, variance 6.25 over the maximum (100 - 1) / 12.
    assert score(cols["ties"], None) == pytest.approx(6.25 / (99 / 12))
    same = select({"b": many, "a": many + 1, "c": many + 2}, max_features=1, prune=False)
    assert same.kept == ["a"]


def test_budget_checks_y_length():
    with pytest.raises(UnitError, match=r"one label per row of X \(3 rows\)"):
        select({"a": np.arange(3.0), "b": np.arange(3.0) ** 2}, y=np.zeros(4), max_features=1)


# ----------------------------------------------------------------------------- Aggregator additions
def index_of(sizes, events) -> UnitIndex:
    indptr = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    return UnitIndex(indptr=indptr, events=np.asarray(events, dtype=np.int64),
                     start_time=np.zeros(len(sizes)), students=np.zeros(len(sizes), dtype=np.int64))


def test_pair_counts_only_pair_log_neighbours_within_a_unit():
    # Unit 0 covers events 0, 1, 2, 4 (3 -> 4 is not a pair: event 3 is outside); unit 1 covers 2, 3.
    agg = Aggregator(index_of([4, 2, 0], [0, 1, 2, 4, 2, 3]), np.arange(5.0))
    tokens = np.array([0, 1, 1, 0, 1])
    counts = agg.pair_counts(tokens, 2)
    assert counts.tolist() == [[0, 1, 0, 1], [0, 0, 1, 0], [0, 0, 0, 0]]


def test_code_spans_distinct_and_masked_nunique():
    agg = Aggregator(index_of([4, 3], [0, 1, 2, 3, 3, 4, 5]), np.arange(6.0))
    codes = np.array([2, -1, 2, 0, 1, 1])
    units, code, first, last = agg.code_spans(codes)
    assert units.tolist() == [0, 0, 1, 1] and code.tolist() == [0, 2, 0, 1]
    assert first.tolist() == [3, 0, 4, 5] and last.tolist() == [3, 2, 4, 6]
    assert agg.nunique(codes, mask=np.array([1, 1, 0, 1, 1, 1], dtype=bool)).tolist() == [2.0, 2.0]
    assert agg.unit_mean(np.array([0, 0, 1]), np.array([1.0, 3.0, np.nan])).tolist()[0] == 2.0


def test_longest_run_among_skips_other_events():
    agg = Aggregator(index_of([5, 0], [0, 1, 2, 3, 4]), np.arange(5.0))
    wrong = np.array([1, 0, 1, 0, 0], dtype=bool)
    judged = np.array([1, 0, 1, 1, 0], dtype=bool)
    assert agg.longest_run(wrong).tolist() == [1.0, 0.0]
    assert agg.longest_run(wrong, among=judged).tolist() == [2.0, 0.0]


def test_describe_equals_numpy():
    agg = Aggregator(index_of([4, 1, 0], [0, 1, 2, 3, 4]), np.arange(5.0))
    values = np.array([3.0, np.nan, 1.0, 8.0, 2.0])
    got = agg.describe(values, ("mean", "median", "max", "std", "sum"))
    assert got["mean"][0] == pytest.approx(4.0) and got["median"][0] == 3.0 and got["max"][0] == 8.0
    assert got["std"][0] == pytest.approx(np.std([3.0, 1.0, 8.0], ddof=1)) and np.isnan(got["std"][1])
    assert got["sum"].tolist()[2] == 0.0 and np.isnan(got["median"][2])
    with pytest.raises(ValueError, match="unknown statistic 'mode'"):
        agg.stat(values, "mode")


def test_docstring_example_runs():
    assert doctest.testmod(log_features).failed == 0
