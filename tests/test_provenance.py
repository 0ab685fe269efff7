"""Repository hygiene: no committed file names a path on the machine it was written on.

A clone has none of the author's folders, so an absolute path to a home, temporary, work or root folder in a
tracked file is either dead (a note, a data file) or leaks where the work was done. The patterns are built from
pieces so that this file does not match itself.
"""

from __future__ import annotations

import os
import re
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

_SLASH, _BACK = "/", "\\\\"
# Top folders of a Unix-like file system (Linux, macOS) that hold a person's or a machine's own files.
_UNIX_TOPS = ("ho" + "me", "t" + "mp", "wo" + "rk", "ro" + "ot", "Us" + "ers", "var/t" + "mp", "var/fol" + "ders",
              "priv" + "ate/t" + "mp", "priv" + "ate/var")
# Windows: a drive letter and a user-profile or temporary folder, with either separator.
_WINDOWS_TOPS = ("Us" + "ers", "Documents and Set" + "tings", "Windows[\\\\/]+Te" + "mp")
MACHINE_PATH = re.compile(
    "(?<![\\w.~-])" + _SLASH + "(?:" + "|".join(re.escape(t) for t in _UNIX_TOPS) + ")" + _SLASH
    + "|(?<![\\w])[A-Za-z]:[" + _BACK + "/]+(?:" + "|".join(_WINDOWS_TOPS) + ")(?:[" + _BACK + "/]|$)",
    re.IGNORECASE,
)

_SKIP_DIRS = {".git", "__pycache__", ".hypothesis", ".ruff_cache", ".pytest_cache", ".mypy_cache", ".venv",
              "venv", "build", "dist", ".ipynb_checkpoints"}


def tracked_files(root: Path = ROOT) -> list[Path]:
    """Files git tracks under ``root``; without git (or outside a checkout), every file in the tree."""
    try:
        out = subprocess.run(["git", "ls-files", "-z"], cwd=root, capture_output=True, check=True, timeout=60).stdout
    except (OSError, subprocess.SubprocessError):
        out = None
    if out:
        return [root / name for name in out.decode("utf-8", "surrogateescape").split("\0") if name]
    files = []
    for folder, dirs, names in os.walk(root):
        dirs[:] = sorted(d for d in dirs if d not in _SKIP_DIRS and not d.endswith(".egg-info"))
        files.extend(Path(folder) / name for name in sorted(names))
    return files


def text_of(path: Path) -> str | None:
    """The file's text, or None for a binary file (a NUL byte in its first 8 KiB) or a file that is gone."""
    try:
        data = path.read_bytes()
    except (FileNotFoundError, IsADirectoryError):
        return None  # deleted in the work tree but still in the index, or a submodule
    if b"\0" in data[:8192]:
        return None
    return data.decode("utf-8", errors="replace")


def machine_paths(root: Path = ROOT) -> list[str]:
    """``file:line: match`` for every machine path in the text files of ``root``."""
    found = []
    for path in tracked_files(root):
        text = text_of(path)
        if text is None:
            continue
        for number, line in enumerate(text.splitlines(), start=1):
            for match in MACHINE_PATH.finditer(line):
                found.append(f"{path.relative_to(root).as_posix()}:{number}: {match.group(0)!r} in {line.strip()[:120]!r}")
    return found


def test_no_tracked_file_contains_a_machine_path():
    found = machine_paths()
    assert not found, (
        "tracked files contain absolute paths of the machine they were written on (a clone has no such "
        "folders; use a path relative to the repository, or name the published source):\n" + "\n".join(found))


def _sample(*pieces: str) -> str:
    return "".join(pieces)


@pytest.mark.parametrize("text", [
    _sample("see /", "ho", "me/ann/notes.md"),
    _sample("open('/", "t", "mp/x.csv')"),
    _sample("# /", "wo", "rk/shared/reference/README.md"),
    _sample("`/", "ro", "ot/.cache/`"),
    _sample("/", "Us", "ers/ann/Desktop/data.csv"),
    _sample("/", "private/", "var/folders/x"),
    _sample("path=/", "var/", "tmp/run"),
    _sample("C:", "\\", "Us", "ers", "\\", "ann\\data.csv"),
    _sample("d:/", "Us", "ers/ann"),
    _sample("c:", "\\", "Windows\\", "Temp\\x"),
    _sample("file:///", "ho", "me/ann/x"),
])
def test_pattern_catches_machine_paths(text):
    assert MACHINE_PATH.search(text)


@pytest.mark.parametrize("text", [
    "tests/data/README.md",
    "build/" + "tmp/x",                                 # relative
    "https://example.org/" + "home/index.html",         # a URL path, not this machine's
    "docs/" + "work" + "flow.md",
    "~/" + "work/x",                                   # relative to a home folder, says nothing of this machine
    "/" + "homework/x",
    "/usr/lib/python3",
    "ratio 3/" + "4 of users/" + "day",
])
def test_pattern_leaves_other_paths(text):
    assert not MACHINE_PATH.search(text)


def test_scan_reads_text_skips_binary_and_walks_without_git(tmp_path):
    (tmp_path / "notes.txt").write_text(_sample("a\nsee /", "ho", "me/ann/x.md here\n"))
    (tmp_path / "clean.py").write_text("x = 'tests/data'\n")
    (tmp_path / "blob.bin").write_bytes(b"\0\1" + _sample("/", "t", "mp/").encode())
    (tmp_path / ".hypothesis").mkdir()
    (tmp_path / ".hypothesis" / "cache").write_text(_sample("/", "t", "mp/x"))
    found = machine_paths(tmp_path)  # tmp_path is no git checkout: the tree walk is used
    assert len(found) == 1 and found[0].startswith("notes.txt:2: ")
