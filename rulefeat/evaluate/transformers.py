"""The two feature transformers of an evaluation, built from what the user gave (rules, ``mined``) on one log."""

from __future__ import annotations

from .._text import did_you_mean
from ..errors import EvaluationError
from ..mined.transformer import LogFeatures
from ..rules.transformer import RuleFeatures, as_ruleset
from .inputs import WHERE

__all__ = ["mined_transformer", "rules_transformer", "same_log"]


def same_log(transformer, log, name: str, where: str = WHERE):
    """A transformer given ready-made must read the evaluation's log, or its features describe other events."""
    own = getattr(transformer, "log", log)
    if own is not log:
        raise EvaluationError(f"{where}: the {name} transformer reads a different EventLog than the 'log' argument "
                              f"({own!r} vs {log!r}). Build it with log=<the same log>.")
    return transformer


def rules_transformer(rules, log, unit):
    """The rule-features transformer (a RuleFeatures or a transformer with a ``rules`` attribute) and its rules."""
    if hasattr(rules, "fit") and hasattr(rules, "transform"):
        return same_log(rules, log, "rules"), as_ruleset(rules.rules)
    ruleset = as_ruleset(rules)
    return RuleFeatures(rules=ruleset, log=log, unit=unit), ruleset


def mined_transformer(mined, log, unit, seed: int, where: str = WHERE):
    """``mined``: None (default LogFeatures), a dict of LogFeatures parameters, or any transformer."""
    if mined is None:
        return LogFeatures(log=log, unit=unit, random_state=seed)
    if isinstance(mined, dict):
        allowed = [k for k in LogFeatures(log=log).get_params() if k not in ("log", "unit")]
        for key in mined:
            if key not in allowed:
                raise EvaluationError(f"The 'mined' parameter of {where} has an unknown LogFeatures parameter "
                                      f"{key!r}.{did_you_mean(str(key), allowed)} Allowed: {allowed!r}.")
        return LogFeatures(log=log, unit=unit, **{"random_state": seed, **mined})
    if hasattr(mined, "fit") and hasattr(mined, "transform") and hasattr(mined, "get_params"):
        return same_log(mined, log, "mined", where)
    raise EvaluationError(f"The 'mined' parameter of {where} must be None, a dict of LogFeatures parameters, or a "
                          f"scikit-learn transformer (e.g. LogFeatures(...)). Got {type(mined).__name__}.")
