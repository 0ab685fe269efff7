"""Small event tables and a quiet EventLog build, shared by the log tests."""

from __future__ import annotations

import warnings

import pandas as pd

from rulefeat import EventLog, LogRepairWarning


def frame(**cols):
    base = {"student": ["a", "a", "b"], "time": [0.0, 5.0, 1.0], "action": ["attempt", "hint", "attempt"]}
    base.update(cols)
    return pd.DataFrame(base)


def build(data, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogRepairWarning)
        return EventLog(data, **kw)
