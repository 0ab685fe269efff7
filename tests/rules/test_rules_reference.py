"""Compiled rules against a plain event-by-event reference interpreter, on random logs and random rules.

The reference walks the parsed syntax tree for one event at a time, with Python
lists of each group's events and dicts of history; it shares no code with the
compiler beyond the parser (tested on its own in test_rules_parse.py).
"""

import math
import warnings

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rulefeat import EventLog, RulefeatWarning
from rulefeat.rules import Rule, RuleSet
from rulefeat.rules.ast import Binary, Bool, Call, Logic, Member, Name, Num, Str, Unary
from rulefeat.rules.parse import parse

SIGNATURES = {  # positional parameter names and defaults, written out independently of the function table
    "prev": (("expr", "n"), {"n": 1, "within": "student"}),
    "next": (("expr", "n"), {"n": 1, "within": "student"}),
    "count_before": (("cond",), {"within": "student"}),
    "count_recent": (("cond",), {"within": "student", "actions": None, "seconds": None}),
    "streak": (("cond",), {"within": "student"}),
    "first": (("cond",), {"cond": None, "within": "step"}),
    "typical": (("field",), {"per": "step", "q": 0.5, "among": None}),
    "zscore": (("field",), {"per": "step", "among": None}),
    "missing": (("x",), {}), "abs": (("x",), {}), "log": (("x",), {}),
    "min": (("a", "b"), {}), "max": (("a", "b"), {}),
}


def literal(node):
    if isinstance(node, Unary):
        return -literal(node.operand)
    return node.value


