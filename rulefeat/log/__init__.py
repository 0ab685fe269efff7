"""Events in, EventLog out: column parsing (``parse``), accounting and derived fields (``derive``), the handle (``eventlog``)."""

from .eventlog import EventLog, LogIssue, read_events

__all__ = ["EventLog", "LogIssue", "read_events"]
