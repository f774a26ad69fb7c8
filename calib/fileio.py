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
from typing import TYPE_CHECKING

if TYPE_CHECKING:
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
    import pandas as pd  # here, not at the top: the app and the commands' --help need no pandas
    frame = frame.copy()
    for col in frame.columns:
        if frame[col].dtype == object or pd.api.types.is_string_dtype(frame[col]):
            frame[col] = frame[col].map(safe_cell)
    buf = io.StringIO()
    frame.to_csv(buf, index=False, float_format=float_format, lineterminator="\n")
    return write_text(path, buf.getvalue())


def write_table(path, columns, float_format: str = "%.6g") -> Path:
    """Write named columns as CSV atomically: the bytes ``write_csv`` writes for the same table as a
    DataFrame, without importing pandas (a quarter of a fit command's start-up; see ``csv_text``)."""
    return write_text(path, csv_text(columns, float_format))


def csv_text(columns, float_format: str = "%.6g") -> str:
    """Named columns as CSV text, as pandas' ``to_csv(index=False, float_format=...)`` writes them
    after ``write_csv``'s neutralizing (tests/foundation/test_fileio.py: byte for byte).

    ``columns``: a dict or ``(name, values)`` pairs; values a numpy array, a list, or one scalar
    for the whole column. A float array is written with ``float_format``, NaN blank; a bool array
    ``True``/``False``; an integer array as integers; anything else (text) cell by cell as text,
    None and NaN blank, neutralized by ``safe_cell``. A list takes the kind numpy gives it.
    """
    import csv

    import numpy as np

    pairs = list(columns.items()) if isinstance(columns, dict) else list(columns)
    sized = [len(v) for _, v in pairs if not _scalar(v)]
    n = sized[0] if sized else 1
    cells = []
    for name, values in pairs:
        if _scalar(values):
            values = [values] * n
        arr = values if isinstance(values, np.ndarray) else np.asarray(values)
        if len(arr) != n:
            raise ValueError(f"column '{name}' has {len(arr)} values, the first {n}")
        kind = arr.dtype.kind
        if kind == "f":
            cells.append(_float_cells(arr, float_format))
        elif kind in "biu":
            cells.append([str(v) for v in arr.tolist()])
        else:
            source = values if isinstance(values, list) else arr.tolist()
            cells.append(_text_cells(source))
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")  # pandas' dialect: excel, minimal quoting
    writer.writerow([str(name) for name, _ in pairs])
    writer.writerows(zip(*cells))
    return buf.getvalue()


def distinct_float_texts(values, text) -> list[str]:
    """``text(v)`` of each float of ``values`` (None counts as NaN), called once per distinct value
    (by its bits: -0.0 is not 0.0): an export's columns repeat a few values (a group's C on each of
    its pipes, a node's coordinates at each pipe end)."""
    import numpy as np

    bits, inverse = np.unique(np.ascontiguousarray(values, dtype=float).view(np.int64),
                              return_inverse=True)
    texts = [text(v) for v in bits.view(float).tolist()]
    return list(map(texts.__getitem__, inverse.ravel().tolist()))


def _float_cells(arr, float_format: str) -> list[str]:
    """``float_format % v`` of each value, NaN blank (``distinct_float_texts``)."""
    return distinct_float_texts(arr, lambda v: "" if v != v else float_format % v)


def _text_cells(source: list) -> list[str]:
    """Text cells, None and NaN blank, neutralized by ``safe_cell``; a column of text alone (each
    value its own cell text) made once per distinct value."""
    def cell(v):
        return "" if v is None or (isinstance(v, float) and v != v) else str(safe_cell(v))
    if set(map(type, source)) <= {str, type(None)}:
        memo = {v: cell(v) for v in set(source)}
        return list(map(memo.__getitem__, source))
    return [cell(v) for v in source]


def _scalar(value) -> bool:
    return isinstance(value, (str, bytes)) or not hasattr(value, "__len__")


# --- outputs of a command: never over an input, a folder all or nothing ---------------------------

def _same_file(a: Path, b: Path) -> bool:
    try:
        if a.exists() and b.exists():
            return os.path.samefile(a, b)
    except OSError:
        pass
    return a.resolve() == b.resolve()


def input_files(*paths) -> list[Path]:
    """The files a command reads: each path given, or the files directly in a folder given."""
    found: list[Path] = []
    for path in paths:
        path = Path(path)
        if path.is_dir():
            found += [p for p in sorted(path.iterdir()) if p.is_file()]
        elif path.exists():
            found.append(path)
    return found


def check_outputs(outputs: dict, inputs) -> None:
    """Refuse outputs that would overwrite an input or each other, before anything is computed.

    ``outputs`` maps an option name (``--out``) to a path or a list of paths it would write;
    ``inputs`` lists the files read (``input_files``). Raises ``InputError`` naming the option.
    """
    from calib.errors import InputError, Problem  # errors is tiny; imported here to keep fileio first

    problems: list[Problem] = []
    seen: list[tuple[str, Path]] = []
    for option, paths in outputs.items():
        if paths is None:
            continue
        for path in [paths] if isinstance(paths, (str, os.PathLike)) else paths:
            path = Path(path)
            for source in inputs:
                if _same_file(path, Path(source)):
                    problems.append(Problem(f"'{path}' is an input of this run and would be "
                                            "overwritten", field=option,
                                            expected="an output path outside the input files"))
            for other, earlier in seen:
                if _same_file(path, earlier):
                    problems.append(Problem(f"'{path}' is also the {other} output; one would "
                                            "overwrite the other", field=option,
                                            expected=f"a path other than {other}'s"))
            seen.append((option, path))
    if problems:
        raise InputError(problems)


@contextlib.contextmanager
def output_folder(out, known: tuple[str, ...]):
    """Write a command's outputs into folder ``out`` all or nothing, leaving no stale file of ours.

    Yields a temporary sibling folder to write into. On success each file written there is moved
    into ``out`` (``os.replace``, atomic per file), then every file named in ``known`` (the names the
    command can write) that this run did not write is removed from ``out``, so that no output of an
    earlier run can pass for this run's (e.g. an old ``report.html`` after ``--no-report``). Other
    files in ``out`` are left alone. On any error the staging folder is removed and ``out`` is as it
    was. Only a crash between two of the final renames (milliseconds) can leave a mix.
    """
    import shutil

    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".partial", dir=out.parent))
    try:
        yield stage
        out.mkdir(parents=True, exist_ok=True)
        written = [p for p in sorted(stage.iterdir()) if p.is_file()]
        for path in written:
            os.replace(path, out / path.name)
        names = {p.name for p in written}
        for name in known:
            if name not in names and (out / name).is_file():
                (out / name).unlink()
    finally:
        shutil.rmtree(stage, ignore_errors=True)
