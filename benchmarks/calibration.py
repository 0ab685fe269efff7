"""Calibration of the headline procedure: type-I error, interval coverage and power, with Monte-Carlo error.

Not a timed test: a study that prints its table (docs/inference.md holds the last runs' numbers).

Part 1 uses a generator of feature tables that is *not* the project's simulator, passed through
``incremental_value_precomputed`` with the default LightGBM model and ``--folds`` student-grouped folds repeated
``--repeats`` times (or ``--splits`` random student-grouped train/test splits of test share ``--test-share``):

* ``n_students`` students x ``units`` units; a student random effect ``u ~ N(0, 0.8^2)`` on the logit scale;
* 20 mined columns: 6 informative (``N(0, 1)``, logit weights 0.6, 0.5, 0.4, 0.3, 0.3, 0.2, the first two
  shifted by ``0.5 u`` so that they also carry the student effect) and 14 pure noise;
* 3 rule columns, either *redundant* (noisy copies ``x_j + N(0, 0.3^2)`` of the first three informative
  mined columns: the rules add nothing, the null case) or carrying a *signal* the mined columns lack (``z + N(0,
  0.3^2)`` for a unit-level ``z ~ N(0, 1)`` that enters the logit with weight ``--signal-weight``);
* the label is ``Bernoulli(expit(-1.3 + x b + u (+ signal z)))`` (about 25 % ones).

The true Δ is the expected AUC(combined) - AUC(mined) of detectors trained on a training set of the folds' size
(4/5 of the students with 5 folds): the mean over ``--truth-draws`` fresh training samples of that size, each
model scored on one fresh test set of ``--truth-units`` units.  A dataset's interval *covers* when it contains
that value (a one-sided bound: when it lies below it).

One run scores several procedures from the same fold differences: the corrected t on the folds of the first 1,
2, ... repeats, read three ways (one-sided p with the 90 % interval; two-sided p with the 95 % interval; one-sided
p with the one-sided 95 % bound), a within-repeat k-fold standard error and a clustered influence-value standard
error (both for reference: they hold the training sets fixed).  ``--record run.npz`` saves every dataset's fold
differences; ``--score run.npz [more.npz ...]`` scores saved runs again, pooling runs of one design made with
different ``--seed``.

Part 2 (``--simulator N``, off by default because every fold refits the feature transformers) runs
``incremental_value`` on N simulated Zorbleth logs of the null knob (every label link 0: the rules, like every
feature, carry nothing about the labels) and reports how often the headline rejects.

Run::

    python benchmarks/calibration.py                           # 400 null + 200 signal datasets, 3 x 5 folds
    python benchmarks/calibration.py --null 120 --signal 60 --repeats 5 --n-jobs 2 --record k5.npz
    python benchmarks/calibration.py --null 120 --signal 60 --folds 10 --repeats 3 --seed 1 --record k10.npz
    python benchmarks/calibration.py --score k5.npz k10.npz
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
from sklearn.model_selection import GroupShuffleSplit
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


def splitter(args, seed: int):
    """The design under study: ``--folds`` student-grouped folds, or ``--splits`` random student-grouped splits."""
    if args.splits:
        return GroupShuffleSplit(n_splits=args.splits, test_size=args.test_share, random_state=seed), 1
    return args.folds, args.repeats


def placement_influence(y: np.ndarray, score: np.ndarray) -> np.ndarray:
    """Each test unit's influence on one fold's AUC (DeLong's placement values, as in LeDell, Petersen & van der
    Laan 2015): ``(V10 - AUC) / p1`` for a positive, ``(V01 - AUC) / p0`` for a negative; they sum to 0."""
    pos, neg = score[y], score[~y]
    ranks = sps.rankdata(np.concatenate([pos, neg]))
    v10 = (ranks[: len(pos)] - sps.rankdata(pos)) / len(neg)  # share of negatives below (ties 1/2)
    v01 = 1.0 - (ranks[len(pos):] - sps.rankdata(neg)) / len(pos)  # share of positives above
    a = v10.mean()
    out = np.empty(len(y))
    out[y], out[~y] = (v10 - a) * len(y) / len(pos), (v01 - a) * len(y) / len(neg)
    return out


def influence_se(oof: pd.DataFrame) -> float:
    """Standard error of the mean fold Δ AUC from the test units' influence values, summed by student (the
    clustered form, as Obuchowski 1997 does for DeLong): it holds every fitted model fixed."""
    n_folds = oof.groupby(["repeat", "fold"]).ngroups
    parts = []
    for _, fold in oof.groupby(["repeat", "fold"]):
        y = fold["y"].to_numpy().astype(bool)
        ic = placement_influence(y, fold["combined"].to_numpy()) - placement_influence(y, fold["mined"].to_numpy())
        parts.append(pd.Series(ic / (len(fold) * n_folds), index=fold["student"].to_numpy()))
    per_student = pd.concat(parts).groupby(level=0).sum().to_numpy()
    g = len(per_student)
    return float(np.sqrt(g / (g - 1) * np.sum((per_student - per_student.mean()) ** 2)))


def one_dataset(signal: float, args, seed: int) -> dict:
    """One dataset's fold differences (with their repeat and sizes), headline and bootstrap interval."""
    mined, rules, y, students = tables(np.random.default_rng(seed), args.students, args.units, signal)
    cv, repeats = splitter(args, seed)
    with threadpool_limits(1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res, oof, _ = compute_incremental_value_precomputed(
            mined, rules, y, students, cv=cv, repeats=repeats, n_boot=200, ablation=False, transfer=False,
            learning_curve=None, random_state=seed)
    head = res["comparisons"][0]
    folds = pd.DataFrame(res["folds"]).pivot_table(index=["repeat", "fold"], columns="variant", values="auc")
    sizes = pd.DataFrame(res["folds"]).groupby(["repeat", "fold"])[["n_train", "n_test"]].first()
    return {"d": (folds["combined"] - folds["mined"]).to_numpy(), "repeat": folds.index.get_level_values(0).to_numpy(),
            "n_train": sizes["n_train"].to_numpy(), "n_test": sizes["n_test"].to_numpy(),
            "ic_se": influence_se(oof), "p": head["p_value"], "boot_low": head["boot_ci_low"], "boot_high": head["boot_ci_high"]}


def share(hits) -> tuple[float, float]:
    hits = np.asarray(hits, dtype=float)
    p = float(hits.mean())
    return p, float(np.sqrt(p * (1 - p) / len(hits)))


def fmt(pair) -> str:
    return f"{pair[0]:.3f} ± {pair[1]:.3f}"


def corrected_t(d, repeat, n_train, n_test, keep_repeats):
    """Nadeau & Bengio's corrected t on the folds of the first ``keep_repeats`` repeats: (mean, se, df) per row."""
    use = repeat < keep_repeats
    d, ratio = d[:, use], n_test[:, use].mean(axis=1) / n_train[:, use].mean(axis=1)
    se = np.sqrt((1.0 / d.shape[1] + ratio) * d.var(axis=1, ddof=1))
    return d.mean(axis=1), se, d.shape[1] - 1


def within_repeat_se(d, repeat, n_train, n_test, keep_repeats):
    """Reference only: the k-fold standard error sd(fold d) / sqrt(k) pooled over repeats, which holds the
    training sets fixed (Bengio & Grandvalet 2004 show it is biased low in general)."""
    use = repeat < keep_repeats
    d, rep = d[:, use], repeat[use]
    k = int(np.sum(rep == 0))
    var = np.mean([d[:, rep == r].var(axis=1, ddof=1) for r in range(keep_repeats)], axis=0)
    return d.mean(axis=1), np.sqrt(var / k), keep_repeats * (k - 1)


def readouts(mean, se, df, truth) -> dict:
    """Rejection and coverage of the three ways to read one (mean, se, df): name -> (rejects, covers, half-width
    of the interval, or distance from the estimate to the one-sided bound)."""
    t = np.where(se > 0, mean / np.where(se > 0, se, 1.0), np.sign(mean) * np.inf)
    one = sps.t.sf(t, df)
    two = 2.0 * sps.t.sf(np.abs(t), df)
    q90, q95 = sps.t.ppf(0.95, df) * se, sps.t.ppf(0.975, df) * se
    return {
        "one-sided p, 90% interval": (one < ALPHA, (mean - q90 <= truth) & (truth <= mean + q90), q90),
        "two-sided p, 95% interval": (two < ALPHA, (mean - q95 <= truth) & (truth <= mean + q95), q95),
        "one-sided p, one-sided 95% bound": (one < ALPHA, mean - q90 <= truth, q90),
    }


def procedures(repeats: int, is_split: bool) -> list:
    if is_split:
        return [("corrected t (random splits)", corrected_t, 1)]
    out = [(f"corrected t, {r} repeat{'s' * (r > 1)}", corrected_t, r) for r in range(1, repeats + 1)]
    return out + [(f"within-repeat k-fold SE (reference), {repeats} repeats", within_repeat_se, repeats)]


def score(case: dict) -> None:
    """Print every procedure's rejection rate and coverage on one recorded case."""
    d, repeat, n_train, n_test = case["d"], case["repeat"], case["n_train"], case["n_test"]
    truth = float(case["truth"])
    print(f"\n{case['name']}: {len(d)} datasets, design {case['design']}; true Δ AUC {truth:+.4f} "
          f"± {float(case['truth_se']):.4f} (MC se); mean fold Δ {d.mean():+.4f}")
    for label, proc, r in procedures(int(repeat.max()) + 1, str(case["design"]).startswith("splits")):
        mean, se, df = proc(d, repeat, n_train, n_test, r)
        print(f"  {label:<44} mean se² / variance of its Δ over the datasets: "
              f"{np.mean(se ** 2) / mean.var(ddof=1):.2f} (> 1: the se overstates)")
        for readout, (rejects, covers, width) in readouts(mean, se, df, truth).items():
            print(f"  {label:<44} {readout:<33} rejects {fmt(share(rejects))}  covers {fmt(share(covers))}  "
                  f"half-width {np.mean(width):.4f}")
    mean = d.mean(axis=1)
    # The fold correlation the corrected t assumes, rho/(1-rho) = n_test/n_train, against the one implied by the
    # datasets: var(mean) / E[var(d)] = rho/(1-rho) + 1/J for J equicorrelated differences.
    implied = mean.var(ddof=1) / d.var(axis=1, ddof=1).mean() - 1.0 / d.shape[1]
    print(f"  fold correlation rho/(1-rho): assumed {np.mean(n_test / n_train):.3f}, implied by the datasets "
          f"{implied:.3f}")
    for readout, (rejects, covers, width) in readouts(mean, case["ic_se"], np.inf, truth).items():
        print(f"  {'clustered influence-value SE (models fixed)':<44} {readout:<33} rejects {fmt(share(rejects))}  "
              f"covers {fmt(share(covers))}  half-width {np.mean(width):.4f}")
    boot = share((case["boot_low"] <= truth) & (truth <= case["boot_high"]))
    print(f"  95% student bootstrap of repeat 0 (secondary) covers {fmt(boot)}")


def design(args) -> str:
    if args.splits:
        return f"splits {args.splits} x test share {args.test_share:g}"
    return f"{args.repeats} x {args.folds} folds"


def run_case(name, signal, args, parallel, seed0) -> dict | None:
    count = args.null if signal == 0 else args.signal
    if count == 0:
        return None
    t0 = time.perf_counter()
    n_train = args.students - round(args.students * (args.test_share if args.splits else 1.0 / args.folds))
    truth, truth_se = true_delta(signal, n_train, args.units, args.truth_draws, args.truth_units, seed0 + 999_999)
    rows = []
    for row in parallel(joblib.delayed(one_dataset)(signal, args, seed0 + k) for k in range(count)):
        rows.append(row)
        if len(rows) % 20 == 0:  # progress on stderr, so that a run cut short still says how far it got
            print(f"  {name}: {len(rows)}/{count} datasets, rejecting {np.mean([r['p'] < ALPHA for r in rows]):.3f}",
                  file=sys.stderr, flush=True)
    case = {"name": name, "design": design(args), "truth": truth, "truth_se": truth_se,
            "train_students": n_train, "seconds": time.perf_counter() - t0,
            "seeds": seed0 + np.arange(count), "repeat": rows[0]["repeat"],
            **{key: np.array([r[key] for r in rows]) for key in ("d", "n_train", "n_test", "ic_se", "boot_low",
                                                                        "boot_high")}}
    print(f"\n{name}: {count} datasets of {args.students} students x {args.units} units, {case['design']} "
          f"({case['seconds']:.0f} s); true Δ for training sets of {n_train} students")
    return case


def save(path: str, cases: list) -> None:
    """Record every case's fold differences, so that other procedures can be scored later (``--score``)."""
    arrays = {}
    for i, case in enumerate(cases):
        arrays.update({f"{i}/{key}": np.asarray(value) for key, value in case.items()})
    np.savez_compressed(path, **arrays)


def load(paths: list) -> list:
    """Cases of recorded runs, pooling runs of the same case and design (e.g. runs with different ``--seed``)."""
    pooled = {}
    for path in paths:
        with np.load(path) as data:
            for i in sorted({key.split("/")[0] for key in data.files}, key=int):
                case = {key.split("/")[1]: data[key] for key in data.files if key.split("/")[0] == i}
                pooled.setdefault((str(case["name"]), str(case["design"])), []).append(case)
    return [_pool(parts) for parts in pooled.values()]


def _pool(parts: list) -> dict:
    if len({float(p["truth"]) for p in parts}) > 1 or len({tuple(p["repeat"]) for p in parts}) > 1:
        raise SystemExit(f"cannot pool runs of {parts[0]['name']!s}: their truths or fold layouts differ")
    stacked = {key: np.concatenate([p[key] for p in parts]) for key in ("d", "n_train", "n_test", "ic_se",
                                                                         "boot_low", "boot_high", "seeds")}
    if len(np.unique(stacked["seeds"])) < len(stacked["seeds"]):
        raise SystemExit(f"cannot pool runs of {parts[0]['name']!s}: they share dataset seeds (use another --seed)")
    return {**parts[0], **stacked}


def simulator_null(args, seed0: int, parallel) -> None:
    """The library's own headline (its defaults, or the design of the command line) on null simulated logs."""
    if args.simulator == 0:
        return
    t0 = time.perf_counter()
    p = np.array(list(parallel(joblib.delayed(simulator_p)(args, seed0 + k) for k in range(args.simulator))))
    print(f"\nsimulator null knob (every label link 0): {args.simulator} logs of {args.students} students, "
          f"{design(args)} ({time.perf_counter() - t0:.0f} s)")
    print(f"  rejects at α={ALPHA} (the headline's own p-value): {fmt(share(p < ALPHA))}")


def simulator_p(args, seed: int) -> float:
    from rulefeat import EventLog, incremental_value
    from rulefeat.evaluate.value.engine import demo_rules_path
    from rulefeat.simulate import BEHAVIOURS, tutor_logs

    data = tutor_logs(args.students, seed=seed, label_links=dict.fromkeys(BEHAVIOURS, 0.0))
    cv, repeats = splitter(args, seed)
    with threadpool_limits(1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        report = incremental_value(EventLog(data.events), data.windows[["student", "start", "end"]],
                                   data.windows["label"].to_numpy(), demo_rules_path(), cv=cv, repeats=repeats,
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
    parser.add_argument("--folds", type=int, default=5, help="student-grouped folds per repeat (default 5)")
    parser.add_argument("--splits", type=int, default=0,
                        help="random student-grouped train/test splits instead of repeated folds (default 0: folds)")
    parser.add_argument("--test-share", type=float, default=0.2, help="test share of a random split (default 0.2)")
    parser.add_argument("--truth-draws", type=int, default=30, help="training samples for the true Δ (default 30)")
    parser.add_argument("--truth-units", type=int, default=60_000, help="test units for the true Δ (default 60,000)")
    parser.add_argument("--simulator", type=int, default=0, help="simulated null logs through incremental_value "
                                                                 "(default 0: skipped)")
    parser.add_argument("--n-jobs", type=int, default=1, help="parallel datasets (default 1)")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--record", help="save the fold differences of every dataset to this .npz file")
    parser.add_argument("--score", nargs="+", metavar="NPZ",
                        help="score recorded runs (pooled by case and design) instead of running new datasets")
    args = parser.parse_args(argv)
    print(f"calibration of the headline procedures (α = {ALPHA}); ± is the Monte-Carlo standard error")
    if args.score:
        for case in load(args.score):
            score(case)
        return 0
    parallel = joblib.Parallel(n_jobs=args.n_jobs, return_as="generator")
    cases = [run_case("rules redundant with the mined features (null)", 0.0, args, parallel, args.seed * 10_000),
             run_case(f"rules carry a real signal (weight {args.weight:g})", args.weight, args, parallel,
                      args.seed * 10_000 + 5_000)]
    cases = [c for c in cases if c is not None]
    if args.record and cases:
        save(args.record, cases)
    for case in cases:
        score(case)
    simulator_null(args, args.seed * 10_000 + 8_000, parallel)
    sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())