class Reference:
    """Evaluates parsed rules one event at a time. Missing / unknown is None."""

    def __init__(self, log, rules: dict, train=None, min_count=5):
        self.log, self.rules, self.min_count = log, rules, min_count
        self.train = train
        self.n = len(log)
        self.rows = [{} for _ in range(self.n)]
        for name in log.fields:
            column = log.decoded(name).astype(object).tolist()
            for i, v in enumerate(column):
                self.rows[i][name] = None if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)) \
                    else (bool(v) if log.kind(name) == "bool" else (str(v) if log.kind(name) == "category" else v))
        self.memo, self.norms = {}, {}
        self.groups = {scope: self.group_lists(scope) for scope in ("student", "session", "problem", "step")
                       if log.has(scope)}

    def group_lists(self, scope):
        members, where = {}, {}
        for i, row in enumerate(self.rows):
            if row[scope] is None:
                continue
            key = (row["student"], row[scope])
            members.setdefault(key, []).append(i)
            where[i] = key
        return {i: members[key] for i, key in where.items()}

    def fires(self, name, i):
        return self.value(self.rules[name], i) is True

    def value(self, node, i):
        key = (node, i)
        if key not in self.memo:
            self.memo[key] = self.compute(node, i)
        return self.memo[key]

    def compute(self, node, i):
        if isinstance(node, (Num, Str, Bool)):
            return node.value
        if isinstance(node, Name):
            return self.fires(node.name, i) if node.name in self.rules else self.rows[i][node.name]
        if isinstance(node, Unary):
            v = self.value(node.operand, i)
            return None if v is None else (not v if node.op == "not" else -v)
        if isinstance(node, Logic):
            vs = [self.value(o, i) for o in node.operands]
            decided = (node.op == "and" and False in vs) or (node.op == "or" and True in vs)
            if decided:
                return node.op == "or"
            return None if None in vs else node.op == "and"
        if isinstance(node, Member):
            v = self.value(node.operand, i)
            items = [literal(x) for x in node.items.items]
            return None if v is None else ((v in items) != node.negate)
        if isinstance(node, Binary):
            return self.binary(node.op, self.value(node.left, i), self.value(node.right, i))
        if isinstance(node, Call):
            return self.call(node, i)
        raise AssertionError(node)

    @staticmethod
    def binary(op, a, b):
        if a is None or b is None:
            return None
        if op in ("+", "-", "*", "/"):
            if op == "/" and b == 0:
                return None
            out = a + b if op == "+" else a - b if op == "-" else a * b if op == "*" else a / b
            return out if math.isfinite(out) else None
        if isinstance(a, str) or isinstance(b, str):
            a, b = str(a), str(b)
        return {"==": a == b, "!=": a != b, "<": a < b, "<=": a <= b, ">": a > b, ">=": a >= b}[op]

    def bind(self, node):
        names, defaults = SIGNATURES[node.func]
        args = dict(defaults)
        args.update(zip(names, node.args, strict=False))
        args.update({k.name: k.value for k in node.kwargs})
        settings_ = ("n", "within", "per", "q", "actions", "seconds")  # written-out literals, not expressions
        return {k: literal(v) if k in settings_ and v is not None and not isinstance(v, (int, float, str)) else v
                for k, v in args.items()}

    def call(self, node, i):
        f, a = node.func, self.bind(node)
        if f in ("typical", "zscore"):
            return self.norm(node, a, i)
        if f in ("missing", "abs", "log", "min", "max"):
            return self.math(f, a, i)
        group = self.groups[a["within"]].get(i)
        if group is None:
            return None
        pos = group.index(i)
        holds = (lambda j: self.value(a["cond"], j) is True) if a.get("cond") is not None else None
        if f in ("prev", "next"):
            j = pos - int(a["n"]) if f == "prev" else pos + int(a["n"])
            return self.value(a["expr"], group[j]) if 0 <= j < len(group) else None
        if f == "count_before":
            return float(sum(holds(j) for j in group[:pos]))
        if f == "count_recent":
            if a["actions"] is not None:
                window = group[max(0, pos - int(a["actions"]) + 1):pos + 1]
            else:
                t = self.rows[i]["time"]
                window = [j for j in group[:pos + 1] if self.rows[j]["time"] >= t - a["seconds"]]
            return float(sum(holds(j) for j in window))
        if f == "streak":
            run = 0
            for j in reversed(group[:pos + 1]):
                if not holds(j):
                    break
                run += 1
            return float(run)
        if f == "first":
            if holds is None:
                return pos == 0
            return holds(i) and not any(holds(j) for j in group[:pos])
        raise AssertionError(f)

    def math(self, f, a, i):
        if f == "missing":
            return self.value(a["x"], i) is None
        if f in ("min", "max"):
            x, y = self.value(a["a"], i), self.value(a["b"], i)
            return None if x is None or y is None else (min(x, y) if f == "min" else max(x, y))
        x = self.value(a["x"], i)
        if x is None:
            return None
        return abs(x) if f == "abs" else (float(np.log(np.float64(x))) if x > 0 else None)

    # -- norms, from the training log only -----------------------------------------------------------
    def norm(self, node, a, i):
        if node not in self.norms:
            self.norms[node] = self.fit_norm(node.func, a)
        per_key, overall = self.norms[node]
        key = self.rows[i][a["per"]]
        stat = per_key.get(key, overall) if key is not None else overall
        if node.func == "typical":
            return stat
        x = self.value(a["field"], i)
        mean, sd = stat
        if x is None or mean is None or sd is None or sd == 0:
            return None
        z = (x - mean) / sd
        return z if math.isfinite(z) else None

    def fit_norm(self, func, a):
        train = Reference(self.train, self.rules)
        every, by_key = [], {}
        for j, row in enumerate(train.rows):
            x = row[a["field"].name]
            if x is None or (a["among"] is not None and train.value(a["among"], j) is not True):
                continue
            every.append(x)
            if row[a["per"]] is not None:
                by_key.setdefault(row[a["per"]], []).append(x)
        if func == "typical":
            overall = float(np.quantile(every, a["q"])) if every else None
            return {k: float(np.quantile(v, a["q"])) for k, v in by_key.items()
                    if len(v) >= self.min_count}, overall
        overall = moments(every)
        per_key = {}
        for k, v in by_key.items():
            if len(v) >= self.min_count:
                mean, sd = moments(v)
                per_key[k] = (mean, sd if sd is not None and sd > 0 else overall[1])
        return per_key, overall


def moments(values):
    if not values:
        return None, None
    mean = sum(values) / len(values)
    if len(values) < 2:
        return mean, None
    return mean, math.sqrt(sum((x - mean) * (x - mean) for x in values) / (len(values) - 1))


