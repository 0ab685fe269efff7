"""The saved detector format: one zip file holding ``manifest.json`` and ``detector.joblib``.

``detector.joblib`` is the fitted detector pickled by joblib: fitted state only, no
events and no student ids (contract 8, DEVELOPERS.md).  ``manifest.json`` says what it
is without unpickling anything: library and dependency versions, the rules' text
and hash, the log schema the detector reads, its unit and feature names, the
evaluation it came from, and the sha256 of ``detector.joblib``, which
:func:`load_detector` checks before unpickling.  The fields are listed in
docs/ship.md.

Unpickling runs code.  Load only files you trust: the content hash catches a
damaged or altered payload, but whoever can rewrite the file can rewrite the
manifest too — pass the hash you recorded at saving time (``sha256=``) to pin it.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import io
import json
import math
import os
import platform
import tempfile
import warnings
import zipfile
from importlib import metadata
from pathlib import Path

import joblib

from .._base import UnitTransformer
from .._version import __version__
from ..errors import DetectorFileError, LogSchemaError, ParameterError, RulefeatWarning
from ..limits import check_depth
from ..log.eventlog import EventLog
from .bind import bind, unit_transformers

__all__ = ["save_detector", "load_detector", "read_manifest", "SavedDetector", "FORMAT", "FORMAT_VERSION"]

FORMAT = "rulefeat-detector"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
PAYLOAD = "detector.joblib"
DEPENDENCIES = ("numpy", "pandas", "scikit-learn", "scipy", "joblib", "lightgbm", "numba")


# ----------------------------------------------------------------------------- what the manifest records
def _versions() -> dict:
    out = {"rulefeat": __version__, "python": platform.python_version()}
    for name in DEPENDENCIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def _plain(value):
    """JSON-ready: NaN and infinities become None, numpy scalars Python numbers, tuples lists."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _schema(transformers: list[UnitTransformer]) -> dict:
    fields: dict = {}
    for tf in transformers:
        fields.update(tf.log_schema_)
    first = transformers[0]
    return {"fields": dict(sorted(fields.items())), "time_kind": first.time_kind_,
            "action_labels": sorted({a for tf in transformers for a in tf.action_labels_})}


def _rules(transformers) -> list[dict]:
    out = []
    for tf in transformers:
        program = getattr(tf, "program_", None)
        if program is not None:
            rules = program.rules
            out.append({"names": list(rules.names), "sha256": rules.text_hash(), "text": rules.to_toml(),
                        "selected": list(tf.selected_)})
    return out


def _feature_names(detector) -> list | None:
    steps = getattr(detector, "steps", None)
    features = detector[:-1] if steps and len(steps) > 1 else detector
    try:
        return [str(n) for n in features.get_feature_names_out()]
    except Exception:  # a custom step without feature names: the manifest says so with null
        return None


def _model(detector) -> dict:
    final = detector.steps[-1][1] if getattr(detector, "steps", None) else detector
    classes = getattr(final, "classes_", None)
    task = "classification" if classes is not None else ("regression" if hasattr(final, "predict") else None)
    return {"class": f"{type(detector).__module__}.{type(detector).__qualname__}",
            "final_step": f"{type(final).__module__}.{type(final).__qualname__}", "task": task,
            "classes": None if classes is None else _plain(list(classes))}


def evaluation_summary(evaluation) -> dict | None:
    """The headline of an evaluation for the manifest: a report's effect sentence, summary table and rules hash."""
    if evaluation is None:
        return None
    if isinstance(evaluation, dict):
        return _plain(evaluation)
    if all(hasattr(evaluation, a) for a in ("effect", "summary", "to_dict")):
        results = evaluation.to_dict()
        return _plain({"effect": evaluation.effect(), "primary_metric": evaluation.primary_metric,
                       "rules_hash": results.get("rules_hash"),
                       "summary": evaluation.summary().to_dict(orient="records")})
    raise ParameterError(f"The 'evaluation' parameter of save_detector must be an IncrementalValueReport, a dict "
                         f"or None. Got {type(evaluation).__name__} instead.")


def _check_fitted(detector) -> list[UnitTransformer]:
    inside = unit_transformers(detector)
    if not inside:
        raise ParameterError(f"save_detector: {type(detector).__name__} holds no rulefeat transformer; save "
                             "the pipeline of rulefeat.make_detector (or one holding RuleFeatures/LogFeatures).")
    unfitted = [type(tf).__name__ for tf in inside if not hasattr(tf, "log_schema_")]
    if unfitted:
        raise ParameterError(f"save_detector: the detector is not fitted ({', '.join(unfitted)} not fitted); "
                             "call detector.fit(X, y) first.")
    return inside


def _warn_on_ids(payload: bytes, transformers) -> None:
    """A last guard: student ids of a bound log found in the payload mean some step stored them."""
    logs = {id(tf.log): tf.log for tf in transformers if isinstance(tf.log, EventLog)}
    hits = [str(s) for log in logs.values() for s in log.students
            if len(str(s)) >= 4 and any(c.isalpha() for c in str(s)) and str(s).encode() in payload]
    if hits:
        warnings.warn(f"save_detector: the saved detector contains text equal to {len(hits)} student id(s) of the "
                      f"log it was bound to (e.g. {hits[:3]!r}); a step other than rulefeat's transformers may "
                      "store per-student data. Check the pipeline before handing the file on.",
                      RulefeatWarning, stacklevel=3)


