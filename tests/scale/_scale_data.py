"""Small simulated Zorbleth logs for the cluster tests (numeric seconds, so every path compares bit for bit)."""

from __future__ import annotations

import functools

import pandas as pd

from rulefeat.simulate import tutor_logs


@functools.cache
def simulated(n_students: int = 36, seed: int = 5):
    """(events, windows) with times as float seconds since 1970."""
    data = tutor_logs(n_students, seed=seed)
    events = data.events.copy()
    events["time"] = events["time"].astype("int64") / 1e9
    windows = data.windows.copy()
    for col in ("start", "end"):
        windows[col] = windows[col].astype("int64") / 1e9
    return events, windows.reset_index(drop=True)


def training_windows(windows: pd.DataFrame, share: float = 0.7) -> pd.DataFrame:
    students = sorted(windows["student"].unique())
    keep = set(students[: int(len(students) * share)])
    return windows.loc[windows["student"].isin(keep), ["student", "start", "end"]]
