"""Calibration of the headline procedure: type-I error, interval coverage and power, with Monte-Carlo error.

Not a timed test: a study that prints its table (docs/inference.md holds the last run's numbers).

Part 1 uses a generator of feature tables that is *not* the project's simulator, passed through
``incremental_value_precomputed`` with the default LightGBM model and 5 student-grouped folds:

* ``n_students`` students x ``units`` units; a student random effect ``u ~ N(0, 0.8^2)`` on the logit scale;
* 20 mined columns: 6 informative (``N(0, 1)``, logit weights 0.6, 0.5, 0.4, 0.3, 0.3, 0.2, the first two
  shifted by ``0.5 u`` so that they also carry the student effect) and 14 pure noise;
* 3 rule columns, either *redundant* (noisy copies ``x_j + N(0, 0.3^2)`` of the first three informative
  mined columns: the rules add nothing, the null case) or carrying a *signal* the mined columns lack (``z + N(0,
  0.3^2)`` for a unit-level ``z ~ N(0, 1)`` that enters the logit with weight ``--signal``);
* the label is ``Bernoulli(expit(-1.3 + x b + u (+ signal z)))`` (about 25 % ones).

The true Δ is the expected AUC(combined) - AUC(mined) of detectors trained on a training set of the folds' size
(4/5 of the students): the mean over ``--truth-draws`` fresh training samples of that size, each model scored on
one fresh test set of ``--truth-units`` units.  A dataset's interval *covers* when it contains that value.

Part 2 (``--simulator N``, off by default because every fold refits the feature transformers) runs
``incremental_value`` on N simulated Zorbleth logs of the null knob (every label link 0: the rules, like every
feature, carry nothing about the labels) and reports how often the headline rejects.

Run::

    python benchmarks/calibration.py                           # 400 null + 200 signal datasets, 3 repeats
    python benchmarks/calibration.py --null 100 --signal 60 --repeats 3 --n-jobs 2
    python benchmarks/calibration.py --null 0 --signal 0 --simulator 20
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings

import joblib
import numpy as np
import pandas as pd
from scipy import stats as sps
from sklearn.metrics import roc_auc_score
from threadpoolctl import threadpool_limits

from rulefeat.evaluate.models import default_model
from rulefeat.evaluate.value.engine import compute_incremental_value_precomputed

ALPHA = 0.05
WEIGHTS = np.array([0.6, 0.5, 0.4, 0.3, 0.3, 0.2])
N_NOISE = 14
STUDENT_SD = 0.8
INTERCEPT = -1.3


def tables(rng: np.random.Generator, n_students: int, units: int, signal: float):
    """One dataset: mined and rule feature tables, labels and students (signal 0 = redundant rules)."""
    n = n_students * units
    student = np.repeat(np.arange(n_students), units)
    u = rng.normal(0.0, STUDENT_SD, n_students)[student]
    info = rng.normal(size=(n, len(WEIGHTS)))
    info[:, :2] += 0.5 * u[:, None]
    z = rng.normal(size=n)
    logit = INTERCEPT + info @ WEIGHTS + u + signal * z
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-logit))).astype(int)
    mined = pd.DataFrame(np.hstack([info, rng.normal(size=(n, N_NOISE))]),
                         columns=[f"m{j}" for j in range(len(WEIGHTS) + N_NOISE)])
    source = np.repeat(z[:, None], 3, axis=1) if signal > 0 else info[:, :3]
    rules = pd.DataFrame(source + rng.normal(0.0, 0.3, (n, 3)), columns=[f"r{j}__value" for j in range(3)])
    return mined, rules, y, student


def true_delta(signal: float, n_train_students: int, units: int, draws: int, test_units: int, seed: int):
    """Mean and MC standard error of AUC(combined) - AUC(mined) over fresh training samples, on one test set."""
    rng = np.random.default_rng(seed)
    m_te, r_te, y_te, _ = tables(rng, max(test_units // units, 1), units, signal)
    both_te = np.hstack([m_te.to_numpy(), r_te.to_numpy()])
    deltas = []
    with threadpool_limits(1):
        for _ in range(draws):
            m, r, y, _ = tables(rng, n_train_students, units, signal)
            base = default_model("classification", 0, 1).fit(m.to_numpy(), y)
            full = default_model("classification", 0, 1).fit(np.hstack([m.to_numpy(), r.to_numpy()]), y)
            deltas.append(roc_auc_score(y_te, full.predict_proba(both_te)[:, 1])
                          - roc_auc_score(y_te, base.predict_proba(m_te.to_numpy())[:, 1]))
    deltas = np.asarray(deltas)
    return float(deltas.mean()), float(deltas.std(ddof=1) / np.sqrt(len(deltas)))


def one_dataset(signal: float, n_students: int, units: int, repeats: int, seed: int) -> dict:
    """The headline of one dataset: Δ, one-sided p, the 90% interval, the 95% two-sided one, the bootstrap CI."""
    mined, rules, y, students = tables(np.random.default_rng(seed), n_students, units, signal)
    with threadpool_limits(1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res, _, _ = compute_incremental_value_precomputed(
            mined, rules, y, students, cv=5, repeats=repeats, n_boot=200, ablation=False, transfer=False,
            learning_curve=None, random_state=seed)
    head = res["comparisons"][0]
    half = sps.t.ppf(1 - ALPHA / 2, head["df"]) * head["se"]  # the same t, read at the two-sided 95% level
    return {"delta": head["delta"], "p": head["p_value"], "low90": head["ci_low"], "high90": head["ci_high"],
            "low95": head["delta"] - half, "high95": head["delta"] + half,
            "boot_low": head["boot_ci_low"], "boot_high": head["boot_ci_high"]}


def share(hits) -> tuple[float, float]:
    hits = np.asarray(hits, dtype=float)
    p = float(hits.mean())
    return p, float(np.sqrt(p * (1 - p) / len(hits)))


def fmt(pair) -> str:
    return f"{pair[0]:.3f} ± {pair[1]:.3f}"


def run_case(name, signal, args, parallel, seed0) -> None:
    count = args.null if signal == 0 else args.signal
    if count == 0:
        return
    t0 = time.perf_counter()
    truth, truth_se = true_delta(signal, args.students * 4 // 5, args.units, args.truth_draws, args.truth_units,
                                 seed0 + 999_999)
    rows = []
    for row in parallel(joblib.delayed(one_dataset)(signal, args.students, args.units, args.repeats, seed0 + k)
                        for k in range(count)):
        rows.append(row)
        if len(rows) % 20 == 0:  # progress on stderr, so that a run cut short still says how far it got
            print(f"  {name}: {len(rows)}/{count} datasets, rejecting {np.mean([r['p'] < ALPHA for r in rows]):.3f}",
                  file=sys.stderr, flush=True)
    rows = pd.DataFrame(rows)
    reject = share(rows["p"] < ALPHA)
    print(f"\n{name}: {count} datasets of {args.students} students x {args.units} units, {args.repeats} x 5 folds "
          f"({time.perf_counter() - t0:.0f} s)")
    print(f"  true Δ AUC (expected, training sets of {args.students * 4 // 5} students): {truth:+.4f} "
          f"± {truth_se:.4f} (MC se)")
    print(f"  mean headline Δ {rows['delta'].mean():+.4f}; rejects at α={ALPHA}: {fmt(reject)}")
    for label, low, high in (("90% interval (the headline's)", "low90", "high90"),
                             ("95% two-sided corrected t", "low95", "high95"),
                             ("95% student bootstrap (secondary)", "boot_low", "boot_high")):
        covers = share((rows[low] <= truth) & (truth <= rows[high]))
        print(f"  coverage of the true Δ, {label}: {fmt(covers)}; mean width {np.mean(rows[high] - rows[low]):.4f}")
    print(f"  one-sided 95% lower bound below the true Δ: {fmt(share(rows['low90'] <= truth))}")


def simulator_null(count: int, n_students: int, repeats: int, seed0: int, parallel) -> None:
    if count == 0:
        return
    t0 = time.perf_counter()
    p = np.asarray(parallel(joblib.delayed(simulator_p)(n_students, repeats, seed0 + k) for k in range(count)))
    print(f"\nsimulator null knob (every label link 0): {count} logs of {n_students} students, {repeats} x 5 "
          f"folds ({time.perf_counter() - t0:.0f} s)")
    print(f"  rejects at α={ALPHA}: {fmt(share(p < ALPHA))}")


def simulator_p(n_students: int, repeats: int, seed: int) -> float:
    from rulefeat import EventLog, incremental_value
    from rulefeat.evaluate.value.engine import demo_rules_path
    from rulefeat.simulate import BEHAVIOURS, tutor_logs

    data = tutor_logs(n_students, seed=seed, label_links=dict.fromkeys(BEHAVIOURS, 0.0))
    with threadpool_limits(1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = incremental_value(EventLog(data.events), data.windows[["student", "start", "end"]],
                                   data.windows["label"].to_numpy(), demo_rules_path(), repeats=repeats,
                                   ablation=False, transfer=False, learning_curve=None, n_boot=100,
                                   random_state=seed)
    return float(report.to_dict()["comparisons"][0]["p_value"])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--null", type=int, default=400, help="datasets with redundant rules (default 400)")
    parser.add_argument("--signal", type=int, default=200, help="datasets whose rules carry a signal (default 200)")
    parser.add_argument("--signal-weight", dest="weight", type=float, default=0.52,
                        help="logit weight of the rules' signal (default 0.52: true Δ AUC about +0.02)")
    parser.add_argument("--students", type=int, default=300, help="students per dataset (default 300)")
    parser.add_argument("--units", type=int, default=6, help="units per student (default 6)")
    parser.add_argument("--repeats", type=int, default=3, help="cross-validation repeats (default 3)")
    parser.add_argument("--truth-draws", type=int, default=30, help="training samples for the true Δ (default 30)")
    parser.add_argument("--truth-units", type=int, default=60_000, help="test units for the true Δ (default 60,000)")
    parser.add_argument("--simulator", type=int, default=0, help="simulated null logs through incremental_value "
                                                                 "(default 0: skipped)")
    parser.add_argument("--n-jobs", type=int, default=1, help="parallel datasets (default 1)")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    parallel = joblib.Parallel(n_jobs=args.n_jobs, return_as="generator")
    print(f"calibration of the headline (corrected repeated cross-validation t, one-sided, α = {ALPHA}); "
          "± is the Monte-Carlo standard error")
    run_case("rules redundant with the mined features (null)", 0.0, args, parallel, args.seed * 10_000)
    run_case(f"rules carry a real signal (weight {args.weight:g})", args.weight, args, parallel,
             args.seed * 10_000 + 5_000)
    simulator_null(args.simulator, args.students, args.repeats, args.seed * 10_000 + 8_000, parallel)
    sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())
