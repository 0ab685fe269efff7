"""Bayesian Knowledge Tracing (BKT): per-skill mastery estimates from attempt sequences.

The standard four-parameter model (Corbett & Anderson 1995) is a two-state hidden
Markov model per (student, skill) sequence: a student either knows the skill or
not; ``p_init`` is P(known) at the first attempt, ``p_learn`` the chance of
moving from not-known to known after each attempt (no forgetting), ``p_guess``
P(correct | not known) and ``p_slip`` P(wrong | known).  For one attempt with
prior P(known) = L::

    P(correct)          = L (1 - S) + (1 - L) G
    posterior | correct = L (1 - S) / P(correct)
    posterior | wrong   = L S / (1 - P(correct))
    next L              = posterior + (1 - posterior) T

Input layout
------------
Every function takes three aligned 1-D arrays, sorted by student and then by
time (a stable sort, so rows of one student keep their order):

* ``student`` -- integer student codes >= 0, non-decreasing;
* ``skill`` -- integer skill codes >= 0, or -1 for an attempt with no skill label;
* ``correct`` -- 0/1 (or bool) outcome of each attempt.

A (student, skill) sequence is the subsequence of rows with that pair, in row
order.  Rows with skill -1 form one sequence per student.  Skill codes are
expected to be dense (0 .. n_skills - 1): fitted arrays are sized by the largest
code.  Row numbers in error messages are 0-based positions in the arrays.

Fitting
-------
:class:`BKT` fits one model per skill by EM (Baum-Welch) over all that skill's
sequences, plus one *pooled* model with one parameter set shared by every
(student, skill) sequence of the training data, skill -1 included.  The pooled
model keeps the sequences split by skill (knowledge of one skill says nothing
about another) so it describes the same kind of sequence it is later applied
to.  It is used for skills never seen in training, for skills with fewer than
``min_attempts`` training attempts, and for rows with skill -1.
"""

from __future__ import annotations

import numbers
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
from sklearn.base import BaseEstimator
from sklearn.utils.validation import check_is_fitted

from ..errors import LogSchemaError, ParameterError
from . import _bkt_kernels

__all__ = ["BKT", "BKTParams", "MasteryTrace", "AttemptBlock"]

#: Every probability is kept in [PROB_FLOOR, 1 - PROB_FLOOR] so no likelihood is 0.
PROB_FLOOR = 1e-6
_PARAM_NAMES = ("p_init", "p_learn", "p_guess", "p_slip")
# Ranges of the random starting points, as fractions of each parameter's upper bound.
_START_LOW = np.array([0.05, 0.02, 0.1, 0.1])
_START_HIGH = np.array([0.95, 0.5, 0.9, 0.9])


def _bad(mask: np.ndarray, values: np.ndarray) -> str:
    """'2 bad values, first 7 (rows 3, 9)' for the True positions of ``mask``."""
    n = int(mask.sum())
    first = values[mask][0].item()
    return f"{n} bad value{'s' if n > 1 else ''}, first {first!r} ({_rows(mask)})"


def _rows(mask: np.ndarray, limit: int = 5) -> str:
    """'rows 3, 7, 9 (and 12 more)' for the True positions of ``mask`` (0-based)."""
    rows = np.flatnonzero(mask)
    head = ", ".join(str(r) for r in rows[:limit])
    more = f" (and {len(rows) - limit} more)" if len(rows) > limit else ""
    return f"{'row' if len(rows) == 1 else 'rows'} {head}{more}"


class MasteryTrace(NamedTuple):
    """Per-row output of the forward pass, aligned with the input rows.

    Attributes
    ----------
    p_known_before : ndarray of float
        P(known) just before the attempt, given the earlier attempts of the sequence.
    p_known_after : ndarray of float
        P(known) after observing the attempt and the learning transition, i.e. the
        prior of the sequence's next attempt.
    p_correct : ndarray of float
        Predicted P(correct) of the attempt, before seeing it.
    """

    p_known_before: np.ndarray
    p_known_after: np.ndarray
    p_correct: np.ndarray


