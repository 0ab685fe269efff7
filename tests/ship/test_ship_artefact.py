"""The saved detector format: a zip with manifest.json and detector.joblib, checked before unpickling."""

import hashlib
import json
import zipfile

import numpy as np
import pytest
from _ship_data import KEYS, fitted_detector, quiet_log, rules, simulated

import rulefeat
from rulefeat.errors import DetectorFileError, LogSchemaError, ParameterError, RulefeatWarning
from rulefeat.evaluate.value.engine import demo_rules_path


@pytest.fixture(scope="module")
def shipped(tmp_path_factory):
    events, windows = simulated(40, seed=31)
    new_events, new_windows = simulated(12, seed=32, prefix="stu-NEW")
    log = quiet_log(events)
    detector = fitted_detector(log, windows)
    path = tmp_path_factory.mktemp("ship") / "detector.zip"
    summary = {"effect": "made up for the test", "rules_hash": rules().text_hash()}
    rulefeat.save_detector(detector, path, evaluation=summary)
    return {"log": log, "detector": detector, "path": path, "new_log": quiet_log(new_events),
            "new_windows": new_windows, "new_events": new_events}


def _rewrite(src, dst, *, manifest=None, payload=None):
    with zipfile.ZipFile(src) as zf:
        members = {n: zf.read(n) for n in zf.namelist()}
    if manifest is not None:
        members["manifest.json"] = json.dumps(manifest(json.loads(members["manifest.json"]))).encode()
    if payload is not None:
        members["detector.joblib"] = payload(members["detector.joblib"])
    with zipfile.ZipFile(dst, "w") as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    return dst


def test_round_trip_scores_a_new_log_like_the_fitted_detector(shipped):
    loaded = rulefeat.load_detector(shipped["path"])
    X = shipped["new_windows"][KEYS]
    expected = rulefeat.bind(shipped["detector"], shipped["new_log"]).predict_proba(X)[:, 1]
    np.testing.assert_array_equal(loaded.score(shipped["new_log"], X), expected)
    np.testing.assert_array_equal(loaded.bind(shipped["new_log"]).predict_proba(X)[:, 1], expected)
    assert repr(loaded).startswith("SavedDetector(LGBMClassifier, unit='window', ")


def test_the_file_holds_no_student_id(shipped):
    with zipfile.ZipFile(shipped["path"]) as zf:
        data = b"".join(zf.read(n) for n in zf.namelist())
    assert b"stu-ZQ81" not in data
    assert len(shipped["path"].read_bytes()) < 2_000_000


def test_manifest_fields(shipped):
    m = rulefeat.read_manifest(shipped["path"])
    with zipfile.ZipFile(shipped["path"]) as zf:
        payload = zf.read("detector.joblib")
    assert m["format"] == "rulefeat-detector" and m["format_version"] == 1
    assert m["payload"] == {"file": "detector.joblib", "sha256": hashlib.sha256(payload).hexdigest(),
                            "bytes": len(payload)}
    assert m["versions"]["rulefeat"] == rulefeat.__version__
    assert {"numpy", "pandas", "scikit-learn", "lightgbm", "python"} <= set(m["versions"])
    (entry,) = m["rules"]
    assert entry["sha256"] == rules().text_hash() and entry["text"] == rules().to_toml()
    assert entry["names"] == list(rules().names)
    fields = m["schema"]["fields"]
    assert fields["student"] == "category" and fields["time"] == "number" and fields["skill"] == "category"
    assert m["schema"]["action_labels"] == ["attempt", "hint"] and m["schema"]["time_kind"] == "datetime"
    assert m["detector"]["unit"] == {"name": "window", "keys": KEYS}
    assert m["detector"]["task"] == "classification" and m["detector"]["classes"] == [0, 1]
    names = list(shipped["detector"][:-1].get_feature_names_out())
    assert m["detector"]["features"] == names and any(n.startswith("rules__") for n in names)
    assert m["evaluation"]["effect"] == "made up for the test"


def test_a_changed_payload_is_refused_before_unpickling(shipped, tmp_path):
    bad = _rewrite(shipped["path"], tmp_path / "bad.zip", payload=lambda b: b[:-10] + b"0123456789")
    with pytest.raises(DetectorFileError, match=r"content hash of 'detector.joblib' .* is [0-9a-f]{64}, but its "
                                                r"manifest records [0-9a-f]{64}: the file was changed or damaged"):
        rulefeat.load_detector(bad)


def test_a_pinned_hash_catches_a_rewritten_manifest(shipped, tmp_path):
    recorded = rulefeat.read_manifest(shipped["path"])["payload"]["sha256"]
    assert rulefeat.load_detector(shipped["path"], sha256=recorded).sha256 == recorded

    def forge(m):
        m["payload"]["sha256"] = hashlib.sha256(b"other").hexdigest()
        return m
    forged_payload = _rewrite(shipped["path"], tmp_path / "forged.zip", payload=lambda b: b"other", manifest=forge)
    with pytest.raises(DetectorFileError, match="not the expected"):
        rulefeat.load_detector(forged_payload, sha256=recorded)


