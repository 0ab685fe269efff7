"""Tests of rulefeat.mastery: the BKT forward equations, EM fitting, fallbacks and input checks."""

from __future__ import annotations

import doctest

import numpy as np
import pytest
from scipy.optimize import minimize
from sklearn.base import clone
from sklearn.exceptions import NotFittedError

import rulefeat.mastery as mastery
from rulefeat.errors import LogSchemaError, RulefeatError
from rulefeat.mined.mastery import BKT, AttemptBlock, BKTParams

TRUE = (0.3, 0.15, 0.2, 0.08)  # p_init, p_learn, p_guess, p_slip of the simulated skill


def simulate(params, n_students, length, seed):
    """Attempts of ``n_students`` on each skill (rows of ``params``), skills interleaved in time.

    Returns student, skill, correct sorted by student then time.
    """
    rng = np.random.default_rng(seed)
    params = np.atleast_2d(np.asarray(params, dtype=float))
    n_skills = len(params)
    p0, pt, pg, ps = (params[:, k][None, :, None] for k in range(4))
    shape = (n_students, n_skills, length)
    learned = rng.random(shape) < pt
    learned[..., 0] = rng.random(shape[:2]) < p0[..., 0]
    known = np.cumsum(learned, axis=2) > 0  # no forgetting: known from the first success on
    u = rng.random(shape)
    correct = np.where(known, u >= ps, u < pg).astype(np.int8)
    student = np.repeat(np.arange(n_students), n_skills * length)
    skill = np.tile(np.repeat(np.arange(n_skills), length), n_students)
    # Interleave skills in time at random: sorted random times keep each skill's own order.
    times = np.sort(rng.random(shape), axis=2).reshape(-1)
    order = np.lexsort((times, student))
    return student[order], skill[order], correct.reshape(-1)[order]


def as_tuple(params: BKTParams, k: int) -> np.ndarray:
    return np.array([params.p_init[k], params.p_learn[k], params.p_guess[k], params.p_slip[k]])


@pytest.fixture(scope="module")
def two_skills():
    return simulate([TRUE, (0.6, 0.05, 0.1, 0.05)], n_students=1500, length=12, seed=11)


@pytest.fixture(scope="module")
def fitted(two_skills):
    return BKT(random_state=0).fit(*two_skills)


# ----------------------------------------------------------------------------- forward equations
def test_forward_matches_example_hand_computed_from_published_equations():
    # Hand-computed from the published equations of Corbett & Anderson (1995), User Modeling and User-Adapted
    # Interaction 4:253-278: P(correct) = L(1-S) + (1-L)G, Bayes update on the response, then L + (1-L)T.
    # L0 .4, T .1, G .2, S .1; responses correct, wrong, correct.
    trace = BKTParams.single(0.4, 0.1, 0.2, 0.1).forward([0, 0, 0], [-1, -1, -1], [1, 0, 1])
    np.testing.assert_allclose(trace.p_correct, [0.48, 0.7425, 0.459612], atol=1e-6)
    np.testing.assert_allclose(trace.p_known_after, [0.775, 191 / 515, 991 / 1315], rtol=1e-12)
    np.testing.assert_allclose(trace.p_known_before, [0.4, 0.775, 191 / 515], rtol=1e-12)


def test_forward_splits_sequences_by_student_and_skill():
    params = BKTParams(
        p_init=[0.4, 0.2], p_learn=[0.1, 0.3], p_guess=[0.2, 0.25], p_slip=[0.1, 0.05],
        has_own_model=[True, True], n_attempts=[3, 2], log_likelihood=[np.nan, np.nan],
        pooled_init=0.5, pooled_learn=0.2, pooled_guess=0.2, pooled_slip=0.1,
    )
    student = [0, 0, 0, 0, 0, 0, 1, 1]
    skill = [0, 1, 0, -1, 1, 0, 1, 0]
    correct = [1, 1, 0, 1, 0, 1, 0, 1]
    got = params.forward(student, skill, correct)
    for st in (0, 1):
        for sk in (-1, 0, 1):
            rows = [i for i in range(8) if student[i] == st and skill[i] == sk]
            alone = BKTParams.single(**params.pooled) if sk == -1 else BKTParams.single(
                *params.for_skills([sk])[0])
            want = alone.forward([0] * len(rows), [sk] * len(rows), [correct[i] for i in rows])
            for g, w in zip(got, want, strict=True):
                np.testing.assert_allclose(g[rows], w, rtol=1e-13)
    # The first attempt on skill 0 after the 0-1 interleaving still starts from p_init.
    assert got.p_known_before[0] == 0.4 and got.p_known_before[1] == 0.2


