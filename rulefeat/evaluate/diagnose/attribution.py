"""SHAP attributions of a fitted LightGBM detector, grouped by rule, for validity diagnostics.

:func:`tree_shap` computes path-dependent TreeSHAP values (Lundberg & Lee 2017; exact for trees, no
background data) in the model's raw output space - log-odds for a binary classifier.  The other
functions work on the returned table: :func:`group_shap` and :func:`shap_by_rule` total the absolute
attributions of column groups (a rule's ``<rule>__<summary>`` columns against the mined ones), and
:func:`dependence_data` (drawn by :func:`rulefeat.report.diagnose_figures.plot_dependence`) shows one feature's attribution against its value.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from ..._text import did_you_mean
from ...errors import EvaluationError

__all__ = ["tree_shap", "group_shap", "shap_by_rule", "dependence_data", "MINED"]

# The group of every column that belongs to no rule in :func:`shap_by_rule`.
MINED = "mined"


def _booster(model, where: str):
    """The fitted LightGBM Booster behind ``model``; refuse anything else."""
    import lightgbm as lgb

    if isinstance(model, lgb.Booster):
        booster = model
    elif isinstance(model, lgb.LGBMModel):
        if not getattr(model, "fitted_", False):
            raise EvaluationError(f"{where}: the LightGBM model is not fitted; call fit(X, y) first.")
        booster = model.booster_
    else:
        raise EvaluationError(f"{where}: 'model' must be a fitted LGBMClassifier, LGBMRegressor or "
                              f"lightgbm.Booster; got {type(model).__name__}. Pass the final step of a "
                              "pipeline and the matrix that step receives.")
    if booster.num_model_per_iteration() != 1:
        raise EvaluationError(f"{where}: the model has {booster.num_model_per_iteration()} outputs per "
                              "iteration (multiclass); only binary classifiers and regressors are supported.")
    return booster


def _features(X, booster, where: str) -> pd.DataFrame:
    """``X`` as a DataFrame whose columns are the booster's features, in training order."""
    trained = booster.feature_name()
    if not isinstance(X, pd.DataFrame):
        arr = np.asarray(X)
        if arr.ndim != 2 or arr.shape[1] != len(trained):
            raise EvaluationError(f"{where}: 'X' must have shape (n, {len(trained)}); got {arr.shape}.")
        return pd.DataFrame(arr, columns=trained)
    if trained == [f"Column_{j}" for j in range(len(trained))] and X.shape[1] == len(trained):
        return X  # trained on an unnamed matrix: only the width can be checked
    # LightGBM replaces whitespace in feature names by underscores; compare on that form.
    given = [re.sub(r"\s", "_", str(c)) for c in X.columns]
    if given != trained:
        missing = [t for t in trained if t not in given]
        extra = [str(c) for c, g in zip(X.columns, given, strict=True) if g not in trained]
        if not missing and not extra:
            raise EvaluationError(f"{where}: 'X' has the model's columns in another order; use X[{trained!r}].")
        hint = did_you_mean(extra[0], missing) if extra and missing else ""
        raise EvaluationError(f"{where}: 'X' columns differ from the model's features: missing {missing}, "
                              f"unexpected {extra}.{hint}")
    return X


def _sample(n: int, sample_size, random_state, where: str) -> np.ndarray:
    """Sorted row positions: all rows, or ``sample_size`` drawn without replacement."""
    if sample_size is None:
        return np.arange(n)
    if isinstance(sample_size, bool) or not isinstance(sample_size, (int, np.integer)) or sample_size < 1:
        raise EvaluationError(f"{where}: 'sample_size' must be None or a positive integer; got {sample_size!r}.")
    if sample_size >= n:
        return np.arange(n)
    try:
        rng = np.random.default_rng(random_state)
    except (TypeError, ValueError) as exc:
        raise EvaluationError(f"{where}: 'random_state' must be None, an int or a numpy Generator; "
                              f"got {random_state!r}.") from exc
    return np.sort(rng.choice(n, size=int(sample_size), replace=False))


def _positive_class(values, expected, n_features: int) -> tuple[np.ndarray, float]:
    """The one place that knows shap's output shapes across versions.

    Older shap returns a list ``[negative, positive]`` for a binary LightGBM model, some versions a
    (rows, features, 2) array, recent ones a (rows, features) array of the positive class; the expected
    value is a scalar or one entry per output.  Keep the positive (last) output in each case.
    """
    if isinstance(values, list):
        values = values[-1]
    values = np.asarray(values, dtype=float)
    if values.ndim == 3:
        values = values[:, :, -1]
    if values.ndim != 2 or values.shape[1] != n_features:
        raise EvaluationError(f"tree_shap: shap returned values of shape {values.shape}; expected "
                              f"(rows, {n_features}). This shap version is not supported.")
    return values, float(np.ravel(np.asarray(expected, dtype=float))[-1])


