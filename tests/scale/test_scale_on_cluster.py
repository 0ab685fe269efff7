"""One machine vs a LocalCluster of two workers: fitted state, features and the evaluation report agree.

Every comparison is against rulefeat's own single-machine path on the same events (an EventLog of all of
them).  Times are float seconds, so equal means equal to the bit, except for the BKT parameters, whose
EM adds expected counts per partition before adding the partitions: those agree to rounding
(``rtol=1e-9``; the two-partition difference seen is about 1e-13) and take the same number of iterations.
"""

from __future__ import annotations

import json

import joblib
import numpy as np
import pandas as pd
import pytest
from _scale_data import simulated, training_windows

from rulefeat import EventLog, LogFeatures, RuleFeatures, scale
from rulefeat.evaluate.value.engine import compute_incremental_value, demo_rules_path

pytest.importorskip("distributed")
pytest.importorskip("dask.dataframe")

BKT_FAST = {"n_restarts": 2, "max_iter": 40}


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    events, windows = simulated()
    dlog = scale.write_partitioned(events, tmp_path_factory.mktemp("scale") / "events", 4)
    return EventLog(events), dlog, windows[["student", "start", "end"]], training_windows(windows)


def assert_same_state(a: dict, b: dict, where: str) -> None:
    assert a.keys() == b.keys(), where
    for key in a:
        if isinstance(a[key], np.ndarray):
            np.testing.assert_array_equal(a[key], b[key], err_msg=f"{where}: {key}")
        elif isinstance(a[key], float) and np.isnan(a[key]):
            assert np.isnan(b[key]), f"{where}: {key}"
        else:
            assert a[key] == b[key], f"{where}: {key}"


def test_rule_norms_and_rule_features_equal_one_machine(client, data):
    log, dlog, units, train = data
    rules = demo_rules_path()
    here = RuleFeatures(log, rules).fit(train)
    there = scale.fit(RuleFeatures(None, rules), dlog, train, client=client)
    assert here.program_.norms_.keys() == there.program_.norms_.keys() and here.program_.norms_
    for name in here.program_.norms_:
        assert_same_state(here.program_.norms_[name], there.program_.norms_[name], name)
    assert there.log is None and there.action_labels_ == here.action_labels_
    pd.testing.assert_frame_equal(scale.transform(there, dlog, units, client=client), here.transform(units))


def test_zscore_moments_are_summed_in_one_machine_order(client, data):
    log, dlog, units, train = data
    text = """
    [rules.slow_for_skill]
    when = "action == 'attempt' and zscore(duration, per='skill') > 1"
    [rules.slow_for_step]
    when = "action == 'attempt' and duration > typical(duration, per='step', q=0.9, among=action == 'attempt')"
    """
    here = RuleFeatures(log, text, min_count=3).fit(train)
    there = scale.fit(RuleFeatures(None, text, min_count=3), dlog, train, client=client)
    for name in here.program_.norms_:
        assert_same_state(here.program_.norms_[name], there.program_.norms_[name], name)
    pd.testing.assert_frame_equal(scale.transform(there, dlog, units, client=client), here.transform(units))


def test_mined_state_and_features_equal_one_machine(client, data):
    log, dlog, units, train = data
    options = {"random_state": 3, "bkt_options": BKT_FAST}
    here = LogFeatures(log, **options).fit(train)
    there = scale.fit(LogFeatures(None, **options), dlog, train, client=client)
    assert there.feature_names_out_ == here.feature_names_out_
    assert there.dropped_features_ == here.dropped_features_
    timing_here, timing_there = here.family_state_["timing"], there.family_state_["timing"]
    assert timing_here.pause_seconds == timing_there.pause_seconds
    for key, norm in timing_here.norms.items():
        np.testing.assert_array_equal(norm.table, timing_there.norms[key].table, err_msg=str(key))
        np.testing.assert_array_equal(norm.n_events, timing_there.norms[key].n_events)
    a, b = here.family_state_["mastery"], there.family_state_["mastery"]
    assert a.skills.equals(b.skills)
    for name in ("p_init", "p_learn", "p_guess", "p_slip", "log_likelihood"):
        np.testing.assert_allclose(getattr(b.params_, name), getattr(a.params_, name), rtol=1e-9, err_msg=name)
    np.testing.assert_array_equal(b.params_.n_attempts, a.params_.n_attempts)
    np.testing.assert_array_equal(b.params_.has_own_model, a.params_.has_own_model)
    assert {s: len(h) for s, h in b.model.ll_history_.items()} == {s: len(h) for s, h in a.model.ll_history_.items()}
    out_here, out_there = here.transform(units), scale.transform(there, dlog, units, client=client)
    mastery = [c for c in out_here.columns if c.startswith("mastery__")]
    pd.testing.assert_frame_equal(out_there.drop(columns=mastery), out_here.drop(columns=mastery))
    np.testing.assert_allclose(out_there[mastery].to_numpy(), out_here[mastery].to_numpy(), rtol=1e-9)


