"""What every transformer over a units table shares (contracts 1-3 and 8).

``X`` is a table of unit keys; the events come from the :class:`EventLog`
handle given as a parameter.  ``fit`` learns from the events of the students
present in the ``X`` it is given, and nothing else; ``transform`` computes each
row from that row's own events and the fitted state.

The log is a run-time input, not fitted state: a *fitted* transformer pickles
without it (``log`` comes back as None), so a saved model holds no events and
no student ids; :meth:`UnitTransformer.bind` gives a copy that reads another
log.  An unfitted transformer is a specification of work and pickles with its
log, which is how scikit-learn's parallel searches ship it to their workers.
``copy.deepcopy`` (and so ``clone``) keeps the same log object, never a copy.
"""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted

from ._aggregate import Aggregator
from ._validation import InstanceOf, Options, Satisfies, validate
from .errors import LogSchemaError, ParameterError, UnitError
from .log.eventlog import EventLog
from .units import UNIT_NAMES, Unit, as_unit


def check_params(estimator, constraints: dict) -> None:
    """Check parameters against ``{name: Constraint or (test, 'what it must be')}`` (see ``_validation``)."""
    validate(type(estimator).__name__, {name: getattr(estimator, name) for name in constraints}, constraints)


def is_log(value) -> bool:
    return isinstance(value, EventLog)


def is_unit(value) -> bool:
    return isinstance(value, Unit) or value in UNIT_NAMES


def raise_schema_differences(differ: list[str], where: str) -> None:
    if differ:
        raise LogSchemaError(f"{where}: the log does not have the schema the detector was fitted on: "
                             + "; ".join(dict.fromkeys(differ)) + ". Build the log with the same columns (and "
                             "column mapping) as the training log.")