def tree_shap(model, X, *, sample_size: int | None = None,
              random_state: int | np.random.Generator | None = None) -> tuple[pd.DataFrame, float]:
    """Path-dependent TreeSHAP values of a fitted LightGBM model.

    Parameters
    ----------
    model : LGBMClassifier (binary), LGBMRegressor or lightgbm.Booster
        Fitted; multiclass models are refused.
    X : DataFrame or array of shape (n, n_features)
        The matrix the model predicts from, with the training columns in training order; pandas
        categorical columns are passed through as LightGBM saw them in training.
    sample_size : int, optional
        Explain at most this many rows, drawn without replacement with ``random_state`` and kept in
        their original order (so a seed always gives the same table).
    random_state : None, int or numpy Generator

    Returns
    -------
    values : DataFrame
        One row per explained row (``X``'s index) and one column per feature: SHAP values in the raw
        output space (log-odds for a binary classifier), so that
        ``expected_value + values.sum(axis=1)`` equals ``predict(X, raw_score=True)``.
    expected_value : float
        The model's mean raw output over its training data (the SHAP base value).
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PendingDeprecationWarning)  # shap's import touches old matplotlib APIs
        import shap

    where = "tree_shap"
    booster = _booster(model, where)
    frame = _features(X, booster, where)
    rows = _sample(len(frame), sample_size, random_state, where)
    subset = frame.iloc[rows]
    explainer = shap.TreeExplainer(booster, feature_perturbation="tree_path_dependent")
    with warnings.catch_warnings():
        # shap announces its binary-LightGBM output format on every call; _positive_class handles all formats.
        warnings.filterwarnings("ignore", message=".*shap values output has changed.*", category=UserWarning)
        raw = explainer.shap_values(subset)
    values, expected = _positive_class(raw, explainer.expected_value, frame.shape[1])
    return pd.DataFrame(values, index=subset.index, columns=frame.columns), expected


def _shap_table(values, where: str) -> pd.DataFrame:
    if not isinstance(values, pd.DataFrame) or values.shape[1] == 0 or len(values) == 0:
        raise EvaluationError(f"{where}: 'values' must be the non-empty DataFrame returned by tree_shap; "
                              f"got {type(values).__name__}.")
    return values


def group_shap(values: pd.DataFrame, groups: Mapping[str, Sequence[str]], *, rest: str | None = "other"
               ) -> pd.DataFrame:
    """Total absolute SHAP attribution of column groups.

    Parameters
    ----------
    values : DataFrame
        SHAP values (rows x features), e.g. from :func:`tree_shap`.
    groups : dict of group name -> list of columns
        Each column in at most one group.
    rest : str or None, default "other"
        Name of the group collecting the columns not listed; None refuses unlisted columns.

    Returns
    -------
    DataFrame indexed by group, in the given order (``rest`` last, when it has columns):
    ``n_features``; ``total_abs`` - the sum of ``|SHAP|`` over rows and the group's columns; ``share`` -
    ``total_abs`` over the total of all columns (shares sum to 1); ``mean_abs`` - ``total_abs`` per row
    (the group's mean per-row sum of ``|SHAP|``); ``mean_abs_net`` - the mean of ``|sum of the group's
    SHAP|`` per row, which is smaller when a group's columns push in opposite directions.

    Examples
    --------
    >>> v = pd.DataFrame({"a": [1.0, -1.0], "b": [-2.0, 1.0], "c": [0.5, 0.5]})
    >>> group_shap(v, {"ab": ["a", "b"]})["share"].round(3).tolist()
    [0.833, 0.167]
    """
    where = "group_shap"
    table = _shap_table(values, where)
    columns = [str(c) for c in table.columns]
    owner: dict[str, str] = {}
    for name, members in groups.items():
        if isinstance(members, str):
            raise EvaluationError(f"{where}: group {name!r} must list column names; got the string {members!r}.")
        for col in members:
            if str(col) not in columns:
                raise EvaluationError(f"{where}: group {name!r} names column {col!r}, which 'values' lacks."
                                      f"{did_you_mean(str(col), columns)}")
            if str(col) in owner:
                raise EvaluationError(f"{where}: column {col!r} is in both {owner[str(col)]!r} and {name!r}.")
            owner[str(col)] = str(name)
    unlisted = [c for c in columns if c not in owner]
    if unlisted:
        if rest is None:
            raise EvaluationError(f"{where}: columns {unlisted} are in no group; list them or set 'rest'.")
        if rest in groups:
            raise EvaluationError(f"{where}: 'rest' name {rest!r} is also a group name; choose another.")
        owner.update(dict.fromkeys(unlisted, rest))
    order = [str(g) for g in groups] + ([rest] if unlisted else [])
    return _summarise(table.to_numpy(dtype=float), np.array([order.index(owner[c]) for c in columns]), order)


def _summarise(shap: np.ndarray, group_of_column: np.ndarray, order: list[str]) -> pd.DataFrame:
    k = len(order)
    # Columns -> groups as a 0/1 matrix, so every per-row group sum is one matrix product.
    member = np.zeros((shap.shape[1], k))
    member[np.arange(shap.shape[1]), group_of_column] = 1.0
    total = np.abs(shap).sum(axis=0) @ member
    grand = total.sum()
    return pd.DataFrame({
        "n_features": member.sum(axis=0).astype(int),
        "total_abs": total,
        "share": total / grand if grand > 0 else np.full(k, np.nan),
        "mean_abs": total / len(shap),
        "mean_abs_net": np.abs(shap @ member).mean(axis=0),
    }, index=pd.Index(order, name="group"))


def shap_by_rule(values: pd.DataFrame, rule_names: Sequence[str]) -> pd.DataFrame:
    """:func:`group_shap` with one group per rule and the mined features as one group ``"mined"``.

    A column ``<rule>__<summary>`` belongs to ``<rule>`` (the longest listed rule name that prefixes
    it, so ``a__b__rate`` goes to rule ``a__b`` when both ``a`` and ``a__b`` are listed); every other
    column is a mined feature.  A rule without any column is refused, since that is usually a typo.

    Examples
    --------
    >>> v = pd.DataFrame({"skim__rate": [0.2, -0.1], "skim__any": [0.1, 0.0], "n_attempts": [-0.3, 0.4]})
    >>> shap_by_rule(v, ["skim"])[["n_features", "mean_abs"]].to_dict("list")
    {'n_features': [2, 1], 'mean_abs': [0.2, 0.35]}
    """
    where = "shap_by_rule"
    table = _shap_table(values, where)
    if isinstance(rule_names, str) or len(set(rule_names)) != len(rule_names):
        raise EvaluationError(f"{where}: 'rule_names' must be a list of distinct rule names; got {rule_names!r}.")
    if MINED in rule_names:
        raise EvaluationError(f"{where}: a rule may not be called {MINED!r}; that name is the mined-feature group.")
    by_length = sorted(map(str, rule_names), key=len, reverse=True)
    groups: dict[str, list[str]] = {str(rule): [] for rule in rule_names}
    for col in map(str, table.columns):
        rule = next((r for r in by_length if col.startswith(f"{r}__")), None)
        if rule is not None:
            groups[rule].append(col)
    empty = [rule for rule, cols in groups.items() if not cols]
    if empty:
        raise EvaluationError(f"{where}: no '<rule>__<summary>' column for rules {empty}."
                              f"{did_you_mean(empty[0], [c.split('__')[0] for c in map(str, table.columns)])}")
    return group_shap(table, groups, rest=MINED)


def dependence_data(values: pd.DataFrame, X: pd.DataFrame, feature: str) -> pd.DataFrame:
    """One feature's value and SHAP value per explained row, for a dependence plot.

    Rows are matched on the index (so a subsample from :func:`tree_shap` finds its rows of ``X``);
    the ``value`` column keeps the feature's dtype (e.g. categorical).

    Examples
    --------
    >>> v = pd.DataFrame({"gap": [0.3, -0.2]}, index=[4, 9])
    >>> X = pd.DataFrame({"gap": [1.0, 2.0, 3.0]}, index=[4, 7, 9])
    >>> dependence_data(v, X, "gap")["value"].tolist()
    [1.0, 3.0]
    """
    where = "dependence_data"
    table = _shap_table(values, where)
    if not isinstance(X, pd.DataFrame):
        raise EvaluationError(f"{where}: 'X' must be the DataFrame the values explain; got {type(X).__name__}.")
    for frame, name in ((table, "values"), (X, "X")):
        if feature not in frame.columns:
            raise EvaluationError(f"{where}: {name!r} has no column {feature!r}."
                                  f"{did_you_mean(str(feature), map(str, frame.columns))}")
    absent = table.index.difference(X.index)
    if len(absent):
        raise EvaluationError(f"{where}: {len(absent)} rows of 'values' are not in 'X' (e.g. index "
                              f"{absent[0]!r}); pass the X given to tree_shap.")
    return pd.DataFrame({"value": X.loc[table.index, feature], "shap": table[feature].astype(float)},
                        index=table.index)
