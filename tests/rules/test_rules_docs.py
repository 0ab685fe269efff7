"""Every example in docs/rules.md is a rule that checks and runs."""

from pathlib import Path

import pandas as pd
import pytest

from rulefeat import EventLog
from rulefeat.rules import Rule, RuleSet

DOC = Path(__file__).resolve().parents[2] / "docs" / "rules.md"
LOG = EventLog(pd.DataFrame({
    "student": ["a", "a", "a", "b"], "time": [0.0, 2.0, 3.0, 1.0], "action": ["hint", "hint", "attempt", "attempt"],
    "correct": [None, None, 0, 1], "step": ["s1", "s1", "s1", "s2"], "problem": ["p1", "p1", "p1", "p2"],
    "skill": ["k1", "k1", "k1", "k2"], "duration": [1.0, 1.0, 0.2, 5.0],
}))


def blocks(tag: str) -> list[str]:
    """The doc's fenced code blocks opened with ```<tag>."""
    out, current, inside = [], None, False
    for line in DOC.read_text(encoding="utf-8").splitlines():
        if line.startswith("```"):
            if inside and current is not None:
                out.append("\n".join(current))
            current = [] if not inside and line == "```" + tag else None
            inside = not inside
        elif current is not None:
            current.append(line)
    return out


def examples():
    """Expressions of the function examples (untagged blocks), without their trailing '# ...' notes."""
    lines = [line.split("  #")[0].strip() for block in blocks("") for line in block.splitlines()]
    return [line for line in lines if line and not line.startswith(("RuleCheckError", "RuleSyntaxError"))
            and not set(line) <= {"^", " "} and not line.startswith(("action == 'hnt'", "gap < 3 < 5", "prev(action, within='stp')"))]


@pytest.mark.parametrize("when", examples())
def test_doc_examples_check_and_run(when):
    RuleSet([Rule("example", when=when)]).evaluate(LOG)


def test_doc_rules_file_parses():
    rules = RuleSet.from_toml(blocks("toml")[0])
    assert rules.names == ("skimmed_hint", "hasty_error", "guess_after_skim")
    assert rules.evaluate(LOG)["skimmed_hint"].tolist() == [False, True, False, False]


def test_doc_lists_every_function_and_limit():
    from rulefeat.rules import FUNCTIONS, SUMMARIES
    from rulefeat.rules.parse import MAX_DEPTH
    from rulefeat.rules.tokenize import MAX_TEXT

    text = DOC.read_text(encoding="utf-8")
    assert all(f"`{name}(" in text for name in FUNCTIONS)
    assert all(f"`{name}`" in text for name in SUMMARIES)
    assert f"{MAX_TEXT:,}" in text and f"{MAX_DEPTH} levels" in text
