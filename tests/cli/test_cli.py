"""The ``rulefeat`` command, run as a subprocess (``python -m rulefeat``) on files written by ``simulate``."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import rulefeat
from rulefeat.cli import COMMANDS, main
from rulefeat.simulate import tutor_logs

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib

ROOT = Path(__file__).resolve().parents[2]
FAST = ["--folds", "3", "--repeats", "1", "--n-boot", "50", "--no-curve", "--no-ablation", "--no-transfer",
        "--n-jobs", "1"]


def rulefeat_cmd(*args, cwd=None, check_code=None):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    done = subprocess.run([sys.executable, "-m", "rulefeat", *map(str, args)], capture_output=True, text=True,
                          env=env, cwd=cwd, timeout=600)
    assert "Traceback" not in done.stderr, done.stderr
    if check_code is not None:
        assert done.returncode == check_code, (done.returncode, done.stdout, done.stderr)
    return done


def rulefeat_main(capsys, *args, check_code=None):
    """The same entry point in this process (for the many bad-input variants; the subprocess runs cover
    each command's real start-up).  ``main`` returns the exit code rather than raising."""
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    if check_code is not None:
        assert code == check_code, (code, out, err)
    return subprocess.CompletedProcess(args, code, out, err)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    done = rulefeat_cmd("simulate", "--out", folder, "--students", 40, "--windows", 4, "--seed", 1, "--json",
                        check_code=0)
    return folder, json.loads(done.stdout)


@pytest.fixture(scope="module")
def evaluated(demo):
    folder, _ = demo
    out = folder / "report"
    done = rulefeat_cmd("evaluate", "--events", folder / "events.csv", "--units", folder / "windows.csv",
                        "--rules", folder / "rules.toml", "--outcomes", folder / "outcomes.csv", *FAST,
                        "--out", out, "--json", check_code=0)
    return out, json.loads(done.stdout)


# -- the entry point ------------------------------------------------------------------------------------------
def test_pyproject_declares_the_console_script():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    assert project["scripts"]["rulefeat"] == "rulefeat.cli:main"
    module, name = project["scripts"]["rulefeat"].split(":")
    assert callable(getattr(__import__(module, fromlist=[name]), name))


def test_help_has_examples_and_exit_codes(capsys):
    runs = [rulefeat_cmd("--help", check_code=0)]
    runs += [rulefeat_main(capsys, command, "--help", check_code=0) for command in COMMANDS]
    for done in runs:
        assert "examples:" in done.stdout and "exit codes:" in done.stdout
        assert "2  usage" in done.stdout


def test_usage_errors_exit_2_with_one_line(capsys):
    runs = [rulefeat_cmd("frobnicate", check_code=2)]
    for args in (["check"], ["check", "r.toml", "--events"], ["evaluate", "--folds", "three"]):
        runs.append(rulefeat_main(capsys, *args, check_code=2))
    for done in runs:
        assert "error:" in done.stderr and done.stdout == ""


# -- simulate -------------------------------------------------------------------------------------------------
def test_simulate_writes_every_file(demo):
    folder, summary = demo
    assert sorted(p.name for p in folder.iterdir() if p.is_file()) == ["events.csv", "outcomes.csv", "rules.toml",
                                                                       "windows.csv"]
    events, windows = pd.read_csv(folder / "events.csv"), pd.read_csv(folder / "windows.csv")
    assert len(events) == summary["events"] and len(windows) == summary["windows"] == 160
    assert "true_label" not in windows.columns and {"student", "start", "end", "label"} <= set(windows.columns)
    assert (folder / "rules.toml").read_text() == (ROOT / "rulefeat" / "data" / "demo_rules.toml").read_text()
    expected = rulefeat.EventLog(tutor_logs(n_students=40, seed=1, windows_per_student=4).events)
    assert rulefeat.read_events(folder / "events.csv").summary()["actions"] == expected.summary()["actions"]


def test_simulate_parquet_and_bad_out(tmp_path, capsys):
    rulefeat_cmd("simulate", "--out", tmp_path / "pq", "--students", 6, "--format", "parquet", check_code=0)
    assert len(pd.read_parquet(tmp_path / "pq" / "windows.parquet")) == 36
    (tmp_path / "file").write_text("x")
    done = rulefeat_main(capsys, "simulate", "--out", tmp_path / "file", check_code=2)
    assert "is a file, not a folder" in done.stderr
    done = rulefeat_main(capsys, "simulate", "--out", tmp_path / "x", "--students", 0, check_code=1)
    assert "n_students" in done.stderr


# -- check ------------------------------------------------------------------------------------------------------
BAD_RULES = """\
[rules.quick]
when = "gapp < 3s"

[rules.fine]
when = "action == 'hint'"

[rules.odd]
when = "action == 'hnt' and quick"

[rules.broken]
when = "action == and"

[rules.extra]
whn = "gap > 1s"
"""


def test_check_clean_rules(demo):
    folder, _ = demo
    done = rulefeat_cmd("check", folder / "rules.toml", "--events", folder / "events.csv", check_code=0)
    assert "5 rules check cleanly" in done.stdout and done.stderr == ""


def test_check_lists_every_problem_with_carets(demo, tmp_path, capsys):
    folder, _ = demo
    rules = tmp_path / "bad.toml"
    rules.write_text(BAD_RULES)
    done = rulefeat_cmd("check", rules, "--events", folder / "events.csv", check_code=1)
    out = done.stdout
    assert "4 problems" in out
    assert f"{rules}:1: RuleCheckError: Rule 'quick': unknown field or rule 'gapp'. Did you mean 'gap'?" in out
    assert "    gapp < 3s\n    ^^^^" in out
    assert "Did you mean 'hint'?" in out and "    action == 'hnt' and quick\n              ^^^^^" in out
    assert f"{rules}:10: RuleSyntaxError: Rule 'broken'" in out and "^^^" in out
    assert "unknown key 'whn'. Did you mean 'when'?" in out
    assert "fine" not in out
    data = json.loads(rulefeat_main(capsys, "check", rules, "--events", folder / "events.csv", "--json",
                                    check_code=1).stdout)
    assert data["ok"] is False and data["rules"] == ["quick", "fine", "odd", "broken", "extra"]
    assert [(p["rule"], p["line"], p["error"]) for p in data["problems"]] == [
        ("quick", 1, "RuleCheckError"), ("odd", 7, "RuleCheckError"), ("broken", 10, "RuleSyntaxError"),
        ("extra", 13, "RuleSyntaxError")]
    assert data["log"]["students"] == 40


def test_check_file_level_problems(demo, tmp_path, capsys):
    folder, _ = demo
    events = folder / "events.csv"
    (tmp_path / "t.toml").write_text("[rules.a\nwhen = 1\n")
    assert "not valid TOML" in rulefeat_main(capsys, "check", tmp_path / "t.toml", "--events", events, check_code=1).stdout
    (tmp_path / "c.toml").write_text('[rules.a]\nwhen = "b"\n[rules.b]\nwhen = "a"\n')
    assert "cycle" in rulefeat_main(capsys, "check", tmp_path / "c.toml", "--events", events, check_code=1).stdout
    (tmp_path / "f.toml").write_text('[rules.gap]\nwhen = "action == \'hint\'"\n')
    assert "also a field" in rulefeat_main(capsys, "check", tmp_path / "f.toml", "--events", events, check_code=1).stdout


def test_check_bad_inputs_exit_2(demo, tmp_path, capsys):
    folder, _ = demo
    rules, events = folder / "rules.toml", folder / "events.csv"
    done = rulefeat_cmd("check", rules, "--events", events, "--columns", "{student: 1}", check_code=2)
    assert "--columns: not valid JSON" in done.stderr and len(done.stderr.strip().splitlines()) == 1
    assert "JSON object" in rulefeat_main(capsys, "check", rules, "--events", events, "--columns", "[1]",
                                         check_code=2).stderr
    assert "no such file" in rulefeat_main(capsys, "check", rules, "--events", tmp_path / "nope.csv", check_code=2).stderr
    assert "no such file" in rulefeat_main(capsys, "check", tmp_path / "nope.toml", "--events", events, check_code=2).stderr
    (tmp_path / "e.xlsx").write_text("x")
    assert "cannot tell the format" in rulefeat_main(capsys, "check", rules, "--events", tmp_path / "e.xlsx",
                                                    check_code=2).stderr
    (tmp_path / "e.parquet").write_text("not parquet")
    assert "cannot read" in rulefeat_main(capsys, "check", rules, "--events", tmp_path / "e.parquet", check_code=2).stderr


def test_check_log_refused_by_the_library_exits_1(demo, tmp_path, capsys):
    folder, _ = demo
    events = pd.read_csv(folder / "events.csv").rename(columns={"student": "learner"})
    events.to_csv(tmp_path / "renamed.csv", index=False)
    done = rulefeat_main(capsys, "check", folder / "rules.toml", "--events", tmp_path / "renamed.csv", check_code=1)
    assert "required field 'student' is missing" in done.stderr
    rulefeat_main(capsys, "check", folder / "rules.toml", "--events", tmp_path / "renamed.csv", "--columns",
                 '{"student": "learner"}', check_code=0)
    done = rulefeat_main(capsys, "check", folder / "rules.toml", "--events", tmp_path / "renamed.csv", "--columns",
                        '{"studnt": "learner"}', check_code=1)
    assert "Did you mean 'student'?" in done.stderr


def test_progress_only_when_asked(demo, capsys):
    folder, _ = demo
    args = ["check", folder / "rules.toml", "--events", folder / "events.csv"]
    assert rulefeat_main(capsys, *args, check_code=0).stderr == ""  # stderr is a pipe here, not a terminal
    lines = rulefeat_main(capsys, *args, "--progress", check_code=0).stderr.splitlines()
    assert lines and all(line.startswith("rulefeat check [") for line in lines)


# -- features ---------------------------------------------------------------------------------------------------
def test_features_table_equals_the_library(demo, tmp_path):
    folder, _ = demo
    out = tmp_path / "features.parquet"
    done = rulefeat_cmd("features", folder / "rules.toml", "--events", folder / "events.csv", "--units",
                        folder / "windows.csv", "--out", out, "--json", check_code=0)
    summary = json.loads(done.stdout)
    table = pd.read_parquet(out)
    log = rulefeat.read_events(folder / "events.csv")
    units = pd.read_csv(folder / "windows.csv")
    rules = rulefeat.RuleSet.from_toml(folder / "rules.toml")
    expected_rules = rulefeat.RuleFeatures(rules=rules, log=log).fit_transform(units)
    expected_mined = rulefeat.LogFeatures(log, random_state=0).fit_transform(units)
    assert summary["rows"] == len(table) == len(units)
    assert summary["rule_features"] == list(expected_rules.columns)
    assert summary["mined_features"] == list(expected_mined.columns)
    assert list(table.columns) == [*units.columns, *expected_rules.columns, *expected_mined.columns]
    np.testing.assert_allclose(table[expected_rules.columns].to_numpy(), expected_rules.to_numpy())
    np.testing.assert_allclose(table[expected_mined.columns].to_numpy(), expected_mined.to_numpy())


def test_features_kinds_units_and_bad_options(demo, tmp_path, capsys):
    folder, _ = demo
    common = ["--events", folder / "events.csv", "--units", folder / "windows.csv"]
    rulefeat_main(capsys, "features", folder / "rules.toml", *common, "--out", tmp_path / "r.csv", "--kind", "rules",
                 check_code=0)
    rule_table = pd.read_csv(tmp_path / "r.csv")
    assert not any("__" in c and c.split("__")[0] in ("volume", "timing") for c in rule_table.columns)
    assert "skimmed_hint__rate" in rule_table.columns
    students = pd.DataFrame({"student": sorted(pd.read_csv(folder / "windows.csv")["student"].unique())})
    students.to_csv(tmp_path / "students.csv", index=False)
    rulefeat_main(capsys, "features", "--kind", "mined", "--events", folder / "events.csv", "--units",
                 tmp_path / "students.csv", "--unit", "student", "--out", tmp_path / "m.csv", check_code=0)
    assert len(pd.read_csv(tmp_path / "m.csv")) == 40
    done = rulefeat_main(capsys, "features", *common, "--out", tmp_path / "x.csv", check_code=2)
    assert "needs a RULES file" in done.stderr
    done = rulefeat_main(capsys, "features", folder / "rules.toml", *common, "--out", tmp_path / "x.xlsx", check_code=2)
    assert "cannot tell the format" in done.stderr
    done = rulefeat_main(capsys, "features", folder / "rules.toml", *common, "--out", tmp_path / "x.csv", "--unit",
                         "windw", check_code=2)  # an option value the library refuses (ParameterError): usage
    assert "windw" in done.stderr
    done = rulefeat_main(capsys, "features", folder / "rules.toml", *common, "--out", tmp_path / "x.csv", "--kind",
                        "rule", check_code=2)
    assert "invalid choice" in done.stderr


# -- evaluate and report ----------------------------------------------------------------------------------------
def test_evaluate_headline_matches_the_saved_report(evaluated):
    out, headline = evaluated
    saved = json.loads((out / "report.json").read_text())
    row = next(c for c in saved["comparisons"] if (c["variant"], c["baseline"], c["metric"])
               == ("combined", "mined", saved["primary_metric"]))
    assert headline["headline"]["metric"] == saved["primary_metric"] == "auc"
    assert headline["headline"]["delta"] == pytest.approx(row["delta"])
    assert headline["headline"]["p_value"] == pytest.approx(row["p_value"])
    assert headline["headline"]["effect"] == row["effect"]
    # The headline sentence says what was estimated and how sure it is: one interval and its matching p.
    assert "changed AUC by" in row["effect"] and "90% CI" in row["effect"] and "one-sided p" in row["effect"]
    assert "expected change for a detector trained on about" in row["effect"]
    assert (row["ci_low"] > 0) == (row["p_value"] < 0.05)
    assert headline["units"] == 160 and headline["students"] == 40
    assert (out / "report.html").is_file() and (out / "diagnostics" / "diagnostics.json").is_file()
    assert saved["reproducibility"]["command"].startswith("python -m rulefeat evaluate")


def test_evaluate_bad_inputs(demo, tmp_path, capsys):
    folder, _ = demo
    own = ["--events", folder / "events.csv", "--units", folder / "windows.csv", *FAST, "--no-diagnose",
           "--out", tmp_path / "r"]
    assert "go together" in rulefeat_main(capsys, "evaluate", "--events", folder / "events.csv", check_code=2).stderr
    done = rulefeat_main(capsys, "evaluate", *own, "--label", "coded", check_code=1)
    assert "'coded'" in done.stderr and len(done.stderr.strip().splitlines()) == 1
    done = rulefeat_main(capsys, "evaluate", *own, "--columns", "{oops", check_code=2)
    assert "--columns: not valid JSON" in done.stderr
    (tmp_path / "bad.toml").write_text(BAD_RULES)
    done = rulefeat_main(capsys, "evaluate", *own, "--rules", tmp_path / "bad.toml", check_code=1)
    assert "4 problems" in done.stderr and "Did you mean 'gap'?" in done.stderr  # every one, before the run


def test_report_rerenders_the_saved_evaluation(evaluated, tmp_path):
    out, _ = evaluated
    html = tmp_path / "again.html"
    done = rulefeat_cmd("report", out / "report.json", "--html", html, "--markdown", tmp_path / "again.md",
                        "--json", check_code=0)
    data = json.loads(done.stdout)
    assert data["diagnostics"] is True and data["written"]["html"] == str(html)

    def tables(text):  # figures are re-drawn (and SHAP dependence plots need the SHAP tables): compare the rest
        text = re.sub(r'<img src="data:[^"]*"', "<img", text)
        return [line for line in text.splitlines() if "<figure>" not in line]

    assert tables(html.read_text()) == tables((out / "report.html").read_text())

    def text(path):  # the saved Markdown links the figure files; the re-rendered one has none
        return [line for line in path.read_text().splitlines() if line.strip() and not line.startswith("![")]

    assert text(tmp_path / "again.md") == text(out / "report.md")


def test_report_bad_inputs(evaluated, tmp_path, capsys):
    out, _ = evaluated
    (tmp_path / "bad.json").write_text('{"task": ')
    done = rulefeat_main(capsys, "report", tmp_path / "bad.json", "--html", tmp_path / "x.html", check_code=1)
    assert "IncrementalValueReport.from_json: the text is not valid JSON" in done.stderr
    (tmp_path / "other.json").write_text("{}")
    assert "lacks the keys" in rulefeat_main(capsys, "report", tmp_path / "other.json", "--html", tmp_path / "x.html",
                                            check_code=1).stderr
    assert "no such file" in rulefeat_main(capsys, "report", tmp_path / "none.json", "--html", tmp_path / "x.html",
                                          check_code=2).stderr
    assert "nothing to write" in rulefeat_main(capsys, "report", out / "report.json", check_code=2).stderr
    (tmp_path / "diag.json").write_text("[")
    done = rulefeat_main(capsys, "report", out / "report.json", "--html", tmp_path / "x.html", "--diagnostics",
                        tmp_path / "diag.json", check_code=1)
    assert "RuleDiagnostics.from_json: the text is not valid JSON" in done.stderr


def test_benchmark_script_wraps_evaluate():
    done = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "incremental_value.py"), "--help"],
                          capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(ROOT)}, check=True)
    for option in ("--students", "--full", "--labels", "--columns", "--no-diagnose", "--json"):
        assert option in done.stdout