def test_forward_rows_depend_only_on_their_own_sequence(fitted, two_skills):
    student, skill, correct = two_skills
    full = fitted.forward(student, skill, correct)
    keep = (student % 3 == 1) | (student == 0)  # drop whole students
    part = fitted.forward(student[keep], skill[keep], correct[keep])
    for f, p in zip(full, part, strict=True):
        np.testing.assert_allclose(f[keep], p, rtol=1e-13)


def test_log_likelihood_agrees_with_forward_probabilities(fitted, two_skills):
    student, skill, correct = two_skills
    trace = fitted.forward(student, skill, correct)
    per_row = np.where(correct == 1, np.log(trace.p_correct), np.log1p(-trace.p_correct))
    assert fitted.log_likelihood(student, skill, correct) == pytest.approx(per_row.sum(), rel=1e-12)
    # The per-skill training log-likelihood is the one of the returned parameters.
    for k in (0, 1):
        rows = skill == k
        ll = fitted.log_likelihood(student[rows], skill[rows], correct[rows])
        assert fitted.params_.log_likelihood[k] == pytest.approx(ll, rel=1e-10)


def test_empty_forward_returns_empty_arrays(fitted):
    trace = fitted.forward([], [], [])
    assert all(len(a) == 0 for a in trace)
    assert fitted.log_likelihood([], [], []) == 0.0


# ----------------------------------------------------------------------------- EM
def test_em_recovers_simulated_parameters(fitted):
    # 18 000 simulated attempts per skill (seed 11); tolerance 0.05 per parameter: common practice, no source.
    np.testing.assert_allclose(as_tuple(fitted.params_, 0), TRUE, atol=0.05)
    np.testing.assert_allclose(as_tuple(fitted.params_, 1), (0.6, 0.05, 0.1, 0.05), atol=0.05)
    assert fitted.params_.has_own_model.tolist() == [True, True]
    assert fitted.params_.n_attempts.tolist() == [18000, 18000]


def test_em_reaches_the_maximum_found_by_a_direct_optimiser(two_skills):
    # Independent check of the E- and M-steps: L-BFGS-B (scipy) on the forward-pass likelihood.
    student, skill, correct = (a[two_skills[1] == 0][:6000] for a in two_skills)
    model = BKT(random_state=3, tol=1e-10, max_iter=1000).fit(student, skill, correct)

    def nll(x):
        return -BKTParams.single(*x).log_likelihood_of(student, skill, correct)

    box = [(1e-6, 1 - 1e-6)] * 2 + [(1e-6, 0.3), (1e-6, 0.1)]
    best = minimize(nll, x0=[0.5, 0.1, 0.15, 0.05], method="L-BFGS-B", bounds=box)
    assert model.params_.log_likelihood[0] >= -best.fun - 1e-3
    np.testing.assert_allclose(as_tuple(model.params_, 0), best.x, atol=5e-3)


def _assert_non_decreasing(history):
    assert len(history) >= 2
    steps = np.diff(history)
    assert np.all(steps >= -1e-9 * np.abs(history[:-1])), steps.min()


def test_log_likelihood_never_decreases(fitted):
    for history in [*fitted.ll_history_.values(), fitted.pooled_ll_history_]:
        _assert_non_decreasing(history)
        assert len(history) <= fitted.max_iter + 1