def _held_types(dask_worker) -> list[str]:
    return [type(value).__name__ for value in dask_worker.data.values()]


def test_no_partition_log_stays_on_a_worker_between_passes(client, data):
    _, dlog, units, train = data
    mined = scale.fit(LogFeatures(None, families=["timing", "mastery"], bkt_options=BKT_FAST), dlog, train,
                      client=client)
    scale.transform(mined, dlog, units, client=client)
    held = [name for names in client.run(_held_types).values() for name in names]
    assert "EventLog" not in held, held
    # A task of our own gets its partition's log built for it, and the log is gone once it returns.
    assert client.gather([dlog.submit(client, k, len) for k in range(dlog.n_partitions)]) == \
        [len(dlog.load(k)) for k in range(dlog.n_partitions)]
    assert "EventLog" not in [name for names in client.run(_held_types).values() for name in names]


def test_the_bkt_attempt_budget_picks_the_same_students(client, data):
    log, dlog, _, train = data
    options = {"families": ["mastery"], "random_state": 11, "bkt_max_attempts": 900,
               "bkt_options": {"n_restarts": 1, "max_iter": 25, "min_attempts": 20}}
    here = LogFeatures(log, **options).fit(train)
    there = scale.fit(LogFeatures(None, **options), dlog, train, client=client)
    a, b = here.family_state_["mastery"].params_, there.family_state_["mastery"].params_
    assert a.pooled_n_attempts == b.pooled_n_attempts <= 900
    np.testing.assert_array_equal(a.n_attempts, b.n_attempts)
    np.testing.assert_allclose(b.p_learn, a.p_learn, rtol=1e-9)


def test_dask_and_parquet_outputs_hold_the_same_rows(client, data, tmp_path):
    log, dlog, units, train = data
    fitted = scale.fit(LogFeatures(None, families=["volume", "help"]), dlog, train, client=client)
    expected = scale.transform(fitted, dlog, units, client=client)
    lazy = scale.transform(fitted, dlog, units, client=client, output="dask")
    assert lazy.npartitions == len(scale.units_by_partition(dlog, units["student"]))
    pd.testing.assert_frame_equal(lazy.compute().loc[expected.index], expected)
    folder = scale.transform(fitted, dlog, units, client=client, output="parquet", path=tmp_path / "features")
    written = pd.concat([pd.read_parquet(p) for p in sorted((tmp_path / "features").glob("*.parquet"))])
    pd.testing.assert_frame_equal(written.set_index("unit").rename_axis(None).loc[expected.index], expected)
    assert folder == tmp_path / "features"


def test_a_fitted_transformer_scores_the_same_on_the_cluster_as_bound_locally(client, data):
    log, dlog, units, train = data
    here = RuleFeatures(log, demo_rules_path()).fit(train)
    pd.testing.assert_frame_equal(scale.transform(here, dlog, units, client=client), here.transform(units))


EVALUATION = {"cv": 2, "repeats": 1, "n_boot": 30, "random_state": 0, "learning_curve": (0.5, 1.0), "ablation": False,
              "mined": {"families": ["volume", "correctness", "timing", "mastery"],
                        "bkt_options": {"n_restarts": 1, "max_iter": 15}}}