# -- random logs ---------------------------------------------------------------------------------------
EVENT = st.tuples(
    st.sampled_from([0.0, 0.5, 1.0, 2.0, 3.0, 10.0, 2000.0]),      # time since the previous event
    st.sampled_from(["attempt", "attempt", "hint", "done"]),       # action
    st.sampled_from([0.0, 1.0, None]),                              # correct (attempts only)
    st.sampled_from(["s1", "s2", "s3", None]),                      # step
    st.sampled_from(["p1", "p2"]),                                  # problem
    st.sampled_from([None, 0.0, 0.5, 1.0, 2.0, 3.0, 7.0]),         # duration
    st.sampled_from([None, -1.0, 0.0, 1.0, 2.5]),                  # score (extra number column)
    st.sampled_from(["x", "y", None]),                              # tag (extra category column)
)
COLUMNS = ["time", "action", "correct", "step", "problem", "duration", "score", "tag"]


@st.composite
def logs(draw):
    frames = []
    for s, events in enumerate(draw(st.lists(st.lists(EVENT, min_size=1, max_size=7), min_size=1, max_size=3))):
        frame = pd.DataFrame(events, columns=COLUMNS).assign(student=f"u{s}")
        frame["time"] = frame["time"].cumsum()
        frames.append(frame)
    frame = pd.concat(frames, ignore_index=True)
    frame["correct"] = frame["correct"].where(frame["action"] == "attempt")
    frame = frame.astype({"correct": float, "duration": float, "score": float, "tag": object})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RulefeatWarning)
        return EventLog(frame, session_gap=1000.0)


# -- random rules from the grammar ------------------------------------------------------------------------
NUMBER_FIELDS = ["duration", "gap", "score", "time", "step_position"]
CATEGORY_FIELDS = ["action", "step", "problem", "tag"]
SCOPES = ["'student'", "'session'", "'problem'", "'step'"]
NUMBERS = ["0", "1", "2", "3", "0.5", "10", "2s", "500ms", "0.1min", "-1"]


class Grammar:
    def __init__(self, draw, log, earlier):
        self.draw, self.log, self.earlier = draw, log, earlier

    def pick(self, options):
        return self.draw(st.sampled_from(options))

    def label(self, field):
        labels = [str(c) for c in self.log.categories(field)]
        return repr(self.pick(labels)) if labels else None

    def boolean(self, depth, fitted=True):
        options = ["compare", "correct", "category", "literal"]
        if depth > 0:
            options += ["not", "and", "or", "missing", "first", "prev", "in"]
        if self.earlier and fitted:
            options.append("rule")
        kind = self.pick(options)
        d = depth - 1
        if kind == "compare":
            return f"{self.number(d, fitted)} {self.pick(['<', '<=', '>', '>=', '==', '!='])} {self.number(d, fitted)}"
        if kind == "category":
            field = self.pick(CATEGORY_FIELDS)
            label = self.label(field)
            other = self.pick(CATEGORY_FIELDS) if label is None or self.pick([0, 1]) else None
            op = self.pick(["==", "!="])
            return f"{self.category(field, d)} {op} {self.category(other, d) if other else label}"
        if kind == "in":
            field = self.pick(CATEGORY_FIELDS)
            labels = [self.label(field) for _ in range(2)]
            if None in labels:
                return f"duration {self.pick(['in', 'not in'])} [1, 2, 0.5]"
            return f"{self.category(field, d)} {self.pick(['in', 'not in'])} [{', '.join(labels)}]"
        if kind == "correct":
            return self.pick(["correct", "not correct", "correct == false", "correct != true"])
        if kind == "literal":
            return self.pick(["true", "false"])
        if kind == "not":
            return f"not ({self.boolean(d, fitted)})"
        if kind in ("and", "or"):
            return f"({self.boolean(d, fitted)}) {kind} ({self.boolean(d, fitted)})"
        if kind == "missing":
            return f"missing({self.pick([self.number(d, fitted), self.category(self.pick(CATEGORY_FIELDS), d)])})"
        if kind == "first":
            cond = self.pick(["", f"{self.boolean(d, fitted)}, "])
            return f"first({cond}within={self.pick(SCOPES)})"
        if kind == "prev":
            return f"{self.pick(['prev', 'next'])}({self.boolean(d, fitted)}, within={self.pick(SCOPES)})"
        return self.pick(self.earlier)

    def category(self, field, depth):
        if depth > 0 and self.pick([0, 1]):
            return f"{self.pick(['prev', 'next'])}({field}, n={self.pick([1, 2])}, within={self.pick(SCOPES)})"
        return field

    def number(self, depth, fitted=True):
        options = ["field", "field", "literal"]
        if depth > 0:
            options = ["arith", "shift", "count_before", "count_recent", "streak", "math", *options, "neg"]
            options += ["typical", "zscore"] * 2 if fitted else []
        kind = self.pick(options)
        d = depth - 1
        within = f"within={self.pick(SCOPES)}"
        if kind == "field":
            return self.pick(NUMBER_FIELDS)
        if kind == "literal":
            return self.pick(NUMBERS)
        if kind == "arith":
            return f"({self.number(d, fitted)} {self.pick(['+', '-', '*', '/'])} {self.number(d, fitted)})"
        if kind == "neg":
            return f"-{self.number(d, fitted)}"
        if kind == "shift":
            return f"{self.pick(['prev', 'next'])}({self.number(d, fitted)}, {self.pick([1, 2])}, {within})"
        if kind == "count_before":
            return f"count_before({self.boolean(d, fitted)}, {within})"
        if kind == "count_recent":
            window = self.pick(["actions=1", "actions=3", "seconds=1s", "seconds=2.5", "seconds=10s"])
            return f"count_recent({self.boolean(d, fitted)}, {window}, {within})"
        if kind == "streak":
            return f"streak({self.boolean(d, fitted)}, {within})"
        if kind == "math":
            f = self.pick(["abs", "log", "min", "max"])
            args = [self.number(d, fitted) for _ in range(2 if f in ("min", "max") else 1)]
            return f"{f}({', '.join(args)})"
        return self.norm(kind, d)

    def norm(self, kind, depth):
        field = self.pick(["duration", "score"])
        per = self.pick(["'step'", "'problem'", "'tag'", "'action'"])
        among = self.pick(["", f", among={self.boolean(depth, fitted=False)}"])
        q = f", q={self.pick(['0', '0.25', '0.5', '0.9', '1'])}" if kind == "typical" else ""
        return f"{kind}({field}, per={per}{q}{among})"