def test_log_likelihood_never_decreases_with_active_bounds():
    # True slip 0.25 and guess 0.4 lie outside the box, so both bounds bind.
    data = simulate([(0.4, 0.1, 0.4, 0.25)], n_students=800, length=10, seed=5)
    model = BKT(random_state=1, tol=1e-9, max_iter=500).fit(*data)
    _assert_non_decreasing(model.ll_history_[0])
    assert model.params_.p_slip[0] == pytest.approx(0.1)
    assert model.params_.p_guess[0] == pytest.approx(0.3)


def test_max_iter_caps_the_history(two_skills):
    model = BKT(random_state=0, max_iter=2, tol=0.0).fit(*two_skills)
    assert all(len(h) == 3 for h in model.ll_history_.values())


def test_restarts_are_deterministic_for_a_seed(two_skills):
    a = BKT(random_state=7).fit(*two_skills).params_
    b = BKT(random_state=7).fit(*two_skills).params_
    for name in ("p_init", "p_learn", "p_guess", "p_slip", "log_likelihood"):
        assert np.array_equal(getattr(a, name), getattr(b, name))
    assert a.pooled == b.pooled
    gen = BKT(random_state=np.random.default_rng(7)).fit(*two_skills).params_
    assert np.array_equal(gen.p_init, a.p_init)


def test_more_restarts_never_lose_likelihood(two_skills):
    one = BKT(n_restarts=1, random_state=2).fit(*two_skills)
    many = BKT(n_restarts=6, random_state=2).fit(*two_skills)  # same first start, more after it
    assert np.all(many.params_.log_likelihood >= one.params_.log_likelihood - 1e-9)


def test_relabelling_students_does_not_change_the_fit(fitted, two_skills):
    student, skill, correct = two_skills
    relabel = np.random.default_rng(4).permutation(student.max() + 1)[student]
    order = np.argsort(relabel, kind="stable")
    other = BKT(random_state=0).fit(relabel[order], skill[order], correct[order]).params_
    for name in ("p_init", "p_learn", "p_guess", "p_slip"):
        np.testing.assert_allclose(getattr(other, name), getattr(fitted.params_, name), atol=1e-9, rtol=0)
    np.testing.assert_allclose(list(other.pooled.values()), list(fitted.params_.pooled.values()), atol=1e-9)


# ----------------------------------------------------------------------------- pooled fallback
def test_unseen_rare_and_unlabelled_skills_use_pooled_parameters():
    student, skill, correct = simulate([TRUE, TRUE, TRUE], n_students=300, length=8, seed=2)
    skill = skill.copy()
    skill[skill == 2] = -1  # unlabelled attempts
    rare = (skill == 1) & (student < 4)  # 32 attempts of skill 3: below min_attempts
    skill[rare] = 3
    model = BKT(random_state=0, min_attempts=50).fit(student, skill, correct)
    params = model.params_
    assert params.has_own_model.tolist() == [True, True, False, False]
    assert params.n_attempts.tolist() == [2400, 2368, 0, 32]
    assert np.isnan(params.log_likelihood[2:]).all()
    assert set(model.ll_history_) == {0, 1}
    pooled = BKTParams.single(**params.pooled)
    new = np.array([-1, 3, 9, 2, -1, 9, 3])  # unlabelled, rare, unseen past the arrays, unseen inside
    stu = np.zeros(7, dtype=int)
    ans = np.array([1, 0, 0, 1, 1, 1, 0])
    got, want = model.forward(stu, new, ans), pooled.forward(stu, new, ans)
    for g, w in zip(got, want, strict=True):
        np.testing.assert_allclose(g, w, rtol=1e-13)
    np.testing.assert_allclose(params.for_skills([2, 3, 50, -1]), np.tile(list(params.pooled.values()), (4, 1)))