# -- xAPI files through the commands ----------------------------------------------------------------------------
def test_check_and_features_on_xapi_statements(demo, tmp_path, capsys):
    folder, _ = demo
    events = pd.read_csv(folder / "events.csv").head(400)
    statements = [{
        "id": f"00000000-0000-4000-8000-{i:012d}",
        "actor": {"account": {"homePage": "https://example.org", "name": row.student}},
        "verb": {"id": "http://adlnet.gov/expapi/verbs/answered" if row.action == "attempt"
                 else "https://example.org/xapi/verbs/asked-for-hint"},
        "object": {"id": f"https://example.org/steps/{row.step}"},
        "context": {"contextActivities": {"parent": [{"id": f"https://example.org/problems/{row.problem}"}]}},
        "timestamp": pd.Timestamp(row.time).isoformat() + "Z",
        **({"result": {"success": row.correct == "True" or row.correct is True}} if row.action == "attempt"
           else {}),
    } for i, row in enumerate(events.itertuples())]
    (tmp_path / "s.jsonl").write_text("\n".join(json.dumps(s) for s in statements))
    (tmp_path / "m.toml").write_text('[actions]\n"https://example.org/xapi/verbs/asked-for-hint" = "hint"\n')
    rulefeat_cmd("check", folder / "rules.toml", "--events", tmp_path / "s.jsonl", "--xapi-mapping",
                 tmp_path / "m.toml", check_code=0)
    done = rulefeat_main(capsys, "check", folder / "rules.toml", "--events", tmp_path / "s.jsonl", check_code=0)
    assert "could not be mapped" in done.stderr  # hints are unmapped without the mapping: listed, not lost
    done = rulefeat_main(capsys, "check", folder / "rules.toml", "--events", tmp_path / "s.jsonl", "--columns", "{}",
                        check_code=2)
    assert "--xapi-mapping" in done.stderr