@st.composite
def cases(draw):
    log = draw(logs())
    rules = []
    for k in range(draw(st.integers(1, 3))):
        grammar = Grammar(draw, log, [r.name for r in rules])
        rules.append(Rule(f"rule_{k}", when=grammar.boolean(draw(st.integers(2, 4)))))
    # Every case also compares a fitted norm, so the norms and their fallbacks are always exercised.
    grammar = Grammar(draw, log, [r.name for r in rules])
    norm = grammar.norm(grammar.pick(["typical", "zscore"]), 1)
    op = grammar.pick(["<", "<=", ">", ">=", "=="])
    rules.append(Rule("normed", when=f"{norm} {op} {grammar.number(2)}"))
    students = list(log.students)
    train = draw(st.lists(st.sampled_from(students), min_size=1, unique=True))
    return log, rules, train, draw(st.integers(1, 3))


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cases())
def test_compiled_rules_match_the_reference_interpreter(case):
    log, rules, students, min_count = case
    train = log.for_students(students)
    program = RuleSet(rules).bind(log, min_count=min_count).fit(train)
    fired = program.evaluate(log)
    trees = {r.name: parse(r.when) for r in rules}
    ref = Reference(log, trees, train=train, min_count=min_count)
    for rule in rules:
        expected = [ref.fires(rule.name, i) for i in range(len(log))]
        assert fired[rule.name].tolist() == expected, (rule.when, log.to_frame())


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cases(), st.data())
def test_norms_do_not_depend_on_other_students(case, data):
    """Leakage: norms fitted on training students ignore every change to the other students' events."""
    log, rules, students, min_count = case
    rules = rules + [Rule("spread", when="duration > typical(duration, per='step') or zscore(score) > 0.5")]
    program = RuleSet(rules).bind(log, min_count=min_count).fit(log.for_students(students))
    frame = log.to_frame(derived=False).reset_index(drop=True)
    others = ~frame["student"].isin(students)
    changed = frame.copy()
    changed.loc[others, "duration"] = data.draw(st.sampled_from([0.0, 100.0, None]))
    changed.loc[others, "score"] = data.draw(st.sampled_from([-50.0, 3.0, None]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RulefeatWarning)
        log2 = EventLog(changed, session_gap=1000.0)
    program2 = RuleSet(rules).bind(log2, min_count=min_count).fit(log2.for_students(students))
    state, state2 = program.norms_, program2.norms_
    assert state.keys() == state2.keys()
    for key in state:
        for field, value in state[key].items():
            np.testing.assert_array_equal(value, state2[key][field])
