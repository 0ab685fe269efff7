"""xAPI statements -> EventLog.

The statements are written by hand after the examples and rules of the Experience API specification,
xAPI 1.0.3 (ADL), the text standardised as IEEE 9274.1.1; sections are named beside each check.  The
section numbers and example values are from memory of the 1.0.3 "Data" part (no copy of the text was at
hand); the SHA-1 test vector is from FIPS 180-2, Appendix A.1.
"""

from __future__ import annotations

import hashlib
import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

import rulefeat
from rulefeat.errors import LogRepairWarning, LogSchemaError
from rulefeat.log.xapi import VOIDED_VERB, XapiMapping, parse_duration, read_xapi, xapi_events

ANSWERED = "http://adlnet.gov/expapi/verbs/answered"
HINT = "https://example.org/xapi/verbs/asked-for-hint"  # a verb of our own (example.org is reserved)
HINT_MAPPING = f'[actions]\n"{HINT}" = "hint"\n'


def statement(n, *, verb=ANSWERED, actor=None, success=True, duration="PT5S", time=None, **extra):
    out = {"id": f"00000000-0000-4000-8000-{n:012d}",
           "actor": actor or {"objectType": "Agent", "account": {"homePage": "http://www.example.com",
                                                                 "name": "1625378"}},
           "verb": {"id": verb, "display": {"en-US": verb.rsplit("/", 1)[-1]}},
           "object": {"objectType": "Activity", "id": "https://example.org/activities/fractions/p1/step-1"},
           "context": {"contextActivities": {"parent": [{"id": "https://example.org/activities/fractions/p1"}]}},
           "timestamp": time or f"2031-03-01T09:00:{n:02d}Z"}
    result = {k: v for k, v in (("success", success), ("duration", duration)) if v is not None}
    if result:
        out["result"] = result
    out.update(extra)
    return out


# -- durations: xAPI 1.0.3, Data section 4.6 "ISO 8601 Durations" (from memory) ----------------------------
@pytest.mark.parametrize("text, seconds", [
    ("PT4H35M59.14S", 4 * 3600 + 35 * 60 + 59.14),  # the spec's truncation example (from memory)
    ("PT1234S", 1234.0),
    ("PT0S", 0.0),
    ("P1DT2H", 26 * 3600.0),
    ("P2W", 14 * 86400.0),                           # ISO 8601 week form
    ("PT0,5S", 0.5),                                 # ISO 8601 allows a decimal comma
    ("PT1M", 60.0),                                  # M after T is minutes, not months
])
def test_iso8601_durations(text, seconds):
    assert parse_duration(text) == pytest.approx(seconds, abs=1e-9)


@pytest.mark.parametrize("text, match", [
    ("5", "not an ISO 8601 duration"), ("P", "not an ISO 8601 duration"), ("PT", "not an ISO 8601 duration"),
    ("P1DT", "not an ISO 8601 duration"), ("PT5", "not an ISO 8601 duration"), ("T5S", "not an ISO 8601"),
    ("P1M", "years and months have no fixed length"), ("P1Y", "years and months"), (None, "not an ISO"),
])
def test_bad_durations_are_refused_clearly(text, match):
    with pytest.raises(LogSchemaError, match=match):
        parse_duration(text)


@given(h=st.integers(0, 99), m=st.integers(0, 59), s=st.integers(0, 5999))
def test_durations_agree_with_a_plain_sum(h, m, s):
    # reference: the arithmetic of the form itself (common practice, no source)
    assert parse_duration(f"PT{h}H{m}M{s / 100:.2f}S") == pytest.approx(3600 * h + 60 * m + s / 100)


