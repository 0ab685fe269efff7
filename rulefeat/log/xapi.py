"""xAPI statements (IEEE 9274.1.1, the Experience API) to an :class:`~rulefeat.EventLog`.

Learning-record stores export statements -- actor, verb, object, result, context, timestamp -- as a JSON
array, as JSON lines, or as a statement result ``{"statements": [...], "more": ...}``.  A small mapping file
of our own (TOML; the default is ``rulefeat/data/xapi_mapping.toml``, the format in ``docs/xapi.md``) says
how a statement becomes an event:

==========================================  ===========================================================
statement                                   event field
==========================================  ===========================================================
actor (account name, mbox, mbox_sha1sum)    ``student`` (mail addresses only as SHA-1 hashes)
verb.id                                     ``action`` through ``[actions]``; the IRI itself as ``verb``
object.id (+ contextActivities parent ...)  ``step``, ``problem``, ``skill`` (by source or by a pattern)
result.success                              ``correct``
result.duration (ISO 8601 duration)         ``duration`` in seconds
timestamp (``stored`` when absent)          ``time``
context.registration                        ``session`` (optional)
context / result extensions                 extra fields named in the mapping
id                                          ``statement_id`` (to join events back to statements)
==========================================  ===========================================================

Nothing is lost silently: every statement is either an event, *voided* (a statement with the voiding verb
``http://adlnet.gov/expapi/verbs/voided`` and a ``StatementRef`` object removes its target, and is itself
counted as a voiding statement), or *unmapped* and listed with its id, position and reason.
``n_statements == n_events + len(unmapped) + n_voiding + len(voided)``.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from .._text import did_you_mean
from ..errors import LogRepairWarning, LogSchemaError
from ..limits import check_depth
from .eventlog import EventLog

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib

__all__ = ["read_xapi", "xapi_events", "XapiMapping", "XapiEvents", "parse_duration", "VOIDED_VERB"]

VOIDED_VERB = "http://adlnet.gov/expapi/verbs/voided"
IDENTIFIERS = ("account", "mbox_sha1sum", "mbox", "openid")
SOURCES = ("id", "parent", "grouping", "category", "")
KEYS = ("problem", "step", "skill")
_TABLES = {"student": ("identify", "account_home"), "actions": None, "verbs": ("unlisted",),
           "object": ("pattern", *KEYS), "session": ("from",), "context_extensions": None,
           "result_extensions": None}
_RESERVED = ("statement_id", "student", "time", "action", "verb", "correct", "duration", *KEYS, "session")
_DURATION = re.compile(
    r"P(?:(?P<years>\d+(?:[.,]\d+)?)Y)?(?:(?P<months>\d+(?:[.,]\d+)?)M)?(?:(?P<weeks>\d+(?:[.,]\d+)?)W)?"
    r"(?:(?P<days>\d+(?:[.,]\d+)?)D)?"
    r"(?:T(?:(?P<hours>\d+(?:[.,]\d+)?)H)?(?:(?P<minutes>\d+(?:[.,]\d+)?)M)?(?:(?P<seconds>\d+(?:[.,]\d+)?)S)?)?")
_SECONDS = {"weeks": 604800.0, "days": 86400.0, "hours": 3600.0, "minutes": 60.0, "seconds": 1.0}


def parse_duration(text: str) -> float:
    """Seconds of an ISO 8601 duration ``PnYnMnWnDTnHnMnS`` as xAPI ``result.duration`` uses it.

    Weeks, days, hours, minutes and seconds have fixed lengths; years and months do not, so a non-zero
    year or month part is refused (write the time in days, hours, minutes and seconds instead).

    >>> parse_duration("PT1M30.5S"), parse_duration("P1DT2H"), parse_duration("PT0S")
    (90.5, 93600.0, 0.0)
    >>> parse_duration("1:30")
    Traceback (most recent call last):
    ...
    rulefeat.errors.LogSchemaError: '1:30' is not an ISO 8601 duration such as 'PT4.5S' or 'PT1M30S' (P, then nY nM nW nD, then T and nH nM nS).
    """
    match = _DURATION.fullmatch(text.strip()) if isinstance(text, str) else None
    parts = {k: float(v.replace(",", ".")) for k, v in (match.groupdict() if match else {}).items() if v}
    if match is None or not parts or text.strip().endswith("T"):
        raise LogSchemaError(f"{text!r} is not an ISO 8601 duration such as 'PT4.5S' or 'PT1M30S' (P, then "
                             "nY nM nW nD, then T and nH nM nS).")
    if parts.get("years") or parts.get("months"):
        raise LogSchemaError(f"{text!r}: years and months have no fixed length in seconds; write the duration "
                             "in days, hours, minutes and seconds (e.g. 'P30DT0H').")
    return sum(value * _SECONDS[unit] for unit, value in parts.items() if unit in _SECONDS)


@dataclass(frozen=True)
class XapiMapping:
    """How statements become events (the mapping file's content; see ``docs/xapi.md``).

    Build it with :meth:`from_toml` (a path or TOML text, merged over the defaults) or :meth:`default`.
    """

    identify: tuple = IDENTIFIERS
    account_home: bool = False
    actions: Mapping = field(default_factory=dict)
    unlisted: str = "list"
    pattern: str = ""
    sources: Mapping = field(default_factory=lambda: {"step": "id", "problem": "parent", "skill": ""})
    session: str = ""
    context_extensions: Mapping = field(default_factory=dict)
    result_extensions: Mapping = field(default_factory=dict)

    @classmethod
    def default(cls) -> XapiMapping:
        """The packaged default mapping (``rulefeat/data/xapi_mapping.toml``)."""
        from importlib import resources

        text = resources.files("rulefeat").joinpath("data", "xapi_mapping.toml").read_text(encoding="utf-8")
        return cls.from_toml(text, defaults=False)

    @classmethod
    def from_toml(cls, source, *, defaults: bool = True) -> XapiMapping:
        """A mapping from a TOML file or text; tables it leaves out keep the default mapping's values."""
        text = _mapping_text(source)
        check_depth(text, "toml", "XapiMapping.from_toml", LogSchemaError)
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise LogSchemaError(f"XapiMapping.from_toml: the mapping is not valid TOML: {exc}.") from None
        _check_tables(data)
        base = cls.default() if defaults else cls(actions={})
        return _merged(base, data)


def _mapping_text(source) -> str:
    if isinstance(source, str) and "\n" not in source and source.strip().endswith(".toml"):
        source = Path(source)
    if isinstance(source, os.PathLike):
        try:
            return Path(source).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise LogSchemaError(f"XapiMapping.from_toml: cannot read the mapping file {str(source)!r}: "
                                 f"{exc}.") from None
    if isinstance(source, str):
        return source
    raise LogSchemaError(f"XapiMapping.from_toml: expected a path or TOML text, got {type(source).__name__}.")


def _check_tables(data: dict) -> None:
    for table, value in data.items():
        if table not in _TABLES:
            raise LogSchemaError(f"XapiMapping: unknown table [{table}].{did_you_mean(table, _TABLES)} "
                                 f"Tables: {list(_TABLES)!r}.")
        if not isinstance(value, dict):
            raise LogSchemaError(f"XapiMapping: [{table}] must be a table, got {type(value).__name__}.")
        keys = _TABLES[table]
        for key, item in value.items():
            if keys is not None and key not in keys:
                raise LogSchemaError(f"XapiMapping: [{table}] has no key {key!r}.{did_you_mean(key, keys)} "
                                     f"Keys: {list(keys)!r}.")
            if keys is None and not (isinstance(item, str) and item):
                raise LogSchemaError(f"XapiMapping: [{table}] maps {key!r} to {item!r}; give a non-empty "
                                     "name in quotes.")


def _merged(base: XapiMapping, data: dict) -> XapiMapping:
    student, verbs, obj = data.get("student", {}), data.get("verbs", {}), data.get("object", {})
    identify = tuple(student.get("identify", base.identify))
    bad = [i for i in identify if i not in IDENTIFIERS]
    if bad or not identify:
        raise LogSchemaError(f"XapiMapping: [student] identify must list some of {list(IDENTIFIERS)!r}; got "
                             f"{list(identify)!r}.{did_you_mean(str(bad[0]), IDENTIFIERS) if bad else ''}")
    unlisted = verbs.get("unlisted", base.unlisted)
    _choice("[verbs] unlisted", unlisted, ("list", "keep"))
    sources = {k: obj.get(k, base.sources[k]) for k in KEYS}
    for key, value in sources.items():
        _choice(f"[object] {key}", value, SOURCES)
    pattern = obj.get("pattern", base.pattern)
    _check_pattern(pattern)
    session = data.get("session", {}).get("from", base.session)
    _choice("[session] from", session, ("registration", ""))
    names = [*data.get("context_extensions", {}).values(), *data.get("result_extensions", {}).values()]
    taken = [n for n in names if n in _RESERVED]
    if taken:
        raise LogSchemaError(f"XapiMapping: extension field name {taken[0]!r} is already a field of the events "
                             f"({list(_RESERVED)!r}); choose another name.")
    return XapiMapping(identify=identify, account_home=bool(student.get("account_home", base.account_home)),
                       actions={**base.actions, **data.get("actions", {})}, unlisted=unlisted, pattern=pattern,
                       sources=sources, session=session,
                       context_extensions={**base.context_extensions, **data.get("context_extensions", {})},
                       result_extensions={**base.result_extensions, **data.get("result_extensions", {})})


def _choice(what: str, value, options) -> None:
    if value not in options:
        raise LogSchemaError(f"XapiMapping: {what} must be one of {list(options)!r}; got {value!r}."
                             f"{did_you_mean(str(value), [o for o in options if o])}")


def _check_pattern(pattern) -> None:
    if not isinstance(pattern, str):
        raise LogSchemaError(f"XapiMapping: [object] pattern must be a string, got {type(pattern).__name__}.")
    if not pattern:
        return
    try:
        groups = re.compile(pattern).groupindex
    except re.error as exc:
        raise LogSchemaError(f"XapiMapping: [object] pattern {pattern!r} is not a valid regular expression: "
                             f"{exc}.") from None
    bad = [g for g in groups if g not in KEYS]
    if bad or not groups:
        raise LogSchemaError(f"XapiMapping: [object] pattern needs named groups among {list(KEYS)!r}, e.g. "
                             f"(?P<step>[^/]+); got {list(groups)!r}.")


# -- reading statements ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class XapiEvents:
    """Statements turned into an event table, with every statement that did not become an event.

    Attributes
    ----------
    events : DataFrame
        One row per mapped statement, in input order (``statement_id, student, time, action, verb, correct,
        duration, problem, step, skill, session`` where taken, then the extension fields).
    unmapped : DataFrame
        ``position, id, reason`` of each statement that could not be mapped (position: 0-based in the input).
    voided : DataFrame
        ``position, id, voided_by`` of each statement removed by a voiding statement.
    n_statements, n_voiding : int
        Statements read, and voiding statements among them.
    """

    events: pd.DataFrame
    unmapped: pd.DataFrame
    voided: pd.DataFrame
    n_statements: int
    n_voiding: int

    def counts(self) -> dict:
        """``statements == events + unmapped + voiding + voided``."""
        return {"statements": self.n_statements, "events": len(self.events), "unmapped": len(self.unmapped),
                "voiding": self.n_voiding, "voided": len(self.voided)}


class _Unmapped(Exception):
    """One statement cannot become an event; the message is the reason listed for it."""


def xapi_events(source, mapping=None) -> XapiEvents:
    """Read statements (a path to a JSON / JSON-lines file, JSON text, or a list of dicts) into an event table.

    ``mapping`` is None (the default mapping), an :class:`XapiMapping`, or a mapping file path / TOML text.
    """
    spec = _as_mapping(mapping)
    statements = _statements(source)
    targets = _voiding_targets(statements)
    rows, positions, unmapped, voided = [], [], [], []
    n_voiding = 0
    for pos, st in enumerate(statements):
        sid = st.get("id") if isinstance(st, dict) else None
        if pos in targets.voiding:
            n_voiding += 1
        elif sid is not None and sid in targets.voided and not _is_voiding(st):
            voided.append({"position": pos, "id": sid, "voided_by": targets.voided[sid]})
        elif pos in targets.problems:
            unmapped.append({"position": pos, "id": sid, "reason": targets.problems[pos]})
        else:
            try:
                rows.append(_event(st, spec))
                positions.append(pos)
            except _Unmapped as why:
                unmapped.append({"position": pos, "id": sid, "reason": str(why)})
    events, bad_times = _events_frame(rows, positions, spec)
    unmapped = sorted(unmapped + bad_times, key=lambda u: u["position"])
    return XapiEvents(events, pd.DataFrame(unmapped, columns=["position", "id", "reason"]),
                      pd.DataFrame(voided, columns=["position", "id", "voided_by"]), len(statements), n_voiding)


def read_xapi(source, mapping=None, *, unmapped: str = "warn", **log_options):
    """xAPI statements as an :class:`~rulefeat.EventLog` (see the module docstring for the mapping).

    Parameters
    ----------
    source : path, str or sequence of dict
        A ``.json`` file holding an array of statements (or a statement result ``{"statements": [...]}``),
        a ``.jsonl`` file with one statement per line, JSON text, or the statements themselves.
    mapping : XapiMapping, path or TOML text, optional
        How statements become events; default ``rulefeat/data/xapi_mapping.toml``.
    unmapped : {"warn", "error", "ignore"}, default "warn"
        What to do when statements cannot be mapped: warn (``LogRepairWarning``) listing their ids, raise
        ``LogSchemaError`` listing them, or say nothing (use :func:`xapi_events` to see them).
    **log_options
        Passed on to :class:`~rulefeat.EventLog` (e.g. ``session_gap``).

    Examples
    --------
    >>> st = {"id": "6690e6c9-3ef0-4ed3-8b37-7f3964730bee",
    ...       "actor": {"account": {"homePage": "https://example.org", "name": "s01"}},
    ...       "verb": {"id": "http://adlnet.gov/expapi/verbs/answered"},
    ...       "object": {"id": "https://example.org/activities/p1/step-1"},
    ...       "result": {"success": True, "duration": "PT12.5S"}, "timestamp": "2031-03-01T09:00:00Z"}
    >>> log = read_xapi([st])
    >>> len(log), log.decoded("student").tolist(), log.values("duration").tolist()
    (1, ['s01'], [12.5])
    """
    if unmapped not in ("warn", "error", "ignore"):
        raise LogSchemaError("The 'unmapped' parameter of read_xapi must be one of ['warn', 'error', "
                             f"'ignore']. Got {unmapped!r} instead.")
    table = xapi_events(source, mapping)
    if len(table.unmapped) and unmapped != "ignore":
        message = _unmapped_message(table)
        if unmapped == "error":
            raise LogSchemaError(message)
        warnings.warn(message, LogRepairWarning, stacklevel=2)
    if not len(table.events):
        raise LogSchemaError(f"read_xapi: none of the {table.n_statements} statements became an event "
                             f"({table.counts()}); check the mapping ({_unmapped_message(table)}).")
    return EventLog(table.events, **log_options)


def _unmapped_message(table: XapiEvents) -> str:
    first = table.unmapped.head(5)
    shown = "; ".join(f"#{r.position} {r.id!r}: {r.reason}" for r in first.itertuples())
    more = f" (and {len(table.unmapped) - 5} more)" if len(table.unmapped) > 5 else ""
    c = table.counts()
    return (f"read_xapi: {c['unmapped']} of {c['statements']} statements could not be mapped to events and are "
            f"left out: {shown}{more}. Counts: {c['events']} events + {c['unmapped']} unmapped + "
            f"{c['voiding']} voiding + {c['voided']} voided = {c['statements']} statements. Use "
            "rulefeat.log.xapi.xapi_events to list them all, or extend the mapping (docs/xapi.md).")


def _as_mapping(mapping) -> XapiMapping:
    if mapping is None:
        return XapiMapping.default()
    if isinstance(mapping, XapiMapping):
        return mapping
    return XapiMapping.from_toml(mapping)


def _statements(source) -> list:
    if isinstance(source, (bytes, bytearray)):
        return _parse_text(bytes(source).decode("utf-8", errors="replace"), "the bytes")
    if isinstance(source, (str, os.PathLike)) and not (isinstance(source, str) and source.lstrip()[:1] in "[{"):
        path = Path(source)
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise LogSchemaError(f"read_xapi: cannot read {str(path)!r}: {exc}.") from None
        return _parse_text(text, str(path))
    if isinstance(source, str):
        return _parse_text(source, "the text")
    if isinstance(source, Mapping):
        return _unwrap(source, "the statements")
    if isinstance(source, Sequence):
        return list(source)
    raise LogSchemaError(f"read_xapi: expected a path, JSON text or a list of statements, got "
                         f"{type(source).__name__}.")


def _parse_text(text: str, where: str) -> list:
    stripped = text.lstrip()
    if not stripped:
        raise LogSchemaError(f"read_xapi: {where} is empty; there are no statements to read.")
    check_depth(text, "json", f"read_xapi: {where}", LogSchemaError)
    try:
        return _unwrap(json.loads(text), where)
    except json.JSONDecodeError as whole:
        if stripped.startswith("["):
            raise LogSchemaError(f"read_xapi: {where} is not valid JSON ({whole}).") from None
    out = []
    for number, line in enumerate(text.splitlines(), start=1):  # JSON lines: one statement per line
        if line.strip():
            try:
                out.append(json.loads(line))
            except json.JSONDecodeError as exc:
                raise LogSchemaError(f"read_xapi: line {number} of {where} is not valid JSON ({exc.msg} at "
                                     f"column {exc.colno}); give a JSON array or one statement per line."
                                     ) from None
    return out


def _unwrap(value, where: str) -> list:
    if isinstance(value, list):
        return value
    if isinstance(value, dict) and isinstance(value.get("statements"), list):
        return value["statements"]  # a statement result from a record store
    if isinstance(value, dict):
        return [value]
    raise LogSchemaError(f"read_xapi: {where} holds a JSON {type(value).__name__}, not statements.")


def _is_voiding(st) -> bool:
    return isinstance(st, dict) and isinstance(st.get("verb"), dict) and st["verb"].get("id") == VOIDED_VERB


@dataclass
class _Targets:
    voiding: set = field(default_factory=set)      # positions of valid voiding statements
    voided: dict = field(default_factory=dict)     # target id -> id of the voiding statement
    problems: dict = field(default_factory=dict)   # position -> reason the statement is unmapped


def _voiding_targets(statements: list) -> _Targets:
    """Which statements void which, and which voiding statements are malformed (xAPI 1.0.3 Data 2.3.2)."""
    out = _Targets()
    seen: dict = {}
    voiding_ids = {st.get("id") for st in statements if _is_voiding(st)}
    for pos, st in enumerate(statements):
        sid = st.get("id") if isinstance(st, dict) else None
        if sid is not None and sid in seen:
            out.problems[pos] = f"duplicate statement id (first at position {seen[sid]})"
            continue
        if sid is not None:
            seen[sid] = pos
        if not _is_voiding(st):
            continue
        obj = st.get("object") if isinstance(st.get("object"), dict) else {}
        if obj.get("objectType") != "StatementRef" or not obj.get("id"):
            out.problems[pos] = "voiding statement whose object is not a StatementRef with an id"
        elif obj["id"] in voiding_ids:
            out.problems[pos] = "voids a voiding statement, which xAPI does not allow"
        else:
            out.voiding.add(pos)
            out.voided.setdefault(obj["id"], sid)
    return out


def _event(st, spec: XapiMapping) -> dict:
    if not isinstance(st, dict):
        raise _Unmapped(f"not a statement object but a JSON {type(st).__name__}")
    verb = _verb(st, spec)
    row = {"statement_id": st.get("id"), "student": _student(st.get("actor"), spec), "time": _time(st),
           "action": verb[0], "verb": verb[1]}
    result = st.get("result") if isinstance(st.get("result"), dict) else {}
    success = result.get("success")
    if success is not None and not isinstance(success, bool):
        raise _Unmapped(f"result.success is {success!r}, not true or false")
    row["correct"] = success
    row["duration"] = _duration(result.get("duration"))
    row.update(_object_keys(st, spec))
    context = st.get("context") if isinstance(st.get("context"), dict) else {}
    if spec.session:
        row["session"] = context.get("registration")
    row.update(_extensions(context.get("extensions"), spec.context_extensions))
    row.update(_extensions(result.get("extensions"), spec.result_extensions))
    return row


def _student(actor, spec: XapiMapping) -> str:
    if not isinstance(actor, dict):
        raise _Unmapped("no actor")
    if actor.get("objectType") == "Group" and not any(actor.get(k) for k in IDENTIFIERS):
        raise _Unmapped("the actor is an anonymous group, not one student")
    for how in spec.identify:
        value = actor.get(how)
        if not value:
            continue
        if how == "account" and isinstance(value, dict) and value.get("name"):
            return f"{value.get('homePage', '')}|{value['name']}" if spec.account_home else str(value["name"])
        if how == "mbox_sha1sum":
            return str(value).lower()
        if how == "mbox":
            return hashlib.sha1(str(value).encode("utf-8")).hexdigest()
        if how == "openid":
            return "openid:" + hashlib.sha1(str(value).encode("utf-8")).hexdigest()
    raise _Unmapped(f"the actor has none of the identifiers {list(spec.identify)!r}")


def _verb(st: dict, spec: XapiMapping) -> tuple[str, str]:
    verb = st.get("verb")
    iri = verb.get("id") if isinstance(verb, dict) else None
    if not iri:
        raise _Unmapped("no verb id")
    if iri in spec.actions:
        return spec.actions[iri], iri
    if spec.unlisted == "keep":
        return iri.rstrip("/").rsplit("/", 1)[-1], iri
    raise _Unmapped(f"verb {iri!r} is not in the mapping's [actions]")


def _time(st: dict) -> str:
    stamp = st.get("timestamp") or st.get("stored")  # the store sets timestamp to stored when absent
    if not isinstance(stamp, str) or not stamp:
        raise _Unmapped("no timestamp (and no stored time)")
    return stamp  # parsed for all statements at once in _events_frame


def _duration(value) -> float | None:
    if value is None:
        return None
    try:
        return parse_duration(value)
    except LogSchemaError as exc:
        raise _Unmapped(f"result.duration: {exc}") from None


def _object_keys(st: dict, spec: XapiMapping) -> dict:
    obj = st.get("object")
    if not isinstance(obj, dict) or obj.get("objectType", "Activity") != "Activity" or not obj.get("id"):
        kind = obj.get("objectType") if isinstance(obj, dict) else type(obj).__name__
        raise _Unmapped(f"the object is not an activity with an id (objectType {kind!r})")
    if spec.pattern:
        found = re.fullmatch(spec.pattern, obj["id"])
        if found is None:
            raise _Unmapped(f"object id {obj['id']!r} does not match the mapping's [object] pattern")
        return {k: v for k, v in found.groupdict().items()}
    context = st.get("context") if isinstance(st.get("context"), dict) else {}
    activities = context.get("contextActivities") if isinstance(context.get("contextActivities"), dict) else {}
    out = {}
    for key, source in spec.sources.items():
        if source == "id":
            out[key] = obj["id"]
        elif source:
            out[key] = _first_id(activities.get(source))
    return out


def _first_id(value):
    items = value if isinstance(value, list) else [value]  # xAPI 0.95 allowed a single object here
    for item in items:
        if isinstance(item, dict) and item.get("id"):
            return item["id"]
    return None


def _extensions(values, names: Mapping) -> dict:
    values = values if isinstance(values, dict) else {}
    return {name: _scalar(values.get(iri)) for iri, name in names.items()}


def _scalar(value):
    if isinstance(value, (dict, list)):  # keep structured values readable as one category label
        return json.dumps(value, sort_keys=True)
    return value


def _events_frame(rows: list, positions: list, spec: XapiMapping) -> tuple[pd.DataFrame, list]:
    """The event table, and the statements whose timestamp is not an ISO 8601 time (parsed in one pass)."""
    keys = list(re.compile(spec.pattern).groupindex) if spec.pattern else [k for k in KEYS if spec.sources[k]]
    columns = ["statement_id", "student", "time", "action", "verb", "correct", "duration", *keys,
               *(["session"] if spec.session else []), *spec.context_extensions.values(),
               *spec.result_extensions.values()]
    frame = pd.DataFrame(rows, columns=list(dict.fromkeys(columns)))
    time = pd.to_datetime(frame["time"].astype("string"), utc=True, errors="coerce", format="ISO8601")
    bad = time.isna().to_numpy()
    bad_times = [{"position": positions[i], "id": rows[i]["statement_id"],
                  "reason": f"timestamp {rows[i]['time']!r} is not an ISO 8601 time"} for i in bad.nonzero()[0]]
    frame = frame.assign(time=time)[~bad].reset_index(drop=True)
    frame["correct"] = frame["correct"].astype("boolean")
    frame["duration"] = frame["duration"].astype("float64")
    if frame["duration"].isna().all():  # no statement gave one: let the log derive durations
        frame = frame.drop(columns="duration")
    return frame, bad_times
