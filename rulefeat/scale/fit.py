"""Fit rulefeat's transformers on a :class:`DistributedLog`, to the state one machine would learn.

Passes over the training students' partitions, never moving events to the client; each task builds its
partition's log, computes what the pass needs from it and keeps only that (:meth:`DistributedLog.submit`):

1. *Gather.* Each partition holding training students computes, on its worker, what the fitted state
   learns from: the values of every fitted rule norm (``typical`` / ``zscore``) with their keys, or in one
   task for the mined families the timing family's durations and gaps and the judged attempts of the BKT
   model (kept on the worker as arrays, from which each partition's attempt block is laid out).  Category codes are put
   on labels shared by all partitions (the sorted union, which is what one log of every event uses).
2. *Reduce.* Norm and timing values go to one worker task that fits them with the same code as one
   machine: quantiles and medians are exact order statistics, so they are equal to the bit; z-score
   moments are summed in the combined log's order (values are put back in student order), so they are
   equal to the bit too.  BKT runs EM with the E-step on every partition's attempt block and the sums and
   M-step on the client (:meth:`rulefeat.mastery.BKT.fit_expected`), one task per worker and iteration
   for all the blocks it holds; its parameters agree with one machine's to rounding only (expected counts
   are added per partition first), well inside ``rtol=1e-9``.

The mined features' selection (constant / duplicate / ``max_features``) reads the candidate features of
the training units, computed per partition (a third pass) and brought back as a units-by-features table.
"""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
from sklearn.base import clone

from .. import _frame
from ..errors import ParameterError, UnitError
from ..mined import FAMILIES, TrainingEvents
from ..mined.knowledge import MasteryState, attempt_arrays, judged_positions, students_kept
from ..mined.mastery import BKT, AttemptBlock
from ..mined.transformer import LogFeatures
from ..rules.transformer import RuleFeatures
from ..units import as_unit
from .extra import default_client
from .partitioned import DistributedLog

__all__ = ["fit", "shared_labels", "units_by_partition"]

# Category fields whose labels are not shared across partitions: students are disjoint, and derived
# session numbers are per log.
_OWN_LABELS = ("student", "session")


def fit(transformer, dlog: DistributedLog, X: pd.DataFrame, y=None, *, client=None):
    """A fitted copy of ``transformer`` (a RuleFeatures or LogFeatures) learned on ``dlog``'s partitions.

    Parameters
    ----------
    transformer : RuleFeatures or LogFeatures
        The specification (its ``log`` is ignored; the events come from ``dlog``).
    dlog : DistributedLog
        The partitioned events.
    X : pandas.DataFrame
        Unit keys of the training units; only their students' events are learned from (contract 2).
    y : array-like, optional
        Labels of X's rows (LogFeatures' ``max_features`` ranking).
    client : distributed.Client, optional
        The cluster; the current client by default.

    Returns
    -------
    RuleFeatures or LogFeatures
        Fitted, holding no log: score with :func:`rulefeat.scale.transform`, or bind it to a log.
    """
    client = default_client(client)
    X = _frame.as_pandas(X)
    if isinstance(transformer, RuleFeatures):
        return _Fit(transformer, dlog, X, client).rules()
    if isinstance(transformer, LogFeatures):
        return _Fit(transformer, dlog, X, client).mined(y)
    raise ParameterError(f"rulefeat.scale.fit: 'transformer' must be a RuleFeatures or LogFeatures. Got "
                         f"{type(transformer).__name__}.")


def units_by_partition(dlog: DistributedLog, students) -> dict[int, np.ndarray]:
    """``{partition: row positions}`` of the units whose student hashes to that partition."""
    part = dlog.partition_of(students)
    order = np.argsort(part, kind="stable")
    bounds = np.searchsorted(part[order], np.arange(dlog.n_partitions + 1))
    return {k: order[bounds[k]:bounds[k + 1]] for k in range(dlog.n_partitions) if bounds[k + 1] > bounds[k]}