# -- the statement -> event mapping -------------------------------------------------------------------------
def test_a_statement_becomes_one_event_with_every_field():
    # xAPI 1.0.3 Data 2.4.2.4 Account Object (example account from memory), 2.4.3 Verb, 2.4.4.1 Activity,
    # 2.4.5 Result (success, duration), 2.4.6.2 contextActivities parent, 2.4.7 Timestamp
    log = read_xapi([statement(1)])
    frame = log.to_frame()
    row = frame.iloc[0]
    assert row["student"] == "1625378"
    assert row["action"] == "attempt" and row["verb"] == ANSWERED
    assert row["step"] == "https://example.org/activities/fractions/p1/step-1"
    assert row["problem"] == "https://example.org/activities/fractions/p1"
    assert bool(row["correct"]) is True and row["duration"] == 5.0
    assert row["statement_id"] == "00000000-0000-4000-8000-000000000001"


def test_result_success_false_and_absent():
    # xAPI 1.0.3 Data 2.4.5 Result: success is optional; absent means unknown, not wrong
    log = read_xapi([statement(1, success=False), statement(2, verb=HINT, success=None)], mapping=HINT_MAPPING)
    assert log.decoded("correct").tolist() == [False, pd.NA]
    assert log.decoded("action").astype(str).tolist() == ["attempt", "hint"]


def test_timestamps_with_offsets_are_the_same_instant():
    # xAPI 1.0.3 Data 2.4.7 Timestamp and 4.5 ISO 8601 Timestamps: offsets allowed, compared as instants
    a = statement(1, time="2031-03-01T10:00:00+01:00")
    b = statement(2, time="2031-03-01T09:00:05Z")
    log = read_xapi([a, b])
    assert log.values("time").tolist() == [0.0, 5.0]


def test_stored_stands_in_for_a_missing_timestamp():
    # xAPI 1.0.3 Data 2.4.7: when the statement has no timestamp the store sets it to "stored" (from memory)
    st_ = statement(1)
    del st_["timestamp"]
    st_["stored"] = "2031-03-01T09:00:30Z"
    log = read_xapi([statement(0), st_])
    assert log.values("time").tolist() == [0.0, 30.0]


def test_mbox_is_hashed_like_mbox_sha1sum():
    # xAPI 1.0.3 Data 2.4.2.3 Inverse Functional Identifier: mbox_sha1sum is the hex SHA-1 of the mailto IRI
    mbox = "mailto:learner@example.com"
    digest = hashlib.sha1(mbox.encode()).hexdigest()
    log = read_xapi([statement(1, actor={"mbox": mbox}), statement(2, actor={"mbox_sha1sum": digest})])
    assert log.n_students == 1
    assert log.students.tolist() == [digest]
    assert "learner@example.com" not in str(log.to_frame().to_dict())


def test_sha1_matches_the_fips_test_vector():
    # FIPS 180-2 Appendix A.1: SHA-1("abc")
    log = read_xapi([statement(1, actor={"mbox": "abc"})])
    assert log.students.tolist() == ["a9993e364706816aba3e25717850c26c9cd0d89d"]


def test_single_object_context_activities_are_accepted():
    # xAPI 1.0.3 Data 2.4.6.2: an LRS accepts a single activity object where an array is expected (from memory)
    st_ = statement(1)
    st_["context"] = {"contextActivities": {"parent": {"id": "https://example.org/activities/p9"}}}
    assert read_xapi([st_]).decoded("problem").tolist() == ["https://example.org/activities/p9"]


def test_pattern_mapping_and_extensions():
    # xAPI 1.0.3 Data 4.1 Extensions (IRI keys) and 2.4.6 context.registration
    mapping = (HINT_MAPPING + '[object]\npattern = "https://example.org/activities/(?P<skill>[^/]+)/(?P<problem>[^/]+)'
               '/(?P<step>[^/]+)"\n[session]\nfrom = "registration"\n'
               '[context_extensions]\n"https://example.org/xapi/ext/hint-level" = "hint_level"\n'
               '[result_extensions]\n"https://example.org/xapi/ext/answer" = "answer"\n')
    a = statement(1, result={"success": False, "extensions": {"https://example.org/xapi/ext/answer": "3/4"}})
    b = statement(2, verb=HINT, success=None)
    for s_ in (a, b):
        s_["context"] = {"registration": "ec531277-b57b-4c15-8d91-d292c5b2b8f7",
                         "extensions": {"https://example.org/xapi/ext/hint-level": 2}}
    frame = read_xapi([a, b], mapping=mapping).to_frame()
    assert frame["skill"].tolist() == ["fractions", "fractions"]
    assert frame["problem"].tolist() == ["p1", "p1"] and frame["step"].tolist() == ["step-1", "step-1"]
    assert frame["hint_level"].tolist() == [2.0, 2.0]
    assert frame["answer"].astype(object).tolist()[0] == "3/4"
    assert frame["session"].nunique() == 1