def test_pooled_model_on_one_skill_matches_that_skill():
    # The pooled model uses the same (student, skill) sequences, so on one skill it is the same model.
    data = simulate([TRUE], n_students=600, length=10, seed=8)
    model = BKT(random_state=0, tol=1e-10, max_iter=1000).fit(*data)
    np.testing.assert_allclose(list(model.params_.pooled.values()), as_tuple(model.params_, 0), atol=1e-3)
    assert model.params_.pooled_log_likelihood == pytest.approx(model.params_.log_likelihood[0], abs=1e-3)
    assert model.params_.pooled_n_attempts == 6000


def test_only_unlabelled_attempts_fit_the_pooled_model_alone():
    student, _, correct = simulate([TRUE], n_students=100, length=6, seed=1)
    model = BKT(random_state=0).fit(student, np.full(len(student), -1), correct)
    assert model.params_.n_skills == 0 and model.ll_history_ == {}
    _assert_non_decreasing(model.pooled_ll_history_)


# ----------------------------------------------------------------------------- estimator contract
def test_estimator_contract(two_skills):
    model = BKT(n_restarts=2, random_state=0)
    assert clone(model).get_params() == model.get_params()
    with pytest.raises(NotFittedError):
        model.forward(*two_skills)
    assert model.fit(*two_skills) is model


def test_params_are_read_only(fitted):
    with pytest.raises(ValueError, match="read-only"):
        fitted.params_.p_init[0] = 0.9
    with pytest.raises(AttributeError):
        fitted.params_.pooled_init = 0.9


def test_docstring_examples_run():
    assert doctest.testmod(mastery, raise_on_error=False).failed == 0


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize(
    ("student", "skill", "correct", "match"),
    [
        ([0, 0, 1], [0, 0], [1, 0, 1], r"same length; got 3, 2 and 3"),
        ([0, 0, 1], [0, 0, 0], [1, 2, 1], r"'correct' must be 0 or 1; 1 bad value, first 2 \(row 1\)"),
        ([0, -1, 1], [0, 0, 0], [1, 0, 1], r"'student' codes must be >= 0; 1 bad value, first -1 \(row 1\)"),
        ([0, 0, 1], [0, -3, 0], [1, 0, 1], r"'skill' codes must be >= 0, or -1.*row 1"),
        ([0, 2, 1, 1, 0], [0] * 5, [1] * 5, r"sorted by student.*rows 2, 4 go back.*row 2 has student 1"),
        ([0.0, 0.5, 1.0], [0, 0, 0], [1, 0, 1], r"'student' must hold integer codes.*first 0\.5 \(row 1\)"),
        ([0, 0, 1], [0, np.nan, 0], [1, 0, 1], r"'skill' must hold integer codes.*row 1"),
        ([[0, 0]], [[0, 0]], [[1, 0]], r"'student' must be a 1-D array; got shape \(1, 2\)"),
        (["a", "b"], [0, 0], [1, 0], r"'student' must hold integer codes; got dtype <U1"),
    ],
)
def test_bad_arrays_are_refused(fitted, student, skill, correct, match):
    with pytest.raises(LogSchemaError, match=r"BKT\.fit: .*" + match):
        BKT().fit(student, skill, correct)
    with pytest.raises(LogSchemaError, match=r"BKT\.forward: .*" + match):
        fitted.forward(student, skill, correct)


def test_fit_refuses_no_attempts():
    with pytest.raises(LogSchemaError, match="got no attempts"):
        BKT().fit([], [], [])


@pytest.mark.parametrize(
    ("params", "match"),
    [
        ({"n_restarts": 0}, r"'n_restarts' parameter of BKT must be an int >= 1. Got 0 instead"),
        ({"max_iter": 2.5}, r"'max_iter' parameter of BKT must be an int >= 1. Got 2.5"),
        ({"tol": -1.0}, r"'tol' parameter of BKT must be a float >= 0"),
        ({"guess_max": 1.0}, r"'guess_max' parameter of BKT must be a float in"),
        ({"slip_max": True}, r"'slip_max' parameter of BKT must be a float in"),
        ({"min_attempts": "50"}, r"'min_attempts' parameter of BKT must be an int >= 1. Got '50'"),
        ({"random_state": "seed"}, r"'random_state' parameter of BKT must be None, an int"),
        ({"guess_max": 0.6, "slip_max": 0.5}, r"must sum to less than 1.*Got 0.6 \+ 0.5"),
    ],
)
def test_bad_hyperparameters_are_refused(params, match):
    with pytest.raises(RulefeatError, match=match):
        BKT(**params).fit([0, 0], [0, 0], [1, 0])