def shared_labels(dlog: DistributedLog, client) -> dict[str, pd.Index]:
    """Labels of every category field over all partitions, sorted as one log of every event sorts them.

    Read from every partition once per ``dlog`` (:meth:`DistributedLog.per_partition`).
    """
    found = dlog.per_partition(client, _categories)
    fields = dict.fromkeys(name for cats in found for name in cats)
    out = {}
    for name in fields:
        values = [cats[name] for cats in found if name in cats]
        _, out[name] = _frame.factorize(pd.Series(np.concatenate([np.asarray(v, dtype=object) for v in values])))
    return out


def _categories(log) -> dict:
    if log is None:
        return {}
    return {name: log.categories(name) for name in log.fields
            if log.kind(name) == "category" and name not in _OWN_LABELS}


class _Fit:
    """One fit: the training students per partition and the tasks of both passes."""

    def __init__(self, transformer, dlog: DistributedLog, X: pd.DataFrame, client):
        self.est = clone(transformer)
        self.dlog, self.X, self.client = dlog, X, client
        self.unit = as_unit(self.est.unit, where=type(self.est).__name__)
        where = f"rulefeat.scale.fit({type(self.est).__name__})"
        if self.unit.student not in X.columns:
            raise UnitError(f"{where}: X has no {self.unit.student!r} column; its units need their student.")
        labels = pd.Series(pd.unique(X[self.unit.student]))
        known = labels[_frame.codes_for(labels, dlog.students) >= 0]
        if not len(known):
            raise UnitError(f"{where}: none of the students in X is in the event log; there is nothing to "
                            "learn from.")
        by_part = units_by_partition(dlog, known)
        self.train = {k: known.iloc[rows].to_numpy() for k, rows in by_part.items()}
        self.labels = shared_labels(dlog, client)
        first = min(self.train)
        # The transformer checks X and compiles against one training student's events: the schema (kinds)
        # only; every fitted value comes from the partitions below.
        sample = dlog.submit(client, first, _one_student, self.train[first][0]).result()
        self.est.set_params(log=sample)

    def _each(self, function, *args) -> list:
        """``function(partition log, training students, *args)`` on every partition with training students."""
        return [self.dlog.submit(self.client, k, function, students, *args) for k, students in self.train.items()]

    def _done(self):
        self.est.action_labels_ = [str(a) for a in self.labels.get("action", self.est.action_labels_)]
        self.est.set_params(log=None)
        return self.est

    def rules(self) -> RuleFeatures:
        program = self.est.prepare_fit(self.X)
        pieces = self._each(_norm_values, program, self.labels, self.dlog.students)
        fitted = self.client.submit(_fit_norms, program, self.labels, *pieces, pure=False).result()
        self.est.finish_fit(fitted)
        return self._done()

    def mined(self, y) -> LogFeatures:
        self.est.prepare_fit(self.X)
        settings = self.est.settings_
        fitted = [name for name in self.est.families_ if FAMILIES[name].fit is not None]
        gathered = [name for name in fitted if FAMILIES[name].gather is not None]
        for name in fitted:
            if name not in gathered and name != "mastery":
                raise ParameterError(f"rulefeat.scale.fit: the mined family {name!r} learns state but has no "
                                     "way to be fitted across partitions (give it gather/fit_gathered).")
        # One pass reads every partition for all the families; its results stay on the workers, split by use.
        skills = self.labels.get("skill") if "mastery" in fitted else None
        passes = self._each(_mined_pass, gathered, settings, self.labels, "mastery" in fitted, skills,
                            self.dlog.students)
        state = {name: None for name in self.est.families_}
        for name in gathered:
            pieces = [self.client.submit(_part, p, "gather", name, pure=False) for p in passes]
            state[name] = self.client.submit(_fit_gathered, name, settings, self.labels, *pieces,
                                             pure=False).result()
        if "mastery" in fitted:
            state["mastery"] = self._mastery(settings, [self.client.submit(_part, p, "judged", pure=False)
                                                        for p in passes], skills)
        del passes
        self.est.keep_family_state(state)
        self.est.finish_fit(self._candidates(), y, len(self.X))
        return self._done()

    def _candidates(self) -> dict:
        """Every candidate feature of the training units, computed where their students' events are."""
        rows = units_by_partition(self.dlog, self.X[self.unit.student])
        futures = [self.dlog.submit(self.client, k, _candidate_columns, self.est, self.X.iloc[r])
                   for k, r in rows.items()]
        parts = self.client.gather(futures)
        order = np.argsort(np.concatenate(list(rows.values())), kind="stable")
        return {name: np.concatenate([p[name] for p in parts])[order] for name in parts[0]}

    # -- BKT: the E-step on the partitions, the M-step here -----------------------------------------------
    def _mastery(self, settings, judged: list, skills) -> MasteryState | None:
        counts = self.client.gather([self.client.submit(_judged_counts, j, pure=False) for j in judged])
        codes = np.concatenate([c for c, _ in counts])
        n = np.concatenate([n for _, n in counts])
        if not n.sum():
            return None
        keep = None
        if settings.bkt_max_attempts is not None and n.sum() > settings.bkt_max_attempts:
            order = np.argsort(codes)
            keep = codes[order][students_kept(n[order], settings)]
        blocks = [self.client.submit(_attempt_block, j, keep, pure=False) for j in judged]
        del judged  # the judged attempts are freed once their blocks are laid out
        n_codes = max(self.client.gather([self.client.submit(_n_codes, b, pure=False) for b in blocks]))
        blocks = _Blocks(self.client, blocks)
        skill_counts = self._sum(_skill_counts, blocks, n_codes)
        options = {**settings.bkt_options, "random_state": settings.random_state}
        model = BKT(**options).fit_expected(
            skill_counts, lambda own: self._sum(_totals, blocks, own),
            lambda own, model, params: self._sum(_expected, blocks, own, model, params))
        return MasteryState(model, skills)

    def _sum(self, function, blocks: _Blocks, *args) -> np.ndarray:
        """``function(block, *args)`` summed over the blocks in partition order."""
        parts = blocks.each(function, *args)
        total = parts[0].copy()
        for part in parts[1:]:  # in partition order, so a repeated fit adds in the same order
            total += part
        return total


