"""Atomic file writes and spreadsheet-safe text cells.

Every file the package writes goes through here: the content is written to a temporary file in the
same folder, flushed to disk and moved over the target in one ``os.replace``, so an error or a kill
never leaves a half-written file behind. The file gets the permissions an ordinary ``open(path, "w")``
would give it: an existing file keeps its mode, a new one gets ``0o666`` less the process umask
(``tempfile.mkstemp`` alone would leave ``0o600``, readable by the owner only).
"""

from __future__ import annotations

import contextlib
import io
import os
import tempfile
from pathlib import Path

import pandas as pd

# A text cell starting with one of these is run as a formula by common spreadsheets (CSV injection).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


@contextlib.contextmanager
def atomic_open(path, mode: str = "w", encoding: str | None = "utf-8", newline: str | None = None):
    """Open ``path`` for writing so that it appears complete or not at all.

    Yields a file object on a temporary sibling; on normal exit it is fsynced and renamed over
    ``path``; on any exception the temporary file is removed and the original error propagates.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    binary = "b" in mode
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.fchmod(fd, _ordinary_mode(path))
        with os.fdopen(fd, mode, encoding=None if binary else encoding,
                       newline=None if binary else newline) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def _umask() -> int:
    """The process umask, read without changing it where Linux tells it (/proc), else set and restored."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _ordinary_mode(path: Path) -> int:
    """Mode an ordinary write would leave: the existing file's, else ``0o666 & ~umask``."""
    try:
        return os.stat(path).st_mode & 0o7777
    except OSError:
        return 0o666 & ~_umask()


def write_text(path, text: str) -> Path:
    """Write ``text`` to ``path`` atomically."""
    with atomic_open(path, "w") as fh:
        fh.write(text)
    return Path(path)


def write_bytes(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically."""
    with atomic_open(path, "wb") as fh:
        fh.write(data)
    return Path(path)


def safe_cell(value):
    """Neutralize a text cell that a spreadsheet would run as a formula by prefixing a quote.

    Numbers pass through unchanged; so does a text that is a plain number such as ``-3.2``.
    """
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        try:
            float(value)
            return value
        except ValueError:
            return "'" + value
    return value


def write_csv(path, frame: pd.DataFrame, float_format: str | None = "%.6g") -> Path:
    """Write a DataFrame as CSV atomically, with text cells neutralized (see ``safe_cell``)."""
    frame = frame.copy()
    for col in frame.columns:
        if frame[col].dtype == object or pd.api.types.is_string_dtype(frame[col]):
            frame[col] = frame[col].map(safe_cell)
    buf = io.StringIO()
    frame.to_csv(buf, index=False, float_format=float_format, lineterminator="\n")
    return write_text(path, buf.getvalue())
