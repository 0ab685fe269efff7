"""``LogFeatures``: systematic generic features of each unit's events, as a scikit-learn transformer."""

from __future__ import annotations

import numbers

import numpy as np
import pandas as pd
from sklearn.utils.validation import check_is_fitted

from .. import _frame
from .._base import UnitTransformer
from .._text import did_you_mean
from ..errors import ParameterError, UnitError
from ..units import UnitIndex
from . import DEFAULT_FAMILIES, FAMILIES, Settings, TrainingEvents, UnitView
from .mastery import BKT
from .select import select

__all__ = ["LogFeatures"]


def _is_int(v) -> bool:
    return isinstance(v, numbers.Integral) and not isinstance(v, bool)


def _is_prob(v) -> bool:
    return isinstance(v, numbers.Real) and not isinstance(v, bool) and 0 < v < 1


def _is_names(v) -> bool:
    return v is None or (isinstance(v, (list, tuple)) and len(v) > 0 and all(isinstance(n, str) for n in v))


def _is_quantiles(v) -> bool:
    return isinstance(v, (list, tuple)) and all(_is_prob(q) for q in v) and len(set(v)) == len(v)


def _fit_family(name: str, train: TrainingEvents, settings: Settings):
    fit = FAMILIES[name].fit
    return None if fit is None else fit(train, settings)