# -- nothing lost: unmapped statements are listed, voided ones removed ----------------------------------------
def test_voiding_removes_the_target():
    # xAPI 1.0.3 Data 2.3.2 Voided: verb http://adlnet.gov/expapi/verbs/voided, object a StatementRef
    target = statement(1)
    voiding = {"id": "00000000-0000-4000-8000-00000000aaaa",
               "actor": {"objectType": "Agent", "mbox": "mailto:admin@example.com"},
               "verb": {"id": VOIDED_VERB, "display": {"en-US": "voided"}},
               "object": {"objectType": "StatementRef", "id": target["id"]},
               "timestamp": "2031-03-01T10:00:00Z"}
    table = xapi_events([target, statement(2), voiding])
    assert table.counts() == {"statements": 3, "events": 1, "unmapped": 0, "voiding": 1, "voided": 1}
    assert table.voided["id"].tolist() == [target["id"]]
    assert table.events["statement_id"].tolist() == [statement(2)["id"]]


def test_a_voiding_statement_cannot_be_voided_and_must_point_at_a_statement():
    # xAPI 1.0.3 Data 2.3.2: a voiding statement cannot itself be voided (from memory); its object is a
    # StatementRef
    base = {"actor": {"mbox": "mailto:admin@example.com"}, "verb": {"id": VOIDED_VERB},
            "timestamp": "2031-03-01T10:00:00Z"}
    v1 = {**base, "id": "v1", "object": {"objectType": "StatementRef", "id": statement(1)["id"]}}
    v2 = {**base, "id": "v2", "object": {"objectType": "StatementRef", "id": "v1"}}
    v3 = {**base, "id": "v3", "object": {"objectType": "Activity", "id": "https://example.org/a"}}
    table = xapi_events([statement(1), statement(2), v1, v2, v3])
    assert table.counts() == {"statements": 5, "events": 1, "unmapped": 2, "voiding": 1, "voided": 1}
    reasons = dict(zip(table.unmapped["id"], table.unmapped["reason"], strict=True))
    assert "voids a voiding statement" in reasons["v2"]
    assert "not a StatementRef" in reasons["v3"]


def test_unmapped_statements_are_listed_with_ids_and_counts_add_up():
    bad = [
        statement(1, verb="http://adlnet.gov/expapi/verbs/experienced"),      # verb not in [actions]
        statement(2, actor={"objectType": "Group", "member": []}),            # Data 2.4.2.2 anonymous group
        statement(3, time="yesterday"),                                        # Data 2.4.7 not ISO 8601
        statement(4, duration="4 minutes"),                                    # Data 4.6
        statement(5, object={"objectType": "Agent", "mbox": "mailto:x@example.com"}),  # Data 2.4.4.2
        statement(6, result={"success": "yes"}),                               # Data 2.4.5 success is boolean
        statement(7),
        statement(7),                                                          # Data 2.4.1 ids are unique
        "not a statement",
    ]
    table = xapi_events([statement(0), *bad])
    c = table.counts()
    assert c["statements"] == c["events"] + c["unmapped"] + c["voiding"] + c["voided"] == 10
    assert c["events"] == 2 and c["unmapped"] == 8
    reasons = table.unmapped["reason"].tolist()
    for part in ("is not in the mapping's [actions]", "anonymous group", "'yesterday' is not an ISO 8601",
                 "result.duration", "not an activity", "result.success", "duplicate statement id",
                 "not a statement object"):
        assert any(part in r for r in reasons), part
    assert table.unmapped["position"].tolist() == [1, 2, 3, 4, 5, 6, 8, 9]
    with pytest.warns(LogRepairWarning, match=r"8 of 10 statements could not be mapped.*00000000-0000-4000"):
        read_xapi([statement(0), *bad])
    with pytest.raises(LogSchemaError, match="8 of 10 statements"):
        read_xapi([statement(0), *bad], unmapped="error")