class _Blocks:
    """Attempt blocks held on the workers, run on in one task per worker (an EM iteration is one round trip
    of as many tasks as workers, not as partitions); results come back in the blocks' order."""

    def __init__(self, client, blocks: list):
        self.client, self.blocks = client, blocks
        held = client.who_has(blocks)
        self.groups: dict = {}
        for j, block in enumerate(blocks):
            where = tuple(held.get(block.key) or ())[:1] or (None,)
            self.groups.setdefault(where[0], []).append(j)

    def each(self, function, *args) -> list:
        futures = [self.client.submit(_on_blocks, function, [self.blocks[j] for j in js], *args, pure=False,
                                      workers=None if worker is None else [worker], allow_other_workers=True)
                   for worker, js in self.groups.items()]
        out: list = [None] * len(self.blocks)
        for js, results in zip(self.groups.values(), self.client.gather(futures), strict=True):
            for j, result in zip(js, results, strict=True):
                out[j] = result
        return out


# -- tasks (run on the workers) ---------------------------------------------------------------------------
def _one_student(log, student):
    return log.for_students([student])


def _recode(codes: np.ndarray, local: pd.Index | None, shared: pd.Index | None) -> np.ndarray:
    if local is None or shared is None:
        return codes
    into = _frame.codes_for(local, shared)
    return np.where(codes >= 0, into[np.maximum(codes, 0)] if len(into) else -1, -1).astype(np.int32)


