"""The optional packages of the cluster path, imported only when it is used.

The rest of rulefeat never imports dask, distributed, pyarrow or fsspec; :func:`require` does, the first
time a function of :mod:`rulefeat.scale` needs one, and turns their absence into a
:class:`~rulefeat.errors.MissingExtraError` that names the extra to install.
"""

from __future__ import annotations

import importlib

from ..errors import MissingExtraError, ParameterError

__all__ = ["require", "default_client", "INSTALL"]

INSTALL = 'pip install "rulefeat[dask]"'


def require(name: str):
    """Import and return module ``name`` (``"dask.dataframe"``, ``"distributed"``, ``"pyarrow.parquet"``, ...)."""
    try:
        return importlib.import_module(name)
    except ImportError as exc:
        raise MissingExtraError(f"rulefeat.scale needs {name.split('.')[0]!r}, which is not installed "
                                f"({exc}). Install the cluster extra: {INSTALL}") from exc


def default_client(client=None):
    """``client`` itself, or the current ``distributed.Client`` (the last one created in this process)."""
    if client is not None:
        return client
    distributed = require("distributed")
    try:
        return distributed.default_client()
    except ValueError as exc:
        raise ParameterError(
            "rulefeat.scale: no dask cluster to run on. Connect first, e.g. "
            "client = distributed.Client('tcp://scheduler:8786') or Client(LocalCluster()), or pass client=."
        ) from exc