class LogFeatures(UnitTransformer):
    """Mined features of every unit's events, in families (see docs/features.md for every formula).

    ``X`` is a table of unit keys (e.g. student, start, end for windows); the
    events come from ``log``.  Everything learned — typical durations per step
    and skill, pause thresholds, the BKT model, which features to keep — is
    learned in ``fit`` from the students present in the X given to fit.

    Parameters
    ----------
    log : EventLog
        The events; shared, never copied (``copy.deepcopy(log) is log``).
    unit : str or rulefeat.units.Unit, default="window"
        What a row of X describes: "window", "last", "step", "problem", "session", "student".
    families : list of str, optional
        Which families to compute (names in ``rulefeat.mined.FAMILIES``); None means all:
        volume, correctness, help, timing, sequence, history, mastery.
    prune : bool, default=True
        Drop features that are constant or exact duplicates on the training units.
    max_features : int, optional
        Keep at most this many features, ranked on the training units (|Spearman| with y
        when fit gets y, else rank variance; ties by name).  None keeps every
        non-constant, non-duplicate feature.
    mastery_threshold : float, default=0.95
        P(known) from which an attempt counts as being on a mastered skill (0.95 is
        common practice, no source).
    pause_quantiles : sequence of float, default=(0.9, 0.99)
        Quantiles of the training students' gaps above which an action counts as after a pause.
    min_norm_events : int, default=5
        A step or skill needs this many training durations to get its own typical
        duration; otherwise the overall median is used.
    hint_level_field, hint_total_field : str, default="hint_level", "hint_levels_total"
        Number fields with the level of a hint and the number of levels of its step;
        when the log lacks them, ``help__last_hint_step_share`` is NaN.
    bkt_options : dict, optional
        Options of :class:`rulefeat.mastery.BKT` (e.g. ``{"n_restarts": 1}``).
    bkt_max_attempts : int or None, default=1_000_000
        Fit BKT on at most this many training attempts, taking whole students in
        a seeded random order (four parameters per skill need far fewer); None uses all.
    missing_students : {"error", "empty"}, default="error"
        What to do with rows of X naming students absent from the log.
    empty_units : {"empty", "error"}, default="empty"
        Units covering no events are kept with a warning (count-like features 0, others NaN), or
        refused with a ``UnitError`` naming them (what :func:`~rulefeat.make_detector` uses).
    random_state : int, numpy.random.Generator or None, default=None
        Seeds the BKT restarts and the choice of students under ``bkt_max_attempts``.

    Attributes
    ----------
    feature_names_out_ : list of str
        Kept features, ``<family>__<feature>``, in family order.
    candidate_features_ : list of str
        Every feature computed before selection.
    dropped_features_ : dict
        ``{feature: reason}`` for the candidates not kept.
    feature_scores_ : dict
        Ranking scores, when ``max_features`` had to choose.
    family_state_ : dict
        What each family learned in fit (timing norms and pause thresholds, the BKT model).

    Examples
    --------
    >>> import pandas as pd
    >>> from rulefeat import EventLog
    >>> events = pd.DataFrame({
    ...     "student": ["s1"] * 4 + ["s2"] * 3, "time": [0, 5, 9, 30, 0, 4, 20],
    ...     "action": ["attempt", "hint", "attempt", "attempt", "attempt", "attempt", "hint"],
    ...     "correct": [0, None, 1, 1, 0, 0, None], "step": ["a", "a", "a", "b", "a", "a", "b"],
    ...     "skill": ["add"] * 3 + ["sub"] + ["add"] * 2 + ["sub"]})
    >>> log = EventLog(events)
    >>> windows = pd.DataFrame({"student": ["s1", "s2"], "start": [0, 0], "end": [40, 40]})
    >>> feats = LogFeatures(log, families=["volume", "correctness"]).fit(windows)
    >>> out = feats.transform(windows)
    >>> out[["volume__attempts", "correctness__accuracy"]].to_numpy().tolist()
    [[3.0, 0.6666666666666666], [2.0, 0.0]]
    """

    def __init__(self, log=None, *, unit="window", families=None, prune=True, max_features=None,
                 mastery_threshold=0.95, pause_quantiles=(0.9, 0.99), min_norm_events=5,
                 hint_level_field="hint_level", hint_total_field="hint_levels_total", bkt_options=None,
                 bkt_max_attempts=1_000_000, missing_students="error", empty_units="empty", random_state=None):
        self.log = log
        self.unit = unit
        self.families = families
        self.prune = prune
        self.max_features = max_features
        self.mastery_threshold = mastery_threshold
        self.pause_quantiles = pause_quantiles
        self.min_norm_events = min_norm_events
        self.hint_level_field = hint_level_field
        self.hint_total_field = hint_total_field
        self.bkt_options = bkt_options
        self.bkt_max_attempts = bkt_max_attempts
        self.missing_students = missing_students
        self.empty_units = empty_units
        self.random_state = random_state

    # -- parameters -----------------------------------------------------------
    def _constraints(self) -> dict:
        return {
            **super()._constraints(),
            "families": (_is_names, f"None or a non-empty list of family names from {list(FAMILIES)!r}"),
            "prune": (lambda v: isinstance(v, (bool, np.bool_)), "True or False"),
            "max_features": (lambda v: v is None or (_is_int(v) and v >= 1), "None or an int >= 1"),
            "mastery_threshold": (_is_prob, "a float strictly between 0 and 1"),
            "pause_quantiles": (_is_quantiles, "a list of distinct floats strictly between 0 and 1"),
            "min_norm_events": (lambda v: _is_int(v) and v >= 1, "an int >= 1"),
            "hint_level_field": (lambda v: isinstance(v, str), "a field name (str)"),
            "hint_total_field": (lambda v: isinstance(v, str), "a field name (str)"),
            "bkt_options": (lambda v: v is None or isinstance(v, dict), "None or a dict of BKT options"),
            "bkt_max_attempts": (lambda v: v is None or (_is_int(v) and v >= 1), "None or an int >= 1"),
            "random_state": (lambda v: v is None or _is_int(v) or isinstance(v, np.random.Generator),
                             "None, an int or a numpy.random.Generator"),
        }

    def _family_names(self) -> tuple[str, ...]:
        if self.families is None:
            return DEFAULT_FAMILIES
        for name in self.families:
            if name not in FAMILIES:
                raise ParameterError(f"The 'families' parameter of LogFeatures names an unknown family "
                                     f"{name!r}.{did_you_mean(name, FAMILIES)} Known families: "
                                     f"{list(FAMILIES)!r}.")
        # Table order, duplicates removed, so names and columns do not depend on how the list was written.
        return tuple(name for name in FAMILIES if name in self.families)

    def _settings(self) -> Settings:
        options = dict(self.bkt_options or {})
        allowed = [k for k in BKT().get_params() if k != "random_state"]
        for key in options:
            if key not in allowed:
                raise ParameterError(f"The 'bkt_options' parameter of LogFeatures has an unknown key "
                                     f"{key!r}.{did_you_mean(key, allowed)} Allowed keys: {allowed!r} "
                                     "(the seed comes from random_state).")
        return Settings(mastery_threshold=float(self.mastery_threshold),
                        pause_quantiles=tuple(float(q) for q in self.pause_quantiles),
                        min_norm_events=int(self.min_norm_events), hint_level_field=self.hint_level_field,
                        hint_total_field=self.hint_total_field, bkt_options=options,
                        bkt_max_attempts=self.bkt_max_attempts, random_state=self.random_state)

    # -- fit / transform ----------------------------------------------------------
    def fit(self, X: pd.DataFrame, y=None) -> LogFeatures:
        """Learn the families' state and the kept features from the students in ``X``.

        Parameters
        ----------
        X : pandas.DataFrame
            Unit keys of the training units.
        y : array-like, optional
            Labels of the rows of X; used only to rank features under ``max_features``.

        Returns
        -------
        self : LogFeatures
        """
        self._fit_columns(_frame.as_pandas(X), y)
        return self

    def fit_transform(self, X: pd.DataFrame, y=None, **fit_params) -> pd.DataFrame:
        """Same as ``fit(X, y).transform(X)``, computing the training features only once."""
        X = _frame.as_pandas(X)
        columns = self._fit_columns(X, y)
        return self._output(columns, X)

    def transform(self, X: pd.DataFrame) -> pd.DataFrame:
        """The kept features of every row of ``X`` (one row out per row in, same index).

        Parameters
        ----------
        X : pandas.DataFrame
            Unit keys; each row's features depend only on its own events and the fitted state.

        Returns
        -------
        pandas.DataFrame of float
            Columns ``get_feature_names_out()``.
        """
        check_is_fitted(self, "feature_names_out_")
        X = _frame.as_pandas(X)
        self._check_table(X, self.unit_, "transform")
        index = self._resolve(X, "transform")
        kept = {name.split("__", 1)[0] for name in self.feature_names_out_}
        return self._output(self._compute(index, [f for f in self.families_ if f in kept]), X)

    def _fit_columns(self, X, y) -> dict:
        train = self.prepare_fit(X)
        self.keep_family_state({name: _fit_family(name, train, self.settings_) for name in self.families_})
        columns = self.candidate_columns(X)
        self.finish_fit(columns, y, len(X))
        return columns

    def prepare_fit(self, X: pd.DataFrame) -> TrainingEvents:
        """The first step of :meth:`fit`: check ``X`` and the parameters; the training students' events.

        :meth:`fit` then learns each family's state from them (:meth:`keep_family_state`), computes
        :meth:`candidate_columns` on the training units and keeps some (:meth:`finish_fit`).
        :mod:`rulefeat.scale` runs the same steps with the state learned across a cluster.
        """
        unit = self._start_fit(X)
        self.settings_ = self._settings()
        codes = self.log.student_codes(X[unit.student], missing="empty", where=self._where("fit"))
        train = TrainingEvents(self.log, codes)
        if not len(train.students):
            raise UnitError(f"{self._where('fit')}: none of the students in X is in the event log; "
                            "there is nothing to learn from.")
        self.families_ = self._family_names()
        self.log_schema_ = {name: self.log.kind(name) for name in self._fields_read() if self.log.has(name)}
        return train

    def keep_family_state(self, state: dict) -> LogFeatures:
        """Keep ``{family: fitted state}`` (what :attr:`family_state_` holds) for the families in use."""
        missing = [name for name in self.families_ if name not in state]
        if missing:
            raise ParameterError(f"{self._where('keep_family_state')}: no fitted state for the families "
                                 f"{missing!r}.")
        self.family_state_ = {name: state[name] for name in self.families_}
        return self

    def candidate_columns(self, X: pd.DataFrame) -> dict:
        """``{feature: per-unit array}`` of every candidate feature of ``X``'s units, before selection."""
        check_is_fitted(self, "family_state_")
        return self._compute(self._resolve(_frame.as_pandas(X), "fit"), self.families_)

    def finish_fit(self, columns: dict, y, n_units: int) -> LogFeatures:
        """The last step of :meth:`fit`: choose the kept features from the training units' ``columns``."""
        chosen = select(columns, y, self.max_features, prune=bool(self.prune), where=self._where("fit"))
        if not chosen.kept:
            raise UnitError(f"{self._where('fit')}: every candidate feature is constant or a duplicate "
                            f"on the {n_units} training unit(s), so none is left. Fit on more (and more "
                            "varied) units, or pass prune=False.")
        self.candidate_features_ = list(columns)
        self.feature_names_out_ = chosen.kept
        self.dropped_features_ = chosen.dropped
        self.feature_scores_ = chosen.scores
        return self

    def _fields_read(self) -> tuple[str, ...]:
        """Every field the families may read; those the training log has are required when scoring."""
        return ("student", "time", "action", "correct", "duration", "gap", "session", "step", "problem",
                "skill", self.hint_level_field, self.hint_total_field)

    def _compute(self, index: UnitIndex, families) -> dict:
        view = UnitView(self.log, index, self.settings_)
        columns = {}
        for name in families:
            values = FAMILIES[name].compute(view, self.family_state_[name])
            columns.update({f"{name}__{feature}": col for feature, col in values.items()})
        return columns