def test_unlisted_verbs_can_be_kept_by_their_last_segment():
    table = xapi_events([statement(1, verb="http://adlnet.gov/expapi/verbs/experienced")],
                        mapping='[verbs]\nunlisted = "keep"\n')
    assert table.events["action"].tolist() == ["experienced"]


# -- files: JSON array, JSON lines, statement result ------------------------------------------------------
def test_json_array_lines_and_statement_result_read_the_same(tmp_path):
    statements = [statement(i) for i in range(3)]
    (tmp_path / "a.json").write_text(json.dumps(statements))
    (tmp_path / "b.jsonl").write_text("\n".join(json.dumps(s) for s in statements) + "\n\n")
    # xAPI 1.0.3 Communication 2.1.3 StatementResult: {"statements": [...], "more": IRL} (from memory)
    (tmp_path / "c.json").write_text(json.dumps({"statements": statements, "more": ""}))
    logs = [read_xapi(tmp_path / name) for name in ("a.json", "b.jsonl", "c.json")]
    for log in logs[1:]:
        assert log.summary() == logs[0].summary()
        assert np.array_equal(log.values("time"), logs[0].values("time"))
    assert rulefeat.read_xapi is read_xapi


def test_bad_files_and_mappings_name_the_problem(tmp_path):
    (tmp_path / "bad.jsonl").write_text(json.dumps(statement(1)) + "\n{oops\n")
    with pytest.raises(LogSchemaError, match="line 2 of .*bad.jsonl is not valid JSON"):
        read_xapi(tmp_path / "bad.jsonl")
    with pytest.raises(LogSchemaError, match="cannot read"):
        read_xapi(tmp_path / "missing.json")
    with pytest.raises(LogSchemaError, match=r"unknown table \[action\]. Did you mean 'actions'"):
        XapiMapping.from_toml('[action]\n"x" = "attempt"\n')
    with pytest.raises(LogSchemaError, match="Did you mean 'parent'"):
        XapiMapping.from_toml('[object]\nproblem = "parnt"\n')
    with pytest.raises(LogSchemaError, match="named groups among"):
        XapiMapping.from_toml('[object]\npattern = "(?P<lesson>.+)"\n')
    with pytest.raises(LogSchemaError, match="already a field"):
        XapiMapping.from_toml('[context_extensions]\n"https://example.org/e" = "student"\n')
    with pytest.raises(LogSchemaError, match="none of the 1 statements became an event"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", LogRepairWarning)
            read_xapi([statement(1, verb=HINT)])


def test_the_mapping_file_in_the_docs_is_the_default():
    assert XapiMapping.from_toml("") == XapiMapping.default()
    assert XapiMapping.default().actions == {ANSWERED: "attempt"}
    docs = (Path(__file__).resolve().parents[2] / "docs" / "xapi.md").read_text(encoding="utf-8")
    blocks = [b.split("```")[0] for b in docs.split("```toml")[1:]]
    assert len(blocks) == 2
    assert XapiMapping.from_toml(blocks[0], defaults=False) == XapiMapping.default()
    example = XapiMapping.from_toml(blocks[1])
    assert example.actions[HINT] == "hint" and example.pattern


def test_rules_run_on_an_xapi_log():
    statements = [statement(1), statement(2, verb=HINT, success=None), statement(3, verb=HINT, success=None,
                                                                               time="2031-03-01T09:00:04Z")]
    log = read_xapi(statements, mapping=HINT_MAPPING)
    rules = rulefeat.RuleSet([rulefeat.Rule("quick_hint", when="action == 'hint' and prev(action) == 'hint' "
                                                               "and gap < 3s")])
    assert rules.evaluate(log)["quick_hint"].tolist() == [False, False, True]
