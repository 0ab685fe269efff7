"""Mined log features: systematic, generic per-unit features in families.

The families form a table (:data:`FAMILIES`, name -> :class:`Family`), so a new
family is one entry here and one module; :class:`rulefeat.LogFeatures` reads
the table and never names a family itself.  Each family's ``compute`` returns
``{feature: per-unit array}``; the transformer names the columns
``<family>__<feature>``.  Formulas and the missing-data policy of every feature
are in docs/features.md.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from . import counts, knowledge, stream, timing
from ._events import Settings, TrainingEvents, UnitView

__all__ = ["Family", "FAMILIES", "DEFAULT_FAMILIES", "Settings", "TrainingEvents", "UnitView"]


@dataclass(frozen=True)
class Family:
    """A group of features computed together.

    Attributes
    ----------
    compute : callable
        ``compute(view, state) -> {feature: ndarray of shape (n_units,)}``; the
        keys must depend on the settings only, never on the data.
    fit : callable or None
        ``fit(training_events, settings) -> state`` learns from the training
        students' events only; None for families that learn nothing.
    summary : str
        One line for listings.
    gather, fit_gathered : callable or None
        For fitting across many logs of disjoint students (:mod:`rulefeat.scale`):
        ``gather(training_events, settings) -> pieces`` reads what ``fit`` learns from, and
        ``fit_gathered(pieces, settings) -> state`` learns the same state from the pieces of
        every log put together.  Pieces are a dict of arrays, with category codes under
        ``"codes"`` (``{field: codes}``) and the labels they stand for under ``"labels"``, so they
        can be recoded to shared labels and concatenated.  None where ``fit`` is None or fitted otherwise (mastery's
        EM sums expected counts across logs instead).
    """

    compute: Callable
    fit: Callable | None = None
    summary: str = ""
    gather: Callable | None = None
    fit_gathered: Callable | None = None


FAMILIES: dict[str, Family] = {
    "volume": Family(counts.volume, summary="actions, attempts, hints, rates per minute, distinct keys"),
    "correctness": Family(counts.correctness, summary="accuracy, first-attempt accuracy, errors, streaks"),
    "help": Family(counts.help_seeking, summary="hints per step, hints before attempting, last hints"),
    "timing": Family(timing.compute, timing.fit, summary="durations vs step/skill norms; pauses",
                     gather=timing.gather, fit_gathered=timing.fit_gathered),
    "sequence": Family(stream.sequence, summary="shares of consecutive right/wrong/hint pairs"),
    "history": Family(stream.history, summary="the student's past accuracy and hint rate on the skills"),
    "mastery": Family(knowledge.compute, knowledge.fit, summary="BKT P(known) at start/end, change"),
}

#: The families used when ``families=None``: all of them.
DEFAULT_FAMILIES: tuple[str, ...] = tuple(FAMILIES)