def test_readme_command_lines_parse():
    import shlex

    from rulefeat.cli import build_parser

    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    lines = []
    for block in readme.split("```bash")[1:]:
        text = block.split("```")[0].replace("\\\n", " ")
        lines += [line.split("#")[0] for line in text.splitlines() if line.strip().startswith("rulefeat ")]
    lines += re.findall(r"`(rulefeat [^`]+)`", readme.replace("\n", " "))
    assert len(lines) >= 10
    parser = build_parser()
    for line in lines:
        if "RULES" in line or "FILE" in line:  # the command table shows placeholders
            line = line.replace("RULES", "r.toml").replace("REPORT.json", "r.json").replace("FILE", "f.csv")
        parser.parse_args(shlex.split(line)[1:])


# -- score ------------------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def saved_detector(demo, tmp_path_factory):
    folder, _ = demo
    events, windows = pd.read_csv(folder / "events.csv"), pd.read_csv(folder / "windows.csv")
    log = rulefeat.EventLog(events)
    rules = rulefeat.RuleSet.from_toml(folder / "rules.toml")
    keys = windows[["student", "start", "end"]]
    detector = rulefeat.make_detector(log, rules, random_state=0).fit(keys, windows["label"])
    path = tmp_path_factory.mktemp("detector") / "detector.zip"
    rulefeat.save_detector(detector, path)
    return path, detector, log, keys


