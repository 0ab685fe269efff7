"""How much of a student's history (and future) live scoring must hold to evaluate the rules exactly.

Live scoring evaluates the compiled rules with the batch engine on a buffered tail of each student's
events (contract 9), so the tail must hold every event a new event's value depends on.  This module
reads the checked rule trees once and bounds that dependence, function by function:

==============================  ==============================================================
what the rule reads             history needed at an event (``within`` = scope S)
==============================  ==============================================================
``gap``                         the previous event (1 event back)
``step_position`` etc.          the whole open step / problem
``duration`` (derived)          the *next* event: a look-ahead of 1 event
``prev(x, n)``                  S = student, session: n events back; S = step, problem: the
                                whole open group
``next(x, n)``                  S = student, session: a look-ahead of n events; S = step or
                                problem: refused (the group's next event may be any distance away)
``count_recent(c, actions=n)``  S = student, session: n - 1 events back; step, problem: the group
``count_recent(c, seconds=t)``  t seconds back
``count_before``, ``streak``,   the whole open group of S; S = student never closes, so these
``first``                       are refused within='student' (unbounded memory)
``typical``, ``zscore``         nothing beyond the event (the norms are fitted state)
==============================  ==============================================================

Nested calls compose: the argument of ``prev`` is itself evaluated at the earlier events, so its own
needs start from there.  :class:`Reach` is the static summary (what to refuse, how far to look
ahead); :func:`earliest_read` walks the same table over a student's buffer to find the first event
any pending or future event can still read, rule by rule and path by path.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import LiveError
from ..rules.ast import Apply, Field, Node, RuleRef, show

__all__ = ["Reach", "reach_of", "earliest_read", "CLOSING_SCOPES"]

#: Scopes whose groups close (the student moves on to another step / problem, or a session ends).
CLOSING_SCOPES = ("session", "problem", "step")
_EVENT_SCOPES = ("student", "session")  # groups that are contiguous runs of the student's stream
_POSITIONS = {"step_position": "step", "problem_position": "problem"}


@dataclass(frozen=True)
class Reach:
    """A conservative bound on what evaluating the rules at one event reads.

    ``events`` / ``seconds``: how far back in the student's stream; ``groups``: scopes whose whole
    open group is needed; ``ahead``: events of look-ahead (``ahead_in_session``: all of it ends with the
    session); ``rounds``: the depth of nested history calls (the buffer bound applies the three needs
    once per level).
    """

    events: int = 0
    seconds: float = 0.0
    groups: frozenset = field(default_factory=frozenset)
    ahead: int = 0
    ahead_in_session: bool = True
    rounds: int = 0

    def __add__(self, other: Reach) -> Reach:
        return Reach(self.events + other.events, self.seconds + other.seconds, self.groups | other.groups,
                     self.ahead + other.ahead, self.ahead_in_session and other.ahead_in_session,
                     self.rounds + other.rounds)

    def merge(self, other: Reach) -> Reach:
        """Both needs at once (the operands of one expression): the larger of each."""
        return Reach(max(self.events, other.events), max(self.seconds, other.seconds),
                     self.groups | other.groups, max(self.ahead, other.ahead),
                     self.ahead_in_session and other.ahead_in_session, max(self.rounds, other.rounds))


def reach_of(trees: dict, *, derived_duration: bool) -> Reach:
    """The reach of every rule together; refuses (naming the rule) what live scoring cannot bound."""
    done: dict[str, Reach] = {}
    total = Reach()
    for name, tree in trees.items():  # rule order puts referenced rules first
        try:
            done[name] = _reach(tree, done, derived_duration)
        except LiveError as exc:
            exc.add_note(f"in rule {name!r}: {show(tree)}")
            raise
        total = total.merge(done[name])
    return total


def _reach(node: Node, done: dict, derived_duration: bool) -> Reach:
    if isinstance(node, RuleRef):
        return done[node.name]
    if isinstance(node, Field):
        return _field_reach(node.name, derived_duration)
    if isinstance(node, Apply) and node.func == "typical":
        return Reach()  # reads the event's key only; its field and 'among' are read when fitting
    inner = Reach()
    for child in node.children():
        inner = inner.merge(_reach(child, done, derived_duration))
    if isinstance(node, Apply):
        own = _call_reach(node)
        return inner if own is None else replace(own + inner, rounds=inner.rounds + 1)
    return inner


def _field_reach(name: str, derived_duration: bool) -> Reach:
    if name == "gap":
        return Reach(events=1)
    if name in _POSITIONS:
        return Reach(groups=frozenset([_POSITIONS[name]]))
    if name == "duration" and derived_duration:
        return Reach(ahead=1)
    return Reach()


def _call_reach(call: Apply) -> Reach | None:
    func, scope = call.func, call.arg("within") if "within" in dict(call.params) else None
    if func in ("typical", "zscore", "missing", "abs", "log", "min", "max"):
        return None
    if func == "prev":
        return _back(scope, call.arg("n"))
    if func == "next":
        if scope not in _EVENT_SCOPES:
            raise LiveError(f"LiveScorer: {show(call)} looks ahead within {scope!r}; the next event of a "
                            f"{scope} can come any number of events later, so live scoring cannot bound its "
                            "delay. Use within='session' or within='student' (the firing is then emitted "
                            "once the next events arrive), or score this rule in batch.")
        return Reach(ahead=call.arg("n"), ahead_in_session=scope == "session")
    if func == "count_recent":
        if call.arg("seconds") is not None:
            return Reach(seconds=float(call.arg("seconds")))
        return _back(scope, call.arg("actions") - 1)
    if scope == "student":  # count_before, streak, first
        raise LiveError(f"LiveScorer: {show(call)} reads the student's whole history (within='student' never "
                        "closes), so a live scorer's memory would grow without bound. Bound it by a scope "
                        "that closes: within='session', 'problem' or 'step'.")
    return Reach(groups=frozenset([scope]))


def _back(scope: str, n: int) -> Reach:
    if scope in _EVENT_SCOPES:
        return Reach(events=n)
    return Reach(groups=frozenset([scope]))


def earliest_read(trees: dict, seeds: np.ndarray, buffer) -> int:
    """The first buffered event that evaluating the rules at ``seeds`` (buffer positions) reads.

    ``buffer`` gives ``group_start(scope)`` (per position, the first event of its group),
    ``time`` and ``derived_duration``.  Every need is non-decreasing in the position it starts
    from (groups are contiguous runs, windows slide forward), so each argument's needs are taken
    from the earliest event it is read at.
    """
    memo: dict = {}
    low = [int(seeds.min()) if len(seeds) else 0]

    def visit(node: Node, at: np.ndarray) -> None:
        key = (node, at.tobytes())
        if key in memo:
            return
        memo[key] = True
        low[0] = min(low[0], int(at.min()))
        if isinstance(node, RuleRef):
            return visit(trees[node.name], at)
        if isinstance(node, Field):
            if node.name == "gap":
                low[0] = min(low[0], int(at.min()) - 1)
            elif node.name in _POSITIONS:
                low[0] = min(low[0], int(buffer.group_start(_POSITIONS[node.name])[at].min()))
            return None
        if isinstance(node, Apply) and node.func == "typical":
            return None
        reads = _read_from(node, at, buffer) if isinstance(node, Apply) else at
        for child in node.children():
            visit(child, reads)
        return None

    for tree in trees.values():
        visit(tree, np.unique(seeds))
    return max(low[0], 0)


def _read_from(call: Apply, at: np.ndarray, buffer) -> np.ndarray:
    """The earliest position each position's call reads its arguments at (as one-element array)."""
    func = call.func
    scope = call.arg("within") if "within" in dict(call.params) else None
    if func == "prev" and scope in _EVENT_SCOPES:
        first = at - call.arg("n")
    elif func == "count_recent" and call.arg("seconds") is not None:
        first = np.searchsorted(buffer.time, buffer.time_at(at) - float(call.arg("seconds")), side="left")
    elif func == "count_recent" and scope in _EVENT_SCOPES:
        first = at - (call.arg("actions") - 1)
    elif func in ("prev", "count_recent", "count_before", "streak", "first"):
        first = buffer.group_start(scope)[at]
    else:
        first = at
    return np.array([max(int(np.min(first)), 0)])
