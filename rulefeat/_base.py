"""What every transformer over a units table shares (contracts 1-3).

``X`` is a table of unit keys; the events come from the :class:`EventLog`
handle given as a parameter.  ``fit`` learns from the events of the students
present in the ``X`` it is given, and nothing else; ``transform`` computes each
row from that row's own events and the fitted state.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted

from ._aggregate import Aggregator
from ._validation import InstanceOf, Options, Satisfies, validate
from .errors import UnitError
from .log.eventlog import EventLog
from .units import UNIT_NAMES, Unit, as_unit


def check_params(estimator, constraints: dict) -> None:
    """Check parameters against ``{name: Constraint or (test, 'what it must be')}`` (see ``_validation``)."""
    validate(type(estimator).__name__, {name: getattr(estimator, name) for name in constraints}, constraints)


def is_log(value) -> bool:
    return isinstance(value, EventLog)


def is_unit(value) -> bool:
    return isinstance(value, Unit) or value in UNIT_NAMES


class UnitTransformer(TransformerMixin, BaseEstimator):
    """Base of :class:`RuleFeatures` and :class:`LogFeatures`; not used directly."""

    def _constraints(self) -> dict:
        return {
            "log": InstanceOf(EventLog, "a rulefeat.EventLog"),
            "unit": Satisfies(is_unit, f"one of {sorted(UNIT_NAMES)!r} or a rulefeat.units.Unit"),
            "missing_students": Options(("error", "empty")),
        }

    def _where(self, method: str) -> str:
        return f"{type(self).__name__}.{method}"

    def _start_fit(self, X) -> Unit:
        check_params(self, self._constraints())
        unit = as_unit(self.unit, where=type(self).__name__)
        self._check_table(X, unit, "fit")
        self.n_features_in_ = X.shape[1]
        self.feature_names_in_ = np.asarray([str(c) for c in X.columns], dtype=object)
        self.unit_ = unit
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
        index = self.unit_.resolve(self.log, X, missing_students=self.missing_students,
                                   where=self._where("transform"))
        return Aggregator(index, self.log.values("time"))

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