# ----------------------------------------------------------------------------- input checks
def _as_codes(values, name: str, where: str) -> np.ndarray:
    """A 1-D int64 array from integer-valued input, or a LogSchemaError naming the rows."""
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise LogSchemaError(f"{where}: {name!r} must be a 1-D array; got shape {arr.shape}.")
    if arr.dtype.kind in "iub":
        return arr.astype(np.int64, copy=False)
    if arr.dtype.kind != "f":
        raise LogSchemaError(f"{where}: {name!r} must hold integer codes; got dtype {arr.dtype}.")
    bad = ~np.isfinite(arr) | (arr != np.round(arr))
    if bad.any():
        raise LogSchemaError(
            f"{where}: {name!r} must hold integer codes (whole numbers); {_bad(bad, arr)}."
        )
    return arr.astype(np.int64)


def _check_arrays(student, skill, correct, where: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Validate the three aligned arrays; return them as int64, int64, int8."""
    student = _as_codes(student, "student", where)
    skill = _as_codes(skill, "skill", where)
    correct = _as_codes(correct, "correct", where)
    if not len(student) == len(skill) == len(correct):
        raise LogSchemaError(
            f"{where}: 'student', 'skill' and 'correct' must have the same length; got "
            f"{len(student)}, {len(skill)} and {len(correct)}."
        )
    checks = (
        (correct, (correct != 0) & (correct != 1), "'correct' must be 0 or 1"),
        (student, student < 0, "'student' codes must be >= 0"),
        (skill, skill < -1, "'skill' codes must be >= 0, or -1 for no skill label"),
    )
    for arr, bad, what in checks:
        if bad.any():
            raise LogSchemaError(f"{where}: {what}; {_bad(bad, arr)}.")
    back = np.zeros(len(student), dtype=bool)
    back[1:] = student[1:] < student[:-1]
    if back.any():
        i = int(np.flatnonzero(back)[0])
        raise LogSchemaError(
            f"{where}: rows must be sorted by student, then time; {_rows(back)} go back to a smaller "
            f"student code (row {i} has student {student[i]} after row {i - 1} with {student[i - 1]}). "
            "Sort with a stable sort on student, e.g. np.argsort(student, kind='stable')."
        )
    return student, skill, correct.astype(np.int8)


@dataclass(frozen=True)
class _Layout:
    """Rows permuted into contiguous (student, skill) sequences: skill, then student, then time."""

    order: np.ndarray  # permuted row -> input row
    correct: np.ndarray  # int8, permuted
    bounds: np.ndarray  # int64, rows of sequence s are bounds[s]:bounds[s + 1]
    seq_skill: np.ndarray  # int64, skill code of each sequence (non-decreasing)

    @classmethod
    def build(cls, student: np.ndarray, skill: np.ndarray, correct: np.ndarray) -> _Layout:
        # Rows are already sorted by student then time, so a stable sort on skill
        # groups each skill's rows by student, each student's rows in time order.
        order = np.argsort(skill, kind="stable")
        sk, st = skill[order], student[order]
        new = np.ones(len(order), dtype=bool)
        new[1:] = (sk[1:] != sk[:-1]) | (st[1:] != st[:-1])
        starts = np.flatnonzero(new)
        bounds = np.append(starts, len(order)).astype(np.int64)
        return cls(order, np.ascontiguousarray(correct[order]), bounds, sk[starts])

    def skill_range(self, codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Sequence ranges [lo, hi) of the given skill codes."""
        lo = np.searchsorted(self.seq_skill, codes, side="left")
        hi = np.searchsorted(self.seq_skill, codes, side="right")
        return lo.astype(np.int64), hi.astype(np.int64)

    def unpermute(self, values: np.ndarray) -> np.ndarray:
        out = np.empty_like(values)
        out[self.order] = values
        return out


# ----------------------------------------------------------------------------- parameters
def _readonly(values, dtype) -> np.ndarray:
    arr = np.array(values, dtype=dtype, copy=True).reshape(-1)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class BKTParams:
    """Fitted BKT parameters, indexed by skill code, with a pooled fallback.

    The four probability arrays hold, at index ``k``, the parameters used for
    skill code ``k``.  Skills without their own model (``has_own_model`` False:
    unseen in training or with too few attempts) hold the pooled values there,
    and any code past the end of the arrays, or -1, uses the pooled values too.

    Parameters
    ----------
    p_init, p_learn, p_guess, p_slip : array-like of float, shape (n_skills,)
        P(known) at the first attempt, P(learn) per attempt, P(correct | not
        known), P(wrong | known); each in the open interval (0, 1).
    has_own_model : array-like of bool, shape (n_skills,)
        Whether the skill was fitted on its own.
    n_attempts : array-like of int, shape (n_skills,)
        Training attempts per skill (also for skills without their own model).
    log_likelihood : array-like of float, shape (n_skills,)
        Training log-likelihood of each skill's own model; NaN without one.
    pooled_init, pooled_learn, pooled_guess, pooled_slip : float
        Parameters of the pooled model.
    pooled_n_attempts : int
        Attempts the pooled model was fitted on.
    pooled_log_likelihood : float
        Its training log-likelihood (NaN when set by hand).

    Examples
    --------
    >>> params = BKTParams.single(p_init=0.4, p_learn=0.1, p_guess=0.2, p_slip=0.1)
    >>> trace = params.forward(student=[0, 0, 0], skill=[-1, -1, -1], correct=[1, 0, 1])
    >>> [round(float(p), 6) for p in trace.p_correct]
    [0.48, 0.7425, 0.459612]
    """

    p_init: np.ndarray
    p_learn: np.ndarray
    p_guess: np.ndarray
    p_slip: np.ndarray
    has_own_model: np.ndarray
    n_attempts: np.ndarray
    log_likelihood: np.ndarray
    pooled_init: float
    pooled_learn: float
    pooled_guess: float
    pooled_slip: float
    pooled_n_attempts: int = 0
    pooled_log_likelihood: float = float("nan")
    _table: np.ndarray = field(init=False, repr=False)

    def __post_init__(self) -> None:
        arrays = {name: _readonly(getattr(self, name), float) for name in _PARAM_NAMES}
        arrays["has_own_model"] = _readonly(self.has_own_model, bool)
        arrays["n_attempts"] = _readonly(self.n_attempts, np.int64)
        arrays["log_likelihood"] = _readonly(self.log_likelihood, float)
        lengths = {name: len(arr) for name, arr in arrays.items()}
        if len(set(lengths.values())) > 1:
            raise ParameterError(f"BKTParams: the per-skill arrays must have one length; got {lengths}.")
        pooled = [float(getattr(self, f"pooled_{n[2:]}")) for n in _PARAM_NAMES]
        for name, values in [*((n, arrays[n]) for n in _PARAM_NAMES), ("pooled", np.array(pooled))]:
            bad = ~((values > 0) & (values < 1))
            if bad.any():
                raise ParameterError(
                    f"BKTParams: {name} must lie strictly between 0 and 1; got {values[bad][0].item()!r} "
                    f"at {_rows(bad).replace('row', 'index')}."
                )
        for name, arr in arrays.items():
            object.__setattr__(self, name, arr)
        # One (n_skills + 1, 4) lookup table; the last row is the pooled model.
        table = np.vstack([np.column_stack([arrays[n] for n in _PARAM_NAMES]), pooled])
        table.setflags(write=False)
        object.__setattr__(self, "_table", table)

    @classmethod
    def single(cls, p_init: float, p_learn: float, p_guess: float, p_slip: float) -> BKTParams:
        """One parameter set used for every skill (no per-skill models).

        Use it to run the forward pass with published or hand-set parameters.
        """
        empty = np.empty(0)
        return cls(empty, empty, empty, empty, np.empty(0, bool), np.empty(0, np.int64), empty,
                   p_init, p_learn, p_guess, p_slip)

    @property
    def n_skills(self) -> int:
        """Length of the per-skill arrays (largest training skill code + 1)."""
        return len(self.p_init)

    @property
    def pooled(self) -> dict[str, float]:
        """The pooled parameters as a dict keyed by parameter name."""
        return dict(zip(_PARAM_NAMES, (float(v) for v in self._table[-1]), strict=True))

    def for_skills(self, skill) -> np.ndarray:
        """Parameters ``(p_init, p_learn, p_guess, p_slip)`` used for each code, shape (n, 4)."""
        codes = np.asarray(skill, dtype=np.int64)
        idx = np.where((codes >= 0) & (codes < self.n_skills), codes, self.n_skills)
        return self._table[idx]

    def forward(self, student, skill, correct) -> MasteryTrace:
        """Run the forward pass over the attempts (see the module docstring for the layout).

        Returns
        -------
        MasteryTrace
            ``p_known_before``, ``p_known_after`` and ``p_correct`` per input row.
        """
        trace, _ = self._forward(student, skill, correct, "BKTParams.forward")
        return trace

    def log_likelihood_of(self, student, skill, correct) -> float:
        """Total log-likelihood of the attempts under these parameters."""
        _, ll = self._forward(student, skill, correct, "BKTParams.log_likelihood_of")
        return ll

    def _forward(self, student, skill, correct, where: str) -> tuple[MasteryTrace, float]:
        student, skill, correct = _check_arrays(student, skill, correct, where)
        if len(student) == 0:
            empty = np.empty(0)
            return MasteryTrace(empty, empty.copy(), empty.copy()), 0.0
        lay = _Layout.build(student, skill, correct)
        seq_params = np.ascontiguousarray(self.for_skills(lay.seq_skill))
        before, after, p_right, ll = _bkt_kernels.forward(lay.correct, lay.bounds, seq_params)
        trace = MasteryTrace(lay.unpermute(before), lay.unpermute(after), lay.unpermute(p_right))
        return trace, float(ll)


class AttemptBlock:
    """Training attempts of some students, laid out once for EM: one block's share of :meth:`BKT.fit_expected`.

    Blocks of disjoint students (one per partition of a cluster, say) each give their attempt counts
    and expected counts; their sums drive one EM that fits the model of all the attempts together.
    The arrays follow the module's input layout; skill codes must be shared by every block.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> student, skill = np.repeat(np.arange(60), 10), np.tile(np.repeat([0, 1], 5), 60)
    >>> correct = (rng.random(600) < 0.7).astype(np.int8)
    >>> blocks = [AttemptBlock(student[:300], skill[:300], correct[:300]),
    ...           AttemptBlock(student[300:], skill[300:], correct[300:])]
    >>> counts = sum(b.skill_counts(2) for b in blocks)
    >>> model = BKT(random_state=0).fit_expected(
    ...     counts, lambda own: sum(b.totals(own) for b in blocks),
    ...     lambda own, m, p: sum(b.expected(own, m, p) for b in blocks))
    >>> whole = BKT(random_state=0).fit(student, skill, correct)
    >>> bool(np.allclose(model.params_.p_learn, whole.params_.p_learn, rtol=1e-9))
    True
    """

    def __init__(self, student, skill, correct):
        student, skill, correct = _check_arrays(student, skill, correct, "AttemptBlock")
        self._skill = skill
        self._lay = _Layout.build(student, skill, correct)

    def __len__(self) -> int:
        return len(self._skill)

    @property
    def n_skill_codes(self) -> int:
        """Largest skill code + 1 (0 without skill labels): the length :meth:`BKT.fit` gives its arrays."""
        known = self._skill[self._skill >= 0]
        return int(known.max()) + 1 if len(known) else 0

    def skill_counts(self, n_skills: int) -> np.ndarray:
        """Attempts per skill code ``0 .. n_skills - 1`` (-1 rows are not counted)."""
        known = self._skill[self._skill >= 0]
        return np.bincount(known, minlength=n_skills)[:n_skills].astype(np.int64)

    def _ranges(self, own: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        lo, hi = self._lay.skill_range(np.asarray(own, dtype=np.int64))
        return np.append(lo, 0), np.append(hi, len(self._lay.bounds) - 1)

    def totals(self, own) -> np.ndarray:
        """(sequences, attempts, correct attempts) of each model: the skills ``own``, then the pooled one."""
        lo, hi = self._ranges(own)
        bounds, right = self._lay.bounds, np.concatenate([[0], np.cumsum(self._lay.correct, dtype=np.int64)])
        return np.column_stack([hi - lo, bounds[hi] - bounds[lo], right[bounds[hi]] - right[bounds[lo]]])

    def expected(self, own, model, params) -> np.ndarray:
        """Log-likelihood and expected counts of each task (model index, parameters) over this block."""
        lo, hi = self._ranges(own)
        model = np.asarray(model, dtype=np.int64)
        return _bkt_kernels.expected_counts(self._lay.correct, self._lay.bounds, lo[model], hi[model],
                                            np.ascontiguousarray(params, dtype=np.float64))


# ----------------------------------------------------------------------------- estimator
def _is_int(value) -> bool:
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def _is_real(value) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool) and np.isfinite(value)


# name -> (test, what is expected); checked in one place by BKT._validate_params.
_CONSTRAINTS = {
    "n_restarts": (lambda v: _is_int(v) and v >= 1, "an int >= 1"),
    "max_iter": (lambda v: _is_int(v) and v >= 1, "an int >= 1"),
    "tol": (lambda v: _is_real(v) and v >= 0, "a float >= 0"),
    "guess_max": (lambda v: _is_real(v) and PROB_FLOOR < v < 1 - PROB_FLOOR, "a float in (1e-6, 1 - 1e-6)"),
    "slip_max": (lambda v: _is_real(v) and PROB_FLOOR < v < 1 - PROB_FLOOR, "a float in (1e-6, 1 - 1e-6)"),
    "min_attempts": (lambda v: _is_int(v) and v >= 1, "an int >= 1"),
    "random_state": (
        lambda v: v is None or _is_int(v) or isinstance(v, np.random.Generator),
        "None, an int or a numpy.random.Generator",
    ),
}


class BKT(BaseEstimator):
    """Fit per-skill Bayesian Knowledge Tracing models by EM and run the forward pass.

    Parameters
    ----------
    n_restarts : int, default=3
        Random starting points per model; the one with the best training
        log-likelihood is kept (EM finds local optima).
    max_iter : int, default=200
        Maximum EM iterations per start.
    tol : float, default=1e-6
        Stop when the mean log-likelihood per attempt improves by less than this.
    guess_max : float, default=0.3
        Upper bound on ``p_guess``.
    slip_max : float, default=0.1
        Upper bound on ``p_slip``.  Both bounds are common practice, no source:
        they guard against degenerate fits in which the "known" state comes to
        mean "not known".  ``guess_max + slip_max`` must be below 1.
    min_attempts : int, default=50
        A skill with fewer training attempts uses the pooled model.  Four
        parameters (one of them, ``p_init``, informed only by first attempts)
        are poorly determined by a few dozen 0/1 outcomes, and such a fit mostly
        reflects its starting point and the bounds; 50 is common practice, no
        source.
    random_state : None, int or numpy.random.Generator, default=None
        Seed of the starting points (``numpy.random.default_rng``); a fixed
        seed gives identical fits.

    Attributes
    ----------
    params_ : BKTParams
        Fitted parameters per skill and the pooled model.
    ll_history_ : dict of int to ndarray
        Training log-likelihood at each EM iteration of the best start, per
        skill with its own model.  It never decreases.
    pooled_ll_history_ : ndarray
        The same for the pooled model.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> student = np.repeat(np.arange(200), 10)
    >>> skill = np.tile(np.repeat([0, 1], 5), 200)
    >>> correct = (rng.random(2000) < 0.7).astype(np.int8)
    >>> model = BKT(random_state=0).fit(student, skill, correct)
    >>> model.forward(student, skill, correct).p_correct.shape
    (2000,)
    """

    def __init__(
        self,
        *,
        n_restarts: int = 3,
        max_iter: int = 200,
        tol: float = 1e-6,
        guess_max: float = 0.3,
        slip_max: float = 0.1,
        min_attempts: int = 50,
        random_state: int | np.random.Generator | None = None,
    ) -> None:
        self.n_restarts = n_restarts
        self.max_iter = max_iter
        self.tol = tol
        self.guess_max = guess_max
        self.slip_max = slip_max
        self.min_attempts = min_attempts
        self.random_state = random_state

    def _validate_params(self) -> None:
        for name, (test, expected) in _CONSTRAINTS.items():
            value = getattr(self, name)
            if not test(value):
                raise ParameterError(
                    f"The {name!r} parameter of BKT must be {expected}. Got {value!r} instead."
                )
        if self.guess_max + self.slip_max >= 1:
            raise ParameterError(
                "The 'guess_max' and 'slip_max' parameters of BKT must sum to less than 1, so that a "
                f"student who knows the skill is likelier to be right. Got {self.guess_max!r} + "
                f"{self.slip_max!r} instead."
            )

    def fit(self, student, skill, correct) -> BKT:
        """Fit one model per skill with at least ``min_attempts`` attempts, and the pooled model.

        Parameters
        ----------
        student, skill, correct : array-like of int, shape (n_attempts,)
            The training attempts, sorted by student then time (see the module docstring).

        Returns
        -------
        self : BKT
        """
        self._validate_params()
        student, skill, correct = _check_arrays(student, skill, correct, "BKT.fit")
        if len(student) == 0:
            raise LogSchemaError("BKT.fit: got no attempts; fitting needs at least one.")
        lay = _Layout.build(student, skill, correct)
        counts = np.bincount(skill[skill >= 0], minlength=0)
        own = np.flatnonzero(counts >= self.min_attempts)
        lo, hi = lay.skill_range(own)
        # The pooled model is the last model and spans every sequence.
        model_lo = np.append(lo, 0)
        model_hi = np.append(hi, len(lay.bounds) - 1)
        params, lls, hists = self._run_em(lay, model_lo, model_hi)
        self.params_ = self._make_params(counts, own, params, lls, len(student))
        self.ll_history_ = {int(s): h for s, h in zip(own, hists[:-1], strict=True)}
        self.pooled_ll_history_ = hists[-1]
        return self

    def _bounds(self) -> tuple[np.ndarray, np.ndarray]:
        upper = 1 - PROB_FLOOR
        return (np.full(4, PROB_FLOOR), np.array([upper, upper, self.guess_max, self.slip_max]))

    def _starts(self, n_models: int) -> np.ndarray:
        """Starting points, shape (n_models * n_restarts, 4), model-major."""
        _, upper = self._bounds()
        rng = np.random.default_rng(self.random_state)
        span = upper * (_START_HIGH - _START_LOW)
        # Drawn start-major, so a model's first starts do not change with n_restarts.
        inits = upper * _START_LOW + span * rng.random((self.n_restarts, n_models, 4)).transpose(1, 0, 2)
        return inits.reshape(-1, 4)

    def _best_starts(self, params, lls, hist):
        n_starts = self.n_restarts
        n_models = len(lls) // n_starts
        # Ties go to the first start (argmax), so the choice is deterministic.
        best = np.arange(n_models) * n_starts + np.argmax(lls.reshape(n_models, n_starts), axis=1)
        hists = [h[~np.isnan(h)] for h in hist[best]]
        return params[best], lls[best], hists

    def _run_em(self, lay: _Layout, model_lo: np.ndarray, model_hi: np.ndarray):
        """EM from every start of every model; keep each model's best start."""
        lower, upper = self._bounds()
        task_lo, task_hi = np.repeat(model_lo, self.n_restarts), np.repeat(model_hi, self.n_restarts)
        params, lls, hist = self._em_tasks(lay, task_lo, task_hi, self._starts(len(model_lo)), lower, upper)
        return self._best_starts(params, lls, hist)

    def fit_expected(self, counts, totals, expected) -> BKT:
        """Fit by EM from summed expected counts instead of the attempts themselves.

        The same EM as :meth:`fit` (starts, M-step, stopping rule, choice of the best start), with the
        E-step delegated: for attempts split into :class:`AttemptBlock` s of disjoint students (e.g. one
        per partition of a cluster), the sums over the blocks of ``counts``, ``totals`` and
        ``expected`` are exactly what one block of all the attempts gives, up to the order in which
        floating-point sums are added.

        Parameters
        ----------
        counts : array-like of int
            Training attempts per skill code (:attr:`AttemptBlock.skill_counts`, summed).
        totals : callable
            ``totals(own) -> (n_models, 3)`` sequences, attempts and correct attempts of each model:
            the skills ``own`` (codes with their own model), then the pooled model.
        expected : callable
            ``expected(own, model, params) -> (n_tasks, 5)``: log-likelihood and expected counts of
            task ``k`` (model index ``model[k]``, parameters ``params[k]``), summed over the blocks.
        """
        self._validate_params()
        counts = np.asarray(counts, dtype=np.int64)
        own = np.flatnonzero(counts >= self.min_attempts)
        tot = np.asarray(totals(own), dtype=np.int64).reshape(len(own) + 1, 3)
        if tot[-1, 1] == 0:
            raise LogSchemaError("BKT.fit_expected: got no attempts; fitting needs at least one.")
        model = np.repeat(np.arange(len(own) + 1), self.n_restarts)
        params, lls, hist = self._em_lockstep(self._starts(len(own) + 1), model, tot, own, expected)
        params, lls, hists = self._best_starts(params, lls, hist)
        self.params_ = self._make_params(counts, own, params, lls, int(tot[-1, 1]))
        self.ll_history_ = {int(s): h for s, h in zip(own, hists[:-1], strict=True)}
        self.pooled_ll_history_ = hists[-1]
        return self

    def _em_lockstep(self, inits, model, tot, own, expected):
        """:func:`_bkt_kernels.em_fit`'s loop, every task advancing one iteration per E-step call."""
        lower, upper = self._bounds()
        n_tasks, max_iter, tol = len(model), int(self.max_iter), float(self.tol)
        p, prev_p = inits.copy(), inits.copy()
        prev_ll = np.full(n_tasks, -np.inf)
        params, lls = np.empty((n_tasks, 4)), np.empty(n_tasks)
        hist = np.full((n_tasks, max_iter + 1), np.nan)
        active = np.arange(n_tasks)
        for it in range(max_iter + 1):
            stats = np.asarray(expected(own, model[active], p[active]), dtype=np.float64)
            going = []
            for j, k in enumerate(active):
                n_seq, n_rows, n_right = (int(v) for v in tot[model[k]])
                ll = stats[j, 0]
                hist[k, it] = ll
                if ll < prev_ll[k]:  # rounding noise at convergence: keep the better point (as em_fit)
                    params[k], lls[k] = prev_p[k], prev_ll[k]
                elif it == max_iter or ll - prev_ll[k] < tol * n_rows:
                    params[k], lls[k] = p[k], ll
                else:
                    prev_p[k], prev_ll[k] = p[k], ll
                    p[k] = _bkt_kernels.m_step(p[k].copy(), stats[j, 1:].copy(), n_seq, n_rows, float(n_right),
                                               lower, upper)
                    going.append(k)
            active = np.asarray(going, dtype=np.int64)
            if not len(active):
                break
        return params, lls, hist

    def _em_tasks(self, lay, task_lo, task_hi, inits, lower, upper):
        """Run the EM tasks on two threads (the kernel releases the GIL), balanced by rows."""
        rows = lay.bounds[task_hi] - lay.bounds[task_lo]
        # Greedy longest-first assignment to the less loaded of two workers.
        load, shares = [0, 0], [[], []]
        for k in np.argsort(-rows, kind="stable"):
            w = int(load[1] < load[0])
            shares[w].append(k)
            load[w] += int(rows[k])
        shares = [np.sort(np.array(s, dtype=np.int64)) for s in shares if s]
        args = (int(self.max_iter), float(self.tol))

        def run(share):
            return _bkt_kernels.em_fit(lay.correct, lay.bounds, task_lo[share], task_hi[share],
                                       np.ascontiguousarray(inits[share]), lower, upper, *args)

        with ThreadPoolExecutor(max_workers=len(shares)) as pool:
            results = list(pool.map(run, shares))
        params, lls = np.empty((len(task_lo), 4)), np.empty(len(task_lo))
        hist = np.empty((len(task_lo), self.max_iter + 1))
        for share, (p, ll, h) in zip(shares, results, strict=True):
            params[share], lls[share], hist[share] = p, ll, h
        return params, lls, hist

    def _make_params(self, counts, own, params, lls, n_rows) -> BKTParams:
        n_skills = len(counts)
        table = np.tile(params[-1], (n_skills, 1))
        table[own] = params[:-1]
        has_own = np.zeros(n_skills, dtype=bool)
        has_own[own] = True
        skill_ll = np.full(n_skills, np.nan)
        skill_ll[own] = lls[:-1]
        return BKTParams(*table.T, has_own, counts, skill_ll, *params[-1],
                         pooled_n_attempts=n_rows, pooled_log_likelihood=float(lls[-1]))

    def forward(self, student, skill, correct) -> MasteryTrace:
        """P(known) before and after each attempt and the predicted P(correct), per input row.

        Each (student, skill) sequence is filtered on its own, so a row's values
        depend only on the earlier attempts of its own sequence and the fitted
        parameters.  Skills without their own model and rows with skill -1 use
        the pooled parameters.

        Parameters
        ----------
        student, skill, correct : array-like of int, shape (n_attempts,)
            Attempts sorted by student then time (see the module docstring).

        Returns
        -------
        MasteryTrace
        """
        check_is_fitted(self, "params_")
        trace, _ = self.params_._forward(student, skill, correct, "BKT.forward")
        return trace

    def log_likelihood(self, student, skill, correct) -> float:
        """Total log-likelihood of the attempts under the fitted parameters."""
        check_is_fitted(self, "params_")
        _, ll = self.params_._forward(student, skill, correct, "BKT.log_likelihood")
        return ll