def test_score_equals_the_bound_detector(saved_detector, demo, tmp_path):
    path, detector, log, keys = saved_detector
    folder, _ = demo
    out = tmp_path / "scores.csv"
    sha = rulefeat.read_manifest(path)["payload"]["sha256"]
    done = rulefeat_cmd("score", path, "--events", folder / "events.csv", "--units", folder / "windows.csv",
                        "--out", out, "--sha256", sha, "--json", check_code=0)
    summary = json.loads(done.stdout)
    scored = pd.read_csv(out)
    assert summary["units"] == len(scored) == len(keys)
    expected = rulefeat.bind(detector, log).predict_proba(keys)[:, 1]
    np.testing.assert_allclose(scored["score"].to_numpy(), expected, rtol=0, atol=1e-12)


def test_score_refuses_tampered_hash_and_unknown_units(saved_detector, demo, tmp_path, capsys):
    path, _, _, _ = saved_detector
    folder, _ = demo
    common = ["--events", folder / "events.csv"]
    wrong = rulefeat_main(capsys, "score", path, *common, "--units", folder / "windows.csv", "--sha256", "0" * 64,
                          check_code=1)
    assert "sha256" in wrong.stderr.lower() or "hash" in wrong.stderr.lower()
    stranger = tmp_path / "stranger.csv"
    pd.DataFrame({"student": ["nobody-here"], "start": [0.0], "end": [60.0]}).to_csv(stranger, index=False)
    refused = rulefeat_main(capsys, "score", path, *common, "--units", stranger, check_code=1)
    assert "nobody-here" in refused.stderr
    missing = rulefeat_main(capsys, "score", tmp_path / "absent.zip", *common, "--units", stranger,
                            check_code=2)
    assert missing.stderr.count("\n") == 1


