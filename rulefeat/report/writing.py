"""All-or-nothing writing of report folders and files.

A report folder is written into a fresh temporary folder beside the target and renamed into place at
the end, so a failure half-way (a figure that cannot be drawn, a full disk) leaves the target as it was
and no half-written folder behind.  An existing non-empty target is refused unless ``overwrite=True``;
:func:`check_target` runs that check on its own, so a long job can refuse before it starts.  Single
files are written to a temporary file in the same folder and moved over the target with
:func:`os.replace` (atomic on one file system).
"""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from ..errors import EvaluationError, ParameterError

__all__ = ["check_target", "new_folder", "write_file"]


def check_target(target: str | os.PathLike, *, overwrite: bool, where: str) -> Path:
    """``target`` as a Path after checking a report folder may be written there.

    Raises :class:`ParameterError` when it is a file, or a non-empty folder and ``overwrite`` is false.
    """
    target = Path(target)
    if target.exists() and not target.is_dir():
        raise ParameterError(f"{where}: {str(target)!r} is a file, not a folder; pass a folder path.")
    if not overwrite and target.is_dir() and any(target.iterdir()):
        raise ParameterError(f"{where}: the folder {str(target)!r} exists and is not empty; pass "
                             "overwrite=True to replace it, or choose another folder.")
    return target


@contextmanager
def new_folder(target: str | os.PathLike, *, overwrite: bool, where: str) -> Iterator[Path]:
    """Yield an empty temporary folder beside ``target``; on success it replaces ``target``, on error it goes.

    >>> import tempfile, pathlib
    >>> root = pathlib.Path(tempfile.mkdtemp())
    >>> with new_folder(root / "out", overwrite=False, where="example") as folder:
    ...     _ = (folder / "a.txt").write_text("a")
    >>> sorted(p.name for p in root.iterdir()), (root / "out" / "a.txt").read_text()
    (['out'], 'a')
    """
    target = check_target(target, overwrite=overwrite, where=where)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        work = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent))
        work.chmod(0o755)  # mkdtemp's 0700 would hide the report from the user's group
    except OSError as exc:
        raise EvaluationError(f"{where}: cannot create the folder {str(target)!r} ({exc}); pass a writable "
                              "path.") from exc
    try:
        yield work
        _swap(work, target)
    except BaseException:
        shutil.rmtree(work, ignore_errors=True)
        raise


def _swap(work: Path, target: Path) -> None:
    """Move ``work`` to ``target``; an existing target is moved aside first and removed only afterwards."""
    if not target.exists():
        os.replace(work, target)
        return
    old = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".old", dir=target.parent))
    os.replace(target, old / target.name)
    try:
        os.replace(work, target)
    except OSError:
        os.replace(old / target.name, target)
        raise
    finally:
        shutil.rmtree(old, ignore_errors=True)


def write_file(path: str | os.PathLike, data: str | bytes, *, where: str) -> Path:
    """Write ``data`` (text as UTF-8) to a temporary file beside ``path`` and move it over ``path``."""
    target = Path(path)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        handle, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent)
    except OSError as exc:
        raise EvaluationError(f"{where}: cannot write {str(target)!r} ({exc}); pass a writable file path.") from exc
    try:
        with os.fdopen(handle, "wb") as file:
            file.write(payload)
        os.chmod(name, 0o644)  # mkstemp's 0600 would hide a report from the user's group
        os.replace(name, target)
    except OSError as exc:
        Path(name).unlink(missing_ok=True)
        raise EvaluationError(f"{where}: cannot write {str(target)!r} ({exc}); pass a writable file path.") from exc
    except BaseException:
        Path(name).unlink(missing_ok=True)
        raise
    return target
