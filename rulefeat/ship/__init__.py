"""Shipping a detector: bind fitted state to new logs, save it with a manifest, load it back.

>>> from rulefeat.ship import FORMAT, FORMAT_VERSION
>>> FORMAT, FORMAT_VERSION
('rulefeat-detector', 1)
"""

from .artefact import FORMAT, FORMAT_VERSION, SavedDetector, load_detector, read_manifest, save_detector
from .bind import bind, log_params, unit_transformers
from .live import LiveResult, LiveScorer

__all__ = ["bind", "save_detector", "load_detector", "read_manifest", "SavedDetector", "unit_transformers",
           "log_params", "LiveScorer", "LiveResult", "FORMAT", "FORMAT_VERSION"]