# -- hardening: the report folder, input records, hostile cells --------------------------------------------------
def test_evaluate_refuses_a_non_empty_out_before_it_starts(demo, tmp_path, capsys):
    folder, _ = demo
    out = tmp_path / "taken"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    own = ["--events", folder / "events.csv", "--units", folder / "windows.csv", *FAST, "--no-diagnose", "--out", out]
    done = rulefeat_main(capsys, "evaluate", *own, check_code=2)
    assert done.stderr.strip().splitlines() == [
        f"rulefeat evaluate: error: --out: the folder {str(out)!r} exists and is not empty; pass --overwrite to "
        "replace it, or choose another --out"]
    assert "EventLog(" not in done.stdout  # refused before the log was even read
    assert [p.name for p in out.iterdir()] == ["notes.txt"]
    rulefeat_main(capsys, "evaluate", *own, "--overwrite", check_code=0)
    assert sorted(p.name for p in out.iterdir()) == ["oof.csv", "report.html", "report.json", "report.md", "roc.png"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["taken"]  # no temporary folder left beside it


def test_report_json_keeps_input_names_and_hashes_not_machine_paths(demo, evaluated):
    import hashlib

    folder, _ = demo
    out, _ = evaluated
    text = (out / "report.json").read_text(encoding="utf-8")
    assert str(folder) not in text and str(folder.parent) not in text
    repro = json.loads(text)["reproducibility"]
    assert set(repro["inputs"]) == {"events", "units", "rules", "outcomes"}
    for role, name in (("events", "events.csv"), ("units", "windows.csv"), ("rules", "rules.toml")):
        record = repro["inputs"][role]
        assert record["name"] == name and record["bytes"] == (folder / name).stat().st_size
        assert record["sha256"] == hashlib.sha256((folder / name).read_bytes()).hexdigest()
    assert "--events events.csv" in repro["command"] and "--out report" in repro["command"]


def test_columns_that_are_not_a_flat_json_object_are_usage_errors(demo, tmp_path, capsys):
    folder, _ = demo
    own = ["--events", folder / "events.csv", "--units", folder / "windows.csv", *FAST, "--out", tmp_path / "r"]
    for columns, message in (("[" * 10_000 + "]" * 10_000, "expected a flat JSON object"),
                             ('{"student": {"a": {"b": 1}}}', "expected a flat JSON object"),
                             ('["student"]', "expected a JSON object"), ("{oops", "not valid JSON")):
        done = rulefeat_main(capsys, "evaluate", *own, "--columns", columns, check_code=2)
        assert message in done.stderr and len(done.stderr.strip().splitlines()) == 1


def test_features_csv_neutralises_formula_cells(demo, tmp_path, capsys):
    folder, _ = demo
    events, units = pd.read_csv(folder / "events.csv"), pd.read_csv(folder / "windows.csv")
    first = units["student"].iloc[0]
    events["student"] = events["student"].replace({first: "=HYPERLINK(\"x\")"})
    units["student"] = units["student"].replace({first: "=HYPERLINK(\"x\")"})
    events.to_csv(tmp_path / "events.csv", index=False)
    units.to_csv(tmp_path / "units.csv", index=False)
    rulefeat_main(capsys, "features", "--kind", "mined", "--events", tmp_path / "events.csv", "--units",
                  tmp_path / "units.csv", "--out", tmp_path / "f.csv", check_code=0)
    table = pd.read_csv(tmp_path / "f.csv")
    assert (table["student"] == "'=HYPERLINK(\"x\")").sum() == (units["student"] == "=HYPERLINK(\"x\")").sum() > 0
    assert table.select_dtypes("number").shape[1] > 2  # the features stay numbers


def test_report_names_the_file_of_a_damaged_report(tmp_path, capsys):
    deep = tmp_path / "report.json"
    deep.write_text("[" * 50_000 + "]" * 50_000, encoding="utf-8")
    done = rulefeat_main(capsys, "report", deep, "--json", check_code=1)
    assert done.stderr.strip().splitlines() == [
        f"rulefeat report: error: {str(deep)!r}: IncrementalValueReport.from_json: the JSON text nests 50000 levels of "
        "[ ] / { }, more than the limit of 64 (rulefeat.limits.MAX_JSON_DEPTH); flatten it."]
    deep.write_text(json.dumps({"task": "classification", "rules": [{"name": 3}]}), encoding="utf-8")
    done = rulefeat_main(capsys, "report", deep, "--json", check_code=1)
    assert "results['rules'][0]['name'] must be a string; got int 3." in done.stderr