def test_the_one_machine_fold_loop_runs_on_the_cluster_through_joblib(client, data):
    log, _, _, _ = data
    _, windows = simulated()
    units = windows[["student", "start", "end", "label"]]
    options = {**EVALUATION, "transfer": False}
    here, oof_here, _ = compute_incremental_value(log, units, "label", demo_rules_path(), **options)
    distributed = pytest.importorskip("distributed")
    with joblib.parallel_config(backend="dask", client=client), distributed.get_task_stream(client) as stream:
        there, oof_there, _ = compute_incremental_value(log, units, "label", demo_rules_path(), n_jobs=2, **options)
    assert any(name in str(task["key"]) for task in stream.data for name in ("run_task", "run_chunk")), "the folds did not run as cluster tasks"
    for results in (here, there):
        results.pop("timing")
    assert json.dumps(there, sort_keys=True, default=str) == json.dumps(here, sort_keys=True, default=str)
    pd.testing.assert_frame_equal(oof_there, oof_here)


def test_the_evaluation_report_equals_one_machine(client, data):
    log, dlog, _, _ = data
    _, windows = simulated()
    units = windows[["student", "start", "end", "label"]]
    options = EVALUATION
    # One machine runs the folds one after another; the cluster runs two fold tasks at once.
    here, oof_here, transfer_here = compute_incremental_value(log, units, "label", demo_rules_path(), **options)
    distributed = pytest.importorskip("distributed")
    with distributed.get_task_stream(client) as stream:
        there, oof_there, transfer_there = scale.evaluate.compute_incremental_value(
            dlog, units, "label", demo_rules_path(), client=client, n_jobs=2, **options)
    assert any(name in str(task["key"]) for task in stream.data for name in ("run_task", "run_chunk")), "the folds did not run as cluster tasks"
    for results in (here, there):
        results.pop("timing")
    assert json.dumps(there, sort_keys=True, default=str) == json.dumps(here, sort_keys=True, default=str)
    pd.testing.assert_frame_equal(oof_there, oof_here)
    pd.testing.assert_frame_equal(transfer_there, transfer_here)  # folds holding out each school


def test_datetime_times_agree_to_rounding_of_the_time_axis(client, tmp_path):
    from rulefeat.simulate import tutor_logs
    sim = tutor_logs(16, seed=9)
    log = EventLog(sim.events)
    dlog = scale.write_partitioned(sim.events, tmp_path / "dated", 3)
    units = sim.windows[["student", "start", "end"]]
    here = LogFeatures(log, families=["volume", "timing", "sequence"]).fit(units)
    there = scale.transform(here, dlog, units, client=client)
    # Each partition counts seconds from its own earliest event (docs/scale.md), so only rounding differs.
    np.testing.assert_allclose(there.to_numpy(), here.transform(units).to_numpy(), rtol=1e-9, atol=1e-6)


def test_bad_inputs_are_refused_by_name(client, data, tmp_path):
    from rulefeat.errors import ParameterError, UnitError
    log, dlog, units, train = data
    with pytest.raises(ParameterError, match="must be a RuleFeatures or LogFeatures. Got str"):
        scale.fit("rules", dlog, train, client=client)
    with pytest.raises(UnitError, match="X has no 'student' column"):
        scale.fit(RuleFeatures(None, demo_rules_path()), dlog, train.rename(columns={"student": "who"}),
                  client=client)
    with pytest.raises(UnitError, match="none of the students in X is in the event log"):
        scale.fit(RuleFeatures(None, demo_rules_path()), dlog, train.assign(student="nobody"), client=client)
    fitted = RuleFeatures(log, demo_rules_path()).fit(train)
    with pytest.raises(ParameterError, match="'fitted' must be a fitted RuleFeatures or LogFeatures"):
        scale.transform(RuleFeatures(None, demo_rules_path()), dlog, units, client=client)
    with pytest.raises(ParameterError, match="'output' parameter of rulefeat.scale.transform"):
        scale.transform(fitted, dlog, units, client=client, output="csv")
    with pytest.raises(ParameterError, match="needs path="):
        scale.transform(fitted, dlog, units, client=client, output="parquet")
    with pytest.raises(UnitError, match="not in the event log"):
        scale.transform(fitted, dlog, units.assign(student="nobody"), client=client)
    with pytest.raises(UnitError, match="rows name students that are not in the event log"):
        scale.evaluate.compute_incremental_value(dlog, units.assign(student="nobody", label=np.arange(len(units)) % 2),
                                                 "label",
                                                 demo_rules_path(), client=client)
