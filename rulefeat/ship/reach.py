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

__all__ = ["Reach", "reach_of", "read_paths", "earliest_read", "CLOSING_SCOPES"]

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


def read_paths(trees: dict) -> list[tuple]:
    """Every distinct chain of reads from a rule's root to what it reads at the end, found once.

    A chain is a tuple of steps: ``("back", n)`` (n events back), ``("seconds", t)``, ``("group", scope)``
    (back to the first event of the group), ending with ``("gap",)`` (one more event back) or
    nothing.  :func:`earliest_read` follows each chain from the positions still pending.
    """
    paths: set = set()
    stack = [(tree, ()) for tree in trees.values()]
    seen: set = set()
    while stack:
        node, path = stack.pop()
        if (node, path) in seen:
            continue
        seen.add((node, path))
        if isinstance(node, RuleRef):
            stack.append((trees[node.name], path))
        elif isinstance(node, Field):
            if node.name == "gap":
                paths.add((*path, ("gap",)))
            elif node.name in _POSITIONS:
                paths.add((*path, ("group", _POSITIONS[node.name])))
            else:
                paths.add(path)
        elif not (isinstance(node, Apply) and node.func == "typical"):
            step = _read_step(node) if isinstance(node, Apply) else None
            longer = path if step is None else (*path, step)
            paths.add(longer)
            stack.extend((child, longer) for child in node.children())
    return sorted(paths, key=repr)


def earliest_read(paths: list, seeds: np.ndarray, buffer) -> int:
    """The first buffered event that evaluating the rules at ``seeds`` (buffer positions) reads.

    ``buffer`` gives ``group_start(scope)`` (per position, the first event of its group) and
    ``time_at(positions)``.  Each need is non-decreasing in the position it starts from (groups are
    contiguous runs, windows slide forward), so after the first step a chain follows only the
    earliest position reached; the first step takes every seed, since an event without a key
    (a step-less event) belongs to no group.
    """
    low = int(seeds.min()) if len(seeds) else 0
    for path in paths:
        at = seeds
        for step in path:
            at = _follow(step, at, buffer)
        low = min(low, int(at.min()) if len(at) else low)
    return max(low, 0)


def _read_step(call: Apply):
    func = call.func
    scope = call.arg("within") if "within" in dict(call.params) else None
    if func == "prev" and scope in _EVENT_SCOPES:
        return ("back", call.arg("n"))
    if func == "count_recent" and call.arg("seconds") is not None:
        return ("seconds", float(call.arg("seconds")))
    if func == "count_recent" and scope in _EVENT_SCOPES:
        return ("back", call.arg("actions") - 1)
    if func in ("prev", "count_recent", "count_before", "streak", "first"):
        return ("group", scope)
    return None


def _follow(step: tuple, at: np.ndarray, buffer) -> np.ndarray:
    if step[0] == "back":
        out = at - step[1]
    elif step[0] == "gap":
        out = at - 1
    elif step[0] == "seconds":
        out = np.searchsorted(buffer.time, buffer.time_at(at) - step[1], side="left")
    else:
        out = buffer.group_start(step[1])[at]
    return np.array([max(int(np.min(out)), 0)])
