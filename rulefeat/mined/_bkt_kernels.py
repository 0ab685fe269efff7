"""Compiled kernels of the Bayesian Knowledge Tracing model (see :mod:`rulefeat.mastery`).

Layout shared by every kernel: the attempts are permuted so that each
(student, skill) sequence is a contiguous run of rows, in time order;
``bounds[s]:bounds[s + 1]`` are the rows of sequence ``s``.  A model (one skill,
or the pooled model) covers the contiguous sequence range ``[s_lo, s_hi)``.
Parameter vectors are ``(p_init, p_learn, p_guess, p_slip)``.

The E-step uses the shape of the model: without forgetting the "known" state
is absorbing, so the smoothed probability of knowing obeys
``gamma_t = gamma_{t+1} * post_t / prior_{t+1}`` (``post_t`` the filtered
probability after attempt t, ``prior_{t+1}`` the prediction for the next
attempt).  One ratio per row is stored in the forward sweep and the backward
sweep is a running product; the expected number of learning transitions of a
sequence telescopes to ``gamma_last - gamma_first``.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# A running product of likelihoods is turned into a log only when it gets
# small, which replaces one log per attempt by one multiply; no single factor
# is below the probability floor (1e-6), so the product cannot underflow.
_RENORM = 1e-250


@njit(cache=True, nogil=True)
def _e_step(correct, bounds, s_lo, s_hi, p, ratio):
    """Expected sufficient statistics and log-likelihood of one model at parameters ``p``."""
    p_init, p_learn, p_guess, p_slip = p[0], p[1], p[2], p[3]
    keep = 1.0 - p_learn
    slope = 1.0 - p_slip - p_guess
    off = bounds[s_lo]
    ll = 0.0
    g_first = 0.0  # sum over sequences of gamma at the first attempt
    g_last = 0.0  # ... at the last attempt
    g_all = 0.0  # sum over all attempts of gamma
    g_right = 0.0  # ... over correct attempts
    for s in range(s_lo, s_hi):
        b = bounds[s]
        e = bounds[s + 1]
        prior = p_init
        post = p_init
        prod = 1.0
        for i in range(b, e):
            p_right = p_guess + prior * slope
            if correct[i]:
                lik = p_right
                post = prior * (1.0 - p_slip) / lik
            else:
                lik = 1.0 - p_right
                post = prior * p_slip / lik
            prod *= lik
            if prod < _RENORM:
                ll += np.log(prod)
                prod = 1.0
            nxt = p_learn + post * keep
            ratio[i - off] = post / nxt
            prior = nxt
        ll += np.log(prod)
        g = post
        g_last += g
        for i in range(e - 1, b - 1, -1):
            g_all += g
            if correct[i]:
                g_right += g
            if i > b:
                g *= ratio[i - 1 - off]
        g_first += g
    return ll, g_first, g_last, g_all, g_right


@njit(cache=True, nogil=True)
def m_step(p, stats, n_seq, n_rows, n_right, lo, hi):
    """Box-constrained M-step: each closed-form maximiser clipped to its bounds.

    Each parameter's expected complete-data log-likelihood is a separate
    ``a log x + b log(1 - x)`` term, concave in x, so clipping the maximiser to
    the box gives the constrained maximum and EM stays monotone.  A parameter
    whose expected count is zero (e.g. no second attempts, so no transitions)
    keeps its value.
    """
    g_first, g_last, g_all, g_right = stats[0], stats[1], stats[2], stats[3]
    new = p.copy()
    new[0] = g_first / n_seq
    unknown_before_move = (n_rows - n_seq) - (g_all - g_last)
    if unknown_before_move > 1e-12:
        new[1] = (g_last - g_first) / unknown_before_move
    if n_rows - g_all > 1e-12:
        new[2] = (n_right - g_right) / (n_rows - g_all)
    if g_all > 1e-12:
        new[3] = (g_all - g_right) / g_all
    for k in range(4):
        new[k] = min(max(new[k], lo[k]), hi[k])
    return new


@njit(cache=True, nogil=True)
def expected_counts(correct, bounds, task_lo, task_hi, params):
    """E-step of every task at its own parameters: rows ``(ll, g_first, g_last, g_all, g_right)``.

    The same sums :func:`em_fit` computes per iteration, exposed so that the counts of
    disjoint sets of sequences (students in different partitions) can be added up.
    """
    n_tasks = task_lo.shape[0]
    out = np.zeros((n_tasks, 5))
    longest = 1
    for k in range(n_tasks):
        longest = max(longest, bounds[task_hi[k]] - bounds[task_lo[k]])
    ratio = np.empty(longest)
    for k in range(n_tasks):
        ll, a, b, c, d = _e_step(correct, bounds, task_lo[k], task_hi[k], params[k], ratio)
        out[k, 0], out[k, 1], out[k, 2], out[k, 3], out[k, 4] = ll, a, b, c, d
    return out


@njit(cache=True, nogil=True)
def em_fit(correct, bounds, task_lo, task_hi, inits, lo, hi, max_iter, tol):
    """Run EM for each task (a model's sequence range and a starting point).

    Returns the final parameters ``(n_tasks, 4)``, their log-likelihoods and
    the log-likelihood trace ``(n_tasks, max_iter + 1)`` (NaN after the stop).
    Stops when the mean log-likelihood per attempt improves by less than
    ``tol``; the parameters returned are the best ones whose log-likelihood was
    computed, so they match the reported value.
    """
    n_tasks = task_lo.shape[0]
    params = np.empty((n_tasks, 4))
    lls = np.empty(n_tasks)
    hist = np.full((n_tasks, max_iter + 1), np.nan)
    longest = 0
    for k in range(n_tasks):
        longest = max(longest, bounds[task_hi[k]] - bounds[task_lo[k]])
    ratio = np.empty(longest)
    stats = np.empty(4)
    for k in range(n_tasks):
        s_lo, s_hi = task_lo[k], task_hi[k]
        r_lo, r_hi = bounds[s_lo], bounds[s_hi]
        n_seq = s_hi - s_lo
        n_rows = r_hi - r_lo
        n_right = 0.0
        for i in range(r_lo, r_hi):
            n_right += correct[i]
        p = inits[k].copy()
        prev_p = p.copy()
        prev_ll = -np.inf
        for it in range(max_iter + 1):
            ll, stats[0], stats[1], stats[2], stats[3] = _e_step(correct, bounds, s_lo, s_hi, p, ratio)
            hist[k, it] = ll  # recorded before the check below, so a decrease stays visible
            if ll < prev_ll:  # only rounding noise at convergence can do this: keep the better point
                p = prev_p
                ll = prev_ll
                break
            if it == max_iter or ll - prev_ll < tol * n_rows:
                break
            prev_p = p
            prev_ll = ll
            p = m_step(p, stats, n_seq, n_rows, n_right, lo, hi)
        params[k] = p
        lls[k] = ll
    return params, lls, hist


@njit(cache=True, nogil=True)
def forward(correct, bounds, seq_params):
    """Filter every sequence with its own parameters (row ``s`` of ``seq_params``).

    Returns, per row of the permuted layout, P(known) before the attempt,
    P(known) after observing it and learning, the predicted P(correct), and
    the total log-likelihood.
    """
    n = bounds[-1]
    before = np.empty(n)
    after = np.empty(n)
    p_right_out = np.empty(n)
    ll = 0.0
    for s in range(bounds.shape[0] - 1):
        p_learn, p_guess, p_slip = seq_params[s, 1], seq_params[s, 2], seq_params[s, 3]
        slope = 1.0 - p_slip - p_guess
        prior = seq_params[s, 0]
        prod = 1.0
        for i in range(bounds[s], bounds[s + 1]):
            p_right = p_guess + prior * slope
            if correct[i]:
                lik = p_right
                post = prior * (1.0 - p_slip) / lik
            else:
                lik = 1.0 - p_right
                post = prior * p_slip / lik
            prod *= lik
            if prod < _RENORM:
                ll += np.log(prod)
                prod = 1.0
            before[i] = prior
            p_right_out[i] = p_right
            prior = post + (1.0 - post) * p_learn
            after[i] = prior
        ll += np.log(prod)
    return before, after, p_right_out, ll