def _norm_values(log, students, program, labels, all_students):
    sub = log.for_students(students)
    # Each student's number in the whole dataset (int32 halves what travels to the reducer); looked up once
    # per student, not per value.
    numbers = _frame.codes_for(sub.students, all_students).astype(np.int32)
    out = []
    for piece in program.norm_values(sub):
        shared = labels[piece["per"]]
        order = numbers[piece["student"]]
        out.append((piece["per"], piece["values"], _recode(piece["keys"], piece["labels"], shared), order))
    return out


def _fit_norms(program, labels, *pieces):
    gathered = []
    for j, (per, *_) in enumerate(pieces[0]):
        # One partition's values are in its log's order (student, then time): a stable sort on the
        # student puts them in the order of one log of all the events, so sums add up the same way.
        # Each concatenation is dropped as soon as it is put in order: the reducer's memory peaks lower.
        order = np.argsort(np.concatenate([p[j][3] for p in pieces]), kind="stable")
        gathered.append({"values": np.concatenate([p[j][1] for p in pieces])[order],
                         "keys": np.concatenate([p[j][2] for p in pieces])[order], "labels": labels[per]})
        del order
    return program.fit_values(gathered)


def _mined_pass(log, students, gathered, settings, labels, mastery, skills, all_students) -> dict:
    """All that the mined families' fit needs from one partition: gathered pieces and judged attempts."""
    train = TrainingEvents(log, log.student_codes(students))
    out = {"gather": {name: _gather(train, name, settings, labels) for name in gathered}}
    if mastery:
        judged = judged_positions(train)
        student, skill, correct = attempt_arrays(log, judged, skills)
        # Each attempt's student numbered as in the whole dataset, for the attempt budget's choice.
        out["judged"] = (_frame.codes_for(log.students, all_students)[student], skill, correct)
    return out


def _part(result: dict, *keys):
    for key in keys:
        result = result[key]
    return result


def _gather(train, name, settings, labels):
    pieces = FAMILIES[name].gather(train, settings)
    codes = {key: _recode(c, pieces["labels"][key], labels.get(key)) for key, c in pieces["codes"].items()}
    shared = {key: (labels.get(key) if pieces["labels"][key] is not None else None) for key in pieces["labels"]}
    return {**pieces, "codes": codes, "labels": shared}


def _fit_gathered(name, settings, labels, *pieces):
    first = pieces[0]
    merged = {key: np.concatenate([p[key] for p in pieces]) for key in first if key not in ("codes", "labels")}
    merged["codes"] = {key: np.concatenate([p["codes"][key] for p in pieces]) for key in first["codes"]}
    merged["labels"] = first["labels"]
    return FAMILIES[name].fit_gathered(merged, settings)


def _candidate_columns(log, est, X):
    if log is None:
        raise UnitError(f"rulefeat.scale: {len(X)} units name students that are not in the event log "
                        f"(first {X.iloc[0].to_dict()!r}).")
    local = copy.deepcopy(est)
    local.set_params(log=log)
    return local.candidate_columns(X)


def _judged_counts(judged):
    return np.unique(judged[0], return_counts=True)


def _attempt_block(judged, keep):
    """The partition's attempt block: its judged attempts, of the students ``keep`` (dataset codes) if given."""
    student, skill, correct = judged
    if keep is not None:
        chosen = np.isin(student, keep)
        student, skill, correct = student[chosen], skill[chosen], correct[chosen]
    return AttemptBlock(student, skill, correct)


def _on_blocks(function, blocks, *args) -> list:
    return [function(block, *args) for block in blocks]


def _n_codes(block) -> int:
    return block.n_skill_codes


def _skill_counts(block, n_codes):
    return block.skill_counts(n_codes)


def _totals(block, own):
    return block.totals(own)


def _expected(block, own, model, params):
    return block.expected(own, model, params)

