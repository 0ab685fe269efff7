"""Does the rule set add value over the mined features? ``incremental_value``, ``make_detector`` and the report."""

from .engine import incremental_value, incremental_value_precomputed, make_detector

__all__ = ["incremental_value", "incremental_value_precomputed", "make_detector"]