def test_bad_parameter_values_are_refused():
    with pytest.raises(RulefeatError, match=r"pooled must lie strictly between 0 and 1; got 1\.2 at index 0"):
        BKTParams.single(1.2, 0.1, 0.2, 0.1)
    with pytest.raises(RulefeatError, match=r"p_slip must lie strictly between 0 and 1; got 0\.0 at index 1"):
        BKTParams([0.5, 0.5], [0.1, 0.1], [0.2, 0.2], [0.1, 0.0], [True, True], [9, 9], [0.0, 0.0],
                  0.5, 0.1, 0.2, 0.1)
    with pytest.raises(RulefeatError, match=r"one length; got \{'p_init': 2, 'p_learn': 1"):
        BKTParams([0.5, 0.5], [0.1], [0.2], [0.1], [True], [9], [0.0], 0.5, 0.1, 0.2, 0.1)


def _attempts(seed: int = 1, n_students: int = 240):
    rng = np.random.default_rng(seed)
    student = np.repeat(np.arange(n_students), 12)
    skill = rng.integers(-1, 5, len(student))
    correct = (rng.random(len(student)) < 0.6).astype(np.int8)
    return student, skill, correct


def _fit_blocks(blocks, **options):
    n_codes = max(b.n_skill_codes for b in blocks)
    return BKT(**options).fit_expected(sum(b.skill_counts(n_codes) for b in blocks),
                                       lambda own: sum(b.totals(own) for b in blocks),
                                       lambda own, model, params: sum(b.expected(own, model, params) for b in blocks))


def test_fit_expected_on_one_block_is_fit_to_the_bit():
    student, skill, correct = _attempts()
    whole = BKT(random_state=3, n_restarts=2).fit(student, skill, correct)
    summed = _fit_blocks([AttemptBlock(student, skill, correct)], random_state=3, n_restarts=2)
    for name in ("p_init", "p_learn", "p_guess", "p_slip", "log_likelihood", "n_attempts", "has_own_model"):
        np.testing.assert_array_equal(getattr(summed.params_, name), getattr(whole.params_, name), err_msg=name)
    assert summed.params_.pooled == whole.params_.pooled
    assert {k: len(v) for k, v in summed.ll_history_.items()} == {k: len(v) for k, v in whole.ll_history_.items()}


def test_fit_expected_over_blocks_of_disjoint_students_agrees_to_rounding():
    student, skill, correct = _attempts(seed=4)
    whole = BKT(random_state=0).fit(student, skill, correct)
    cuts = [0, 600, 1500, 2400, len(student)]  # student boundaries (12 attempts each)
    blocks = [AttemptBlock(student[a:b], skill[a:b], correct[a:b]) for a, b in zip(cuts, cuts[1:], strict=False)]
    summed = _fit_blocks(blocks, random_state=0)
    # Only the order of the floating-point additions differs (per block, then across blocks).
    for name in ("p_init", "p_learn", "p_guess", "p_slip"):
        np.testing.assert_allclose(getattr(summed.params_, name), getattr(whole.params_, name), rtol=1e-9)
    np.testing.assert_array_equal(summed.params_.n_attempts, whole.params_.n_attempts)
    assert summed.pooled_ll_history_.shape == whole.pooled_ll_history_.shape


def test_fit_expected_without_attempts_is_refused():
    empty = AttemptBlock(np.zeros(0, int), np.zeros(0, int), np.zeros(0, int))
    with pytest.raises(LogSchemaError, match="BKT.fit_expected: got no attempts"):
        _fit_blocks([empty])
