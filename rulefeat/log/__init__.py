"""Events in, EventLog out: column parsing (``parse``), accounting and derived fields (``derive``), the handle (``eventlog``), xAPI statements (``xapi``)."""

from .eventlog import EventLog, LogIssue, read_events
from .xapi import read_xapi

__all__ = ["EventLog", "LogIssue", "read_events", "read_xapi"]