def test_not_a_detector_file_and_newer_formats(shipped, tmp_path):
    text = tmp_path / "notes.zip"
    text.write_text("hello")
    with pytest.raises(DetectorFileError, match="is not a rulefeat detector file \\(not a zip archive\\)"):
        rulefeat.load_detector(text)
    with pytest.raises(DetectorFileError, match="no file at"):
        rulefeat.load_detector(tmp_path / "missing.zip")

    def newer(m):
        m["format_version"] = 99
        return m
    with pytest.raises(DetectorFileError, match="format version 99; this rulefeat reads up to 1"):
        rulefeat.load_detector(_rewrite(shipped["path"], tmp_path / "newer.zip", manifest=newer))


def test_other_dependency_versions_warn_and_say_which(shipped, tmp_path):
    def older(m):
        m["versions"]["scikit-learn"] = "0.0.1"
        return m
    path = _rewrite(shipped["path"], tmp_path / "older.zip", manifest=older)
    with pytest.warns(RulefeatWarning, match=r"saved with other versions: scikit-learn 0\.0\.1 \(saved\) vs "):
        rulefeat.load_detector(path)


def test_schema_mismatch_is_refused_at_bind_listing_what_differs(shipped):
    loaded = rulefeat.load_detector(shipped["path"])
    events = shipped["new_events"].drop(columns=["problem"]).assign(hint_level="x")
    with pytest.raises(LogSchemaError, match=r"SavedDetector.bind: .*field 'hint_level' is a category field, the "
                                             r"detector expects number; field 'problem' \(category\) is missing"):
        loaded.bind(quiet_log(events))
    other_actions = shipped["new_events"].copy()
    other_actions["action"] = other_actions["action"].astype(str)
    other_actions.loc[other_actions.index[:3], "action"] = "video"
    with pytest.warns(RulefeatWarning, match=r"action kinds the training log had not: \['video'\]"):
        loaded.bind(quiet_log(other_actions))


def test_save_refuses_unfitted_detectors_and_existing_files(shipped, tmp_path):
    unfitted = rulefeat.make_detector(shipped["log"], rules())
    with pytest.raises(ParameterError, match="the detector is not fitted"):
        rulefeat.save_detector(unfitted, tmp_path / "u.zip")
    with pytest.raises(ParameterError, match="exists; pass overwrite=True"):
        rulefeat.save_detector(shipped["detector"], shipped["path"])
    with pytest.warns(RulefeatWarning, match="evaluation was run with other rules"):
        rulefeat.save_detector(shipped["detector"], tmp_path / "o.zip", evaluation={"rules_hash": "abc"})
    with pytest.raises(ParameterError, match="'evaluation' parameter of save_detector must be"):
        rulefeat.save_detector(shipped["detector"], tmp_path / "e.zip", evaluation=3)


def test_evaluation_report_headline_goes_into_the_manifest(shipped, tmp_path):
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    events, windows = simulated(24, seed=33)
    log = quiet_log(events)
    X, y = windows[KEYS].reset_index(drop=True), windows["label"].to_numpy()
    model = make_pipeline(StandardScaler(), LogisticRegression())
    demo = demo_rules_path()
    report = rulefeat.incremental_value(log, X, y, demo, model=model, mined={"families": ["volume"]}, cv=3,
                                        n_boot=50, learning_curve=None, ablation=False, transfer=False,
                                        random_state=0, repeats=1)
    detector = rulefeat.make_detector(log, demo, model=model, mined={"families": ["volume"]},
                                      random_state=0).fit(X, y)
    path = rulefeat.save_detector(detector, tmp_path / "r.zip", evaluation=report)
    headline = rulefeat.read_manifest(path)["evaluation"]
    assert headline["effect"] == report.effect() and headline["primary_metric"] == "auc"
    assert [row["variant"] for row in headline["summary"]] == ["mined", "rules", "combined"]
    assert headline["rules_hash"] == rulefeat.read_manifest(path)["rules"][0]["sha256"]


class _Remembers:
    """A final step that stores the training students' ids (what the saving guard must catch)."""

    def __init__(self, ids):
        self.ids = list(ids)
        self.classes_ = np.array([0, 1])

    def predict_proba(self, Z):
        return np.tile([0.5, 0.5], (len(Z), 1))


def test_saving_warns_when_a_step_stores_student_ids(shipped, tmp_path):
    from sklearn.pipeline import Pipeline

    detector = shipped["detector"]
    leaky = Pipeline([detector.steps[0], ("model", _Remembers(shipped["log"].students))])
    with pytest.warns(RulefeatWarning, match=r"contains text equal to 40 student id\(s\) of the log it was bound to"):
        rulefeat.save_detector(leaky, tmp_path / "leaky.zip")


def test_a_saved_transformer_gives_features_not_scores(shipped, tmp_path):
    rf = shipped["detector"].named_steps["features"].transformer_list[1][1]
    path = rulefeat.save_detector(rf, tmp_path / "rules_only.zip")
    loaded = rulefeat.load_detector(path)
    assert loaded.manifest["detector"]["task"] is None
    X = shipped["new_windows"][KEYS]
    with pytest.raises(ParameterError, match="has no model to predict with"):
        loaded.score(shipped["new_log"], X)
    expected = rulefeat.bind(rf, shipped["new_log"]).transform(X)
    assert loaded.bind(shipped["new_log"]).transform(X).equals(expected)
