"""Files in and out of the commands: tables by suffix, the event log, ``--columns``; unreadable means exit 2."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pandas as pd

from ..limits import nesting_depth
from ..report.safe import csv_frame
from .base import UsageError

__all__ = ["TABLE_SUFFIXES", "XAPI_SUFFIXES", "demo_rules_file", "read_table", "write_table", "parse_columns", "read_log",
           "existing_file", "file_record"]

TABLE_SUFFIXES = {".csv": "csv", ".txt": "csv", ".tsv": "tsv", ".parquet": "parquet", ".pq": "parquet"}
XAPI_SUFFIXES = (".json", ".jsonl", ".ndjson")


def demo_rules_file():
    """The packaged demo rules for the simulator (``rulefeat/data/demo_rules.toml``), as a readable path."""
    from importlib import resources

    return resources.files("rulefeat") / "data" / "demo_rules.toml"


def existing_file(path: str, option: str) -> Path:
    """``path`` as a Path after checking it is a readable file (a usage error otherwise)."""
    file = Path(path)
    if not file.exists():
        raise UsageError(f"{option}: no such file: {path!r}")
    if not file.is_file():
        raise UsageError(f"{option}: {path!r} is a folder, not a file")
    return file


def _format(path: Path, option: str) -> str:
    fmt = TABLE_SUFFIXES.get(path.suffix.lower())
    if fmt is None:
        raise UsageError(f"{option}: cannot tell the format of {str(path)!r} from its suffix; use "
                         f"{', '.join(TABLE_SUFFIXES)}")
    return fmt


def read_table(path: str, option: str) -> pd.DataFrame:
    """A CSV / TSV / Parquet file as a DataFrame; a file that cannot be read is a usage error."""
    file = existing_file(path, option)
    fmt = _format(file, option)
    try:
        if fmt == "parquet":
            return pd.read_parquet(file)
        return pd.read_csv(file, sep="\t" if fmt == "tsv" else ",")
    except Exception as exc:  # pandas and pyarrow raise many classes for a damaged file
        raise UsageError(f"{option}: cannot read {str(file)!r} as {fmt.upper()}: "
                         f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}") from None


def write_table(frame: pd.DataFrame, path: str, option: str = "--out", *, index: bool = False) -> Path:
    """Write a table as CSV or Parquet by the suffix of ``path`` (folders are created)."""
    file = Path(path)
    fmt = _format(file, option)
    try:
        file.parent.mkdir(parents=True, exist_ok=True)
        if fmt == "parquet":
            frame.to_parquet(file, index=index)
        else:  # text cells a spreadsheet would run as formulas are neutralised (report/safe.py)
            csv_frame(frame).to_csv(file, sep="\t" if fmt == "tsv" else ",", index=index)
    except OSError as exc:
        raise UsageError(f"{option}: cannot write {str(file)!r}: {exc.strerror or exc}") from None
    return file


def file_record(path) -> dict:
    """What a report keeps of an input file: its name (no folders), SHA-256 of its bytes and its size."""
    file = Path(path)
    digest = hashlib.sha256()
    try:
        with file.open("rb") as handle:
            for block in iter(lambda: handle.read(1 << 20), b""):
                digest.update(block)
    except OSError as exc:
        raise UsageError(f"cannot read {str(file)!r} to record it: {exc.strerror or exc}") from None
    return {"name": file.name, "sha256": digest.hexdigest(), "bytes": file.stat().st_size}


def _is_file(text: str) -> bool:
    try:
        return Path(text).is_file()
    except (OSError, ValueError):  # a name too long for the file system, or a NUL in it: not a file
        return False


def parse_columns(text: str | None) -> dict | None:
    """``--columns``: a JSON object ``{field: column}``, given inline or as the path of a ``.json`` file."""
    if text is None:
        return None
    source = text
    if not text.lstrip().startswith("{") and _is_file(text):
        source = Path(text).read_text(encoding="utf-8")
    if nesting_depth(source, "json") > 2:
        raise UsageError("--columns: expected a flat JSON object of field names to column names, e.g. "
                         """'{"student": "learner_id", "time": "timestamp"}'""")
    try:
        value = json.loads(source)
    except json.JSONDecodeError as exc:
        raise UsageError(f"--columns: not valid JSON ({exc.msg} at line {exc.lineno} column {exc.colno}); "
                         """write a JSON object such as '{"student": "learner_id", "time": "timestamp"}'"""
                         ) from None
    if not isinstance(value, dict) or not all(isinstance(k, str) and isinstance(v, str) for k, v in value.items()):
        raise UsageError(f"--columns: expected a JSON object of field names to column names, got {source!r}")
    return value


def read_log(path: str, *, columns: str | None = None, xapi_mapping: str | None = None, option: str = "--events"):
    """The EventLog of an events file: CSV / TSV / Parquet, or xAPI statements (``.json`` / ``.jsonl``)."""
    import rulefeat

    file = existing_file(path, option)
    if file.suffix.lower() in XAPI_SUFFIXES:
        if columns is not None:
            raise UsageError("--columns applies to event tables; xAPI statements are mapped by --xapi-mapping")
        mapping = None if xapi_mapping is None else existing_file(xapi_mapping, "--xapi-mapping")
        return rulefeat.read_xapi(file, mapping=mapping)
    if xapi_mapping is not None:
        raise UsageError(f"--xapi-mapping applies to xAPI statement files ({', '.join(XAPI_SUFFIXES)}), "
                         f"not to {str(file)!r}")
    mapping = parse_columns(columns)
    return rulefeat.EventLog(read_table(path, option), columns=mapping)


def add_log_options(parser, *, required: bool = True) -> None:
    """``--events``, ``--columns`` and ``--xapi-mapping``, shared by every command that reads a log."""
    parser.add_argument("--events", required=required, metavar="FILE",
                        help="events: CSV, TSV or Parquet table, or xAPI statements (.json array or .jsonl)")
    parser.add_argument("--columns", metavar="JSON",
                        help="JSON object {field: column} naming the event table's columns, inline or a "
                             ".json file, e.g. '{\"student\": \"learner_id\", \"time\": \"timestamp\"}'")
    parser.add_argument("--xapi-mapping", metavar="TOML",
                        help="mapping file for xAPI statements (docs/xapi.md); default: the built-in mapping")