class UnitTransformer(TransformerMixin, BaseEstimator):
    """Base of :class:`RuleFeatures` and :class:`LogFeatures`; not used directly."""

    def _constraints(self) -> dict:
        return {
            "log": InstanceOf(EventLog, "a rulefeat.EventLog"),
            "unit": Satisfies(is_unit, f"one of {sorted(UNIT_NAMES)!r} or a rulefeat.units.Unit"),
            "missing_students": Options(("error", "empty")),
            "empty_units": Options(("error", "empty")),
        }

    # -- the log is a run-time input ------------------------------------------------------------
    def bind(self, log: EventLog, *, empty_units: str = "error"):
        """A copy of this transformer (fitted state included) that reads ``log``; see :func:`rulefeat.bind`.

        Parameters
        ----------
        log : EventLog
            The events to score; it needs every field the fitted state reads, with the same kind.
        empty_units : {"error", "empty"}, default "error"
            Units finding no events in ``log`` raise a ``UnitError`` naming them, or (``"empty"``)
            are scored as empty units with a warning.

        Returns
        -------
        UnitTransformer
            A new transformer; this one is left unchanged.
        """
        where = f"{type(self).__name__}.bind"
        validate(where, {"log": log, "empty_units": empty_units},
                 {"log": InstanceOf(EventLog, "a rulefeat.EventLog"), "empty_units": Options(("error", "empty"))})
        self._check_schema(log, where)
        bound = copy.deepcopy(self)  # shares the old log rather than copying it (contract 1), then reads the new one
        bound.log, bound.empty_units, bound.missing_students = log, empty_units, empty_units
        return bound

    def _check_schema(self, log: EventLog, where: str) -> None:
        """Refuse a log lacking a field the fitted state reads, or holding it as another kind."""
        raise_schema_differences(self._schema_differences(log), where)

    def _schema_differences(self, log: EventLog) -> list[str]:
        differ = []
        for name, kind in getattr(self, "log_schema_", {}).items():
            if not log.has(name):
                differ.append(f"{name!r} ({kind}) is missing")
            elif log.kind(name) != kind:
                differ.append(f"{name!r} is a {log.kind(name)} field, expected {kind}")
        return differ

    def _require_log(self, method: str) -> None:
        if self.log is None:
            why = " (a fitted transformer is saved and pickled without its log)" if hasattr(self, "log_schema_") \
                else ""
            raise ParameterError(f"{self._where(method)}: this transformer has no event log to read{why}. "
                                 "Bind one: rulefeat.bind(detector, log), or transformer.bind(log).")
        check_params(self, {"log": self._constraints()["log"]})

    def __getstate__(self) -> dict:
        state = dict(super().__getstate__())  # a copy: object.__getstate__ returns the live __dict__
        for name in self._run_time_caches():
            state.pop(name, None)
        if "log_schema_" in state:
            state["log"] = None  # fitted state only: no events, no student ids (contract 8, DEVELOPERS.md)
        return state

    def __deepcopy__(self, memo) -> UnitTransformer:
        # The log's own __deepcopy__ returns the log itself, so a copy shares it (contract 1).
        new = object.__new__(type(self))
        memo[id(self)] = new
        skip = self._run_time_caches()
        new.__dict__.update({k: copy.deepcopy(v, memo) for k, v in self.__dict__.items() if k not in skip})
        return new

    def _run_time_caches(self) -> tuple[str, ...]:
        """Attributes that memoise work on the bound log; never pickled nor copied."""
        return ()

    def _where(self, method: str) -> str:
        return f"{type(self).__name__}.{method}"

    def _start_fit(self, X) -> Unit:
        self._require_log("fit")
        check_params(self, self._constraints())
        unit = as_unit(self.unit, where=type(self).__name__)
        self._check_table(X, unit, "fit")
        self.n_features_in_ = X.shape[1]
        self.feature_names_in_ = np.asarray([str(c) for c in X.columns], dtype=object)
        self.unit_ = unit
        # What the log looked like, for the saved manifest (no student data: kinds and action labels only).
        self.time_kind_ = self.log.time_kind
        self.action_labels_ = [str(a) for a in self.log.categories("action")]
        settings = self.log.settings  # how the log derived its fields, for live scoring (no student data)
        self.log_settings_ = {key: settings[key] for key in
                              ("session_gap", "duration_cap", "session_derived", "duration_derived")}
        return unit

    def _check_table(self, X, unit: Unit, method: str) -> None:
        if not isinstance(X, pd.DataFrame):
            raise UnitError(f"{self._where(method)}: X must be a pandas DataFrame of unit keys with columns "
                            f"{list(unit.keys())!r}. Got {type(X).__name__}. (rulefeat transformers read "
                            "events from the log; X only says which units to describe.)")
        if len(X) == 0:
            raise UnitError(f"{self._where(method)}: X has no rows; give at least one unit.")

    def _training_log(self, X: pd.DataFrame) -> EventLog:
        """The events of the students present in X — all that fit may learn from (contract 2)."""
        codes = self.log.student_codes(X[self.unit_.student], missing="empty", where=self._where("fit"))
        present = np.unique(codes[codes >= 0])
        if not len(present):
            raise UnitError(f"{self._where('fit')}: none of the students in X is in the event log; "
                            "there is nothing to learn from.")
        return self.log.for_students(self.log.students[present])

    def _start_transform(self, X) -> Aggregator:
        """Resolve X's units on the shared log itself (no copy; per-log caches serve every fold)."""
        check_is_fitted(self, "unit_")
        self._check_table(X, self.unit_, "transform")
        return Aggregator(self._resolve(X, "transform"), self.log.values("time"))

    def _resolve(self, X: pd.DataFrame, method: str):
        """X's units on the bound log itself (no copy; per-log caches serve every fold)."""
        if method != "fit":
            self._require_log(method)
            self._check_schema(self.log, self._where(method))
        return self.unit_.resolve(self.log, X, missing_students=self.missing_students,
                                  empty_units=self.empty_units, where=self._where(method))

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        check_is_fitted(self, "feature_names_out_")
        return np.asarray(self.feature_names_out_, dtype=object)

    def _output(self, columns: dict, X: pd.DataFrame) -> pd.DataFrame:
        names = list(self.feature_names_out_)
        data = {name: np.asarray(columns[name], dtype=np.float64) for name in names}
        return pd.DataFrame(data, index=X.index, columns=names)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.string = True
        tags.requires_fit = True
        return tags