# ----------------------------------------------------------------------------- save
def save_detector(detector, path, *, evaluation=None, overwrite: bool = False) -> Path:
    """Save a fitted detector with its manifest in one zip file.

    Parameters
    ----------
    detector : estimator
        The fitted pipeline of :func:`~rulefeat.make_detector` (or any fitted estimator holding
        rulefeat transformers).  It is saved without events or student ids.
    path : str or path
        The file to write (e.g. ``"detector.zip"``).
    evaluation : IncrementalValueReport or dict, optional
        The evaluation the detector comes from; its effect sentence, summary table and rules hash go
        into the manifest (a dict is stored as given).
    overwrite : bool, default False
        Replace an existing file.

    Returns
    -------
    pathlib.Path
        The path written.  ``read_manifest(path)["payload"]["sha256"]`` is the hash to record and
        give to :func:`load_detector` later.
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise ParameterError(f"save_detector: {str(path)!r} exists; pass overwrite=True to replace it.")
    inside = _check_fitted(detector)
    buffer = io.BytesIO()
    joblib.dump(detector, buffer)  # fitted transformers drop their log when pickled
    payload = buffer.getvalue()
    _warn_on_ids(payload, inside)
    summary = evaluation_summary(evaluation)
    rules = _rules(inside)
    if summary and summary.get("rules_hash") and rules and summary["rules_hash"] not in {r["sha256"] for r in rules}:
        warnings.warn("save_detector: the evaluation was run with other rules than the detector's (rules hashes "
                      "differ); its summary does not describe this detector.", RulefeatWarning, stacklevel=2)
    manifest = {
        "format": FORMAT, "format_version": FORMAT_VERSION,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "versions": _versions(),
        "payload": {"file": PAYLOAD, "sha256": hashlib.sha256(payload).hexdigest(), "bytes": len(payload)},
        "detector": {**_model(detector), "unit": {"name": inside[0].unit_.name, "keys": list(inside[0].unit_.keys())},
                     "features": _feature_names(detector)},
        "rules": rules,
        "schema": _schema(inside),
        "evaluation": summary,
    }
    text = json.dumps(_plain(manifest), indent=2, sort_keys=True, allow_nan=False, ensure_ascii=False)
    _write_zip(path, {MANIFEST: text.encode("utf-8"), PAYLOAD: payload})
    return path


def _write_zip(path: Path, members: dict) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as handle, zipfile.ZipFile(handle, "w", zipfile.ZIP_DEFLATED) as zf:
            for name, data in members.items():
                zf.writestr(name, data)
        os.replace(tmp, path)  # readers never see a half-written file
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


# ----------------------------------------------------------------------------- load
def _open(path) -> tuple[dict, bytes | None, zipfile.ZipFile]:
    path = Path(path)
    if not path.is_file():
        raise DetectorFileError(f"load_detector: no file at {str(path)!r}.")
    try:
        zf = zipfile.ZipFile(path)
        names = set(zf.namelist())
    except zipfile.BadZipFile as exc:
        raise DetectorFileError(f"load_detector: {str(path)!r} is not a rulefeat detector file (not a zip "
                                "archive); save detectors with rulefeat.save_detector.") from exc
    if MANIFEST not in names:
        raise DetectorFileError(f"load_detector: {str(path)!r} has no {MANIFEST}; it is not a rulefeat detector file.")
    try:
        text = zf.read(MANIFEST).decode("utf-8")
        check_depth(text, "json", f"load_detector: the {MANIFEST} of {str(path)!r}", DetectorFileError)
        manifest = json.loads(text)
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise DetectorFileError(f"load_detector: the {MANIFEST} of {str(path)!r} is not valid JSON ({exc}).") from exc
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise DetectorFileError(f"load_detector: {str(path)!r} is not a rulefeat detector file "
                                f"(format {manifest.get('format') if isinstance(manifest, dict) else None!r}).")
    return manifest, names, zf


def read_manifest(path) -> dict:
    """The manifest of a saved detector, read without unpickling anything (safe on any file)."""
    manifest, _, zf = _open(path)
    zf.close()
    return manifest


def _version_notes(saved: dict) -> list[str]:
    here = _versions()
    return [f"{name} {saved.get(name)} (saved) vs {here.get(name)} (here)"
            for name in ("rulefeat", *DEPENDENCIES) if saved.get(name) != here.get(name)]


def load_detector(path, *, sha256: str | None = None) -> SavedDetector:
    """Load a detector saved by :func:`save_detector`, after checking its content hash.

    Loading unpickles ``detector.joblib``, which can run code: load only files you trust.

    Parameters
    ----------
    path : str or path
        The saved file.
    sha256 : str, optional
        The payload hash you recorded when the detector was saved (``read_manifest(path)["payload"]
        ["sha256"]``).  Without it the hash in the file's own manifest is checked, which catches a
        damaged or altered payload but not someone who rewrote the manifest as well.

    Returns
    -------
    SavedDetector
        The unbound detector and its manifest; ``.bind(log)`` checks the log's schema against it.

    Raises
    ------
    DetectorFileError
        Not a detector file, a newer format version, or a content hash that differs.
    """
    manifest, names, zf = _open(path)
    with zf:
        if int(manifest.get("format_version", 0)) > FORMAT_VERSION:
            raise DetectorFileError(f"load_detector: {str(path)!r} has format version {manifest['format_version']}; "
                                    f"this rulefeat reads up to {FORMAT_VERSION}. Upgrade rulefeat.")
        member = manifest.get("payload", {}).get("file", PAYLOAD)
        if member not in names:
            raise DetectorFileError(f"load_detector: {str(path)!r} lacks its payload {member!r}.")
        payload = zf.read(member)
    digest = hashlib.sha256(payload).hexdigest()
    recorded = manifest.get("payload", {}).get("sha256")
    if digest != recorded:
        raise DetectorFileError(f"load_detector: the content hash of {member!r} in {str(path)!r} is {digest}, but "
                                f"its manifest records {recorded}: the file was changed or damaged after it was "
                                "saved. It was not unpickled; do not use it.")
    if sha256 is not None and sha256 != digest:
        raise DetectorFileError(f"load_detector: the content hash of {str(path)!r} is {digest}, not the expected "
                                f"{sha256}: this is not the detector you recorded. It was not unpickled.")
    notes = _version_notes(manifest.get("versions", {}))
    if notes:
        warnings.warn("load_detector: the detector was saved with other versions: " + "; ".join(notes)
                      + ". Check its scores on known units before relying on them.", RulefeatWarning, stacklevel=2)
    return SavedDetector(joblib.load(io.BytesIO(payload)), manifest)


# ----------------------------------------------------------------------------- the loaded detector
class SavedDetector:
    """A loaded detector: the fitted estimator (bound to no log) and its manifest.

    Attributes
    ----------
    detector : estimator
        The fitted pipeline, as saved; its rulefeat transformers read no log until bound.
    manifest : dict
        What ``manifest.json`` says (docs/ship.md lists the fields).
    """

    def __init__(self, detector, manifest: dict):
        self.detector = detector
        self.manifest = manifest

    @property
    def feature_names(self) -> list | None:
        return self.manifest["detector"]["features"]

    @property
    def sha256(self) -> str:
        """The content hash of the payload (record it to pin this exact detector)."""
        return self.manifest["payload"]["sha256"]

    def check_log(self, log: EventLog) -> None:
        """Refuse a log whose schema differs from the one the detector was fitted on, listing every difference."""
        schema = self.manifest["schema"]
        differ = []
        for name, kind in schema["fields"].items():
            if not log.has(name):
                differ.append(f"field {name!r} ({kind}) is missing")
            elif log.kind(name) != kind:
                differ.append(f"field {name!r} is a {log.kind(name)} field, the detector expects {kind}")
        if differ:
            raise LogSchemaError("SavedDetector.bind: the log does not have the schema the detector was fitted on: "
                                 + "; ".join(differ) + ". Build the log with the same columns and column mapping "
                                 "as the training log (the manifest's 'schema' lists them).")
        notes = []
        if log.time_kind != schema["time_kind"]:
            notes.append(f"its times are {log.time_kind}s, the training log's were {schema['time_kind']}s")
        new = sorted(set(map(str, log.categories("action"))) - set(schema["action_labels"]))
        if new:
            notes.append(f"it has action kinds the training log had not: {new!r} (rules never match them; mined "
                         "features count them as other actions)")
        if notes:
            warnings.warn("SavedDetector.bind: " + "; ".join(notes) + ".", RulefeatWarning, stacklevel=3)

    def bind(self, log: EventLog, *, empty_units: str = "error"):
        """The detector bound to ``log`` after checking the log's schema (see :func:`rulefeat.bind`)."""
        if not isinstance(log, EventLog):
            raise ParameterError(f"SavedDetector.bind: log must be a rulefeat.EventLog. Got {type(log).__name__}.")
        self.check_log(log)
        return bind(self.detector, log, empty_units=empty_units)

    def score(self, log: EventLog, X, *, empty_units: str = "error"):
        """Scores of the units ``X`` of ``log``: P(class 1) for a classifier, predictions for a regressor."""
        task = self.manifest["detector"]["task"]
        if task is None:
            raise ParameterError("SavedDetector.score: the saved estimator has no model to predict with (it is a "
                                 "transformer); use .bind(log).transform(X) for its features.")
        bound = self.bind(log, empty_units=empty_units)
        if task == "classification":
            classes = list(self.manifest["detector"]["classes"])
            column = classes.index(1) if 1 in classes else len(classes) - 1
            return bound.predict_proba(X)[:, column]
        return bound.predict(X)

    def __repr__(self) -> str:
        d = self.manifest["detector"]
        n = len(d["features"]) if d["features"] is not None else "?"
        return f"SavedDetector({d['final_step'].rsplit('.', 1)[-1]}, unit={d['unit']['name']!r}, {n} features)"
