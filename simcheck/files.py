"""Reading the user's files safely: regular files only, bounded size, UTF-8 text,
data paths kept inside the scenario's folder, and errors that never echo content.

Every file simcheck reads on the user's behalf (scenario and sweep files, the
CSV files of ``population.file`` and of the ``empirical`` model) goes through
this module, so one set of rules holds everywhere:

* only regular files are read: a folder, FIFO, socket or device (``/dev/zero``)
  is refused before it is opened, so reading can neither hang nor fill memory;
* a size cap (:data:`TEXT_MAX` for TOML files, :data:`DATA_MAX` for CSV data);
* TOML text must be UTF-8 without a byte-order mark (the message says which);
* data paths written in a scenario are resolved relative to the scenario's
  folder, and a path that leaves it (absolute, ``..``, a symbolic link
  pointing out) is refused unless the caller passes ``allow_outside=True``
  (the command line's ``--allow-outside-files``);
* an error names the file, the line and the column, never the text found
  there: a scenario pointing at a private file must not print it.
"""

from __future__ import annotations

import csv
import errno
import math
import os
import re
import stat
import tomllib
from pathlib import Path
from typing import Any

import numpy as np

from simcheck.errors import InputError, Problem

__all__ = [
    "TEXT_MAX",
    "DATA_MAX",
    "VALUE_LIMIT",
    "NAME_MAX",
    "OUTSIDE_OPTION",
    "regular_file",
    "read_text",
    "parse_toml",
    "read_toml",
    "resolve_data_path",
    "read_csv_column",
]

#: largest scenario or sweep file read (bytes); real ones are a few KiB
TEXT_MAX = 1 << 20
#: largest CSV data file read (bytes)
DATA_MAX = 1 << 30
#: largest |value| in a data file: squares of sums of up to 10**6 such values stay finite
VALUE_LIMIT = 1e150
#: longest file name (one path component) most file systems accept
NAME_MAX = 255
#: how the command line spells the permission to read data files outside the scenario's folder
OUTSIDE_OPTION = "--allow-outside-files"

_UTF8_BOM = b"\xef\xbb\xbf"


def _fail(field: str, message: str, label: str | None) -> InputError:
    return InputError([Problem(field, message)], source=label)


def _long_name(path: Path) -> str | None:
    for part in path.parts:
        if len(os.fsencode(part)) > NAME_MAX:
            return f"a file or folder name in the path is {len(os.fsencode(part))} bytes long; at most {NAME_MAX} are possible"
    return None


def regular_file(path: str | Path, *, field: str = "", label: str | None = None,
                 what: str = "file", limit: int | None = None) -> Path:
    """``path`` as a Path after checking it names a readable regular file of at most ``limit`` bytes.

    Raises
    ------
    InputError
        No such file, a folder, not a regular file (FIFO, socket, device),
        a name too long, larger than ``limit``, or not readable.
    """
    p = Path(path)
    long = _long_name(p)
    if long:
        raise _fail(field, long, label)
    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise _fail(field, "no such file", label) from None
    except OSError as e:
        if e.errno == errno.ENAMETOOLONG:
            raise _fail(field, "the path is too long for the file system", label) from None
        raise _fail(field, f"cannot read the {what}: {e.strerror or type(e).__name__}", label) from None
    if stat.S_ISDIR(st.st_mode):
        raise _fail(field, f"is a folder, not a {what}", label)
    if not stat.S_ISREG(st.st_mode):
        raise _fail(field, f"is not a regular file (a pipe, socket or device); give a {what}", label)
    if limit is not None and st.st_size > limit:
        raise _fail(field, f"is {st.st_size} bytes, larger than the {_size(limit)} limit for a {what}", label)
    return p


def _size(n: int) -> str:
    return f"{n >> 30} GiB" if n >= 1 << 30 else f"{n >> 20} MiB" if n >= 1 << 20 else f"{n} bytes"


def read_text(path: str | Path, *, label: str | None = None, field: str = "",
              what: str = "scenario file", limit: int = TEXT_MAX) -> str:
    """The UTF-8 text of a small regular file, or one InputError saying why not.

    A byte-order mark is refused with its own message (TOML files must be
    plain UTF-8); invalid UTF-8 is reported by line and byte offset.
    """
    p = regular_file(path, field=field, label=label, what=what, limit=limit)
    try:
        with open(p, "rb") as fh:
            raw = fh.read(limit + 1)  # the file may have grown since it was checked
    except OSError as e:
        raise _fail(field, f"cannot read the {what}: {e.strerror or type(e).__name__}", label) from None
    if len(raw) > limit:
        raise _fail(field, f"is larger than the {_size(limit)} limit for a {what}", label)
    if raw.startswith(_UTF8_BOM):
        raise _fail(field, f"starts with a UTF-8 byte-order mark (BOM); save the {what} as UTF-8 without BOM", label)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as e:
        line = raw[: e.start].count(b"\n") + 1
        raise _fail(field, f"not UTF-8 text (line {line}, byte {e.start}); a TOML file must be UTF-8", label) from None


# tomllib messages that quote the file's text; replaced by a description without it
_QUOTING = (
    ("Cannot declare", "a key or table is declared twice"),
    ("Cannot mutate", "a key of an inline table or array is changed later"),
    ("Cannot redefine", "a table is defined twice"),
    ("Duplicate inline table key", "a key is repeated in an inline table"),
    ("Found invalid character", "a character that is not allowed here"),
    ("Illegal character", "a control character that is not allowed here"),
)
_AT = re.compile(r"\(at line (\d+), column (\d+)\)|\(at end of document\)")


def parse_toml(text: str, *, label: str | None = None, field: str = "") -> dict[str, Any]:
    """The TOML table of ``text``; syntax errors give their line and column, not the text."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        msg = str(e).splitlines()[0] if str(e) else "invalid TOML"
        at = _AT.search(msg)
        desc = msg[: at.start()].strip() if at else msg
        for prefix, plain in _QUOTING:
            if desc.startswith(prefix):
                desc = plain
                break
        where = at.group(0)[1:-1] if at else "position unknown"
        raise _fail(field, f"TOML syntax error: {desc} ({where})", label) from None
    except RecursionError:
        raise _fail(field, "TOML nesting too deep for this reader (arrays or tables inside each other)", label) from None
    except ValueError:
        # int() refuses more than 4,300 digits (Python's guard against slow conversions)
        raise _fail(field, "a whole number with more than 4300 digits; no setting needs one", label) from None


def read_toml(path: str | Path, *, label: str | None = None, field: str = "",
              what: str = "scenario file") -> dict[str, Any]:
    """:func:`read_text` then :func:`parse_toml`."""
    return parse_toml(read_text(path, label=label, field=field, what=what), label=label, field=field)


def resolve_data_path(file: str, base_dir: str | Path | None, *, field: str,
                      allow_outside: bool = False, folder: str = "the scenario's folder") -> Path:
    """The path of a data file named in a scenario, resolved against its folder.

    ``base_dir`` is the scenario's folder (the current folder when None). The
    file must lie inside that folder or below it, after following symbolic
    links, unless ``allow_outside``; absolute paths and ``..`` that leave the
    folder are refused, so a shared scenario cannot read arbitrary files.

    Raises
    ------
    InputError
        On ``field``: a path that leaves the folder, or a name too long.
    """
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    p = Path(file)
    long = _long_name(p)
    if long:
        raise InputError(field, long)
    full = p if p.is_absolute() else base / p
    if allow_outside:
        return full
    how = (f"pass {OUTSIDE_OPTION} (Python: allow_outside_files=True) to read it anyway, "
           f"or copy the file into {folder}")
    if p.is_absolute():
        raise InputError(field, f"an absolute path is refused: files are read from {folder} or below it; {how}")
    try:
        inside = full.resolve().is_relative_to(base.resolve())
    except (OSError, RuntimeError):  # a symbolic-link loop
        inside = False
    if not inside:
        raise InputError(field, f"{_plain_name(file)} leaves {folder} (through '..' or a symbolic link); {how}")
    return full


def _plain_name(file: str) -> str:
    # the name as the user wrote it in the scenario (not file content), cut if long
    return repr(file) if len(file) <= 80 else repr(file[:60] + "...")


def read_csv_column(path: str | Path, column: str, *, file_field: str, column_field: str,
                    value_field: str | None = None, name: str | None = None) -> tuple[np.ndarray, int]:
    """The finite numbers of one column of a CSV file with a header row.

    Empty cells are skipped and counted; every other cell must be a finite
    number of magnitude at most :data:`VALUE_LIMIT` (the text ``nan``, ``NA``
    or ``inf`` is refused). Rows must have as many fields as the header
    (blank lines are skipped). A UTF-8 byte-order mark is allowed (spreadsheets
    write one). Errors name the file (``name``, default the path), the line
    and the column, never a cell's content: problems of the file on
    ``file_field``, a missing column on ``column_field``, a bad cell on
    ``value_field`` (default ``file_field``).

    Returns
    -------
    values : ndarray of float64
    empty : int
        Number of empty cells skipped.
    """
    shown = name if name is not None else str(path)
    p = regular_file(path, field=file_field, what="data file", limit=DATA_MAX)
    values: list[float] = []
    empty = 0
    line = 0
    try:
        with open(p, newline="", encoding="utf-8-sig") as fh:
            reader = csv.reader(fh)
            header = next(reader, None)
            if header is None:
                raise InputError(file_field, f"{shown} is empty; a header row naming the columns is needed")
            if column not in header:
                raise InputError(column_field, _no_column(column, header, shown))
            j, width = header.index(column), len(header)
            for row in reader:
                line = reader.line_num
                if not row:
                    continue
                if len(row) != width:
                    raise InputError(file_field, f"{shown} line {line} has {len(row)} fields, the header has {width}")
                cell = row[j].strip()
                if not cell:
                    empty += 1
                    continue
                values.append(_cell_value(cell, shown, line, column, value_field or file_field))
    except UnicodeDecodeError:
        raise InputError(file_field, f"{shown} is not UTF-8 text (near line {line + 1})") from None
    except csv.Error:
        raise InputError(file_field, f"{shown} line {line + 1} is not a well-formed CSV row") from None
    except OSError as e:
        raise InputError(file_field, f"cannot read {shown}: {e.strerror or type(e).__name__}") from None
    return np.asarray(values, dtype=np.float64), empty


def _no_column(column: str, header: list[str], shown: str) -> str:
    import difflib

    # The header is file content: only a name close to the user's own text is shown.
    near = difflib.get_close_matches(column, header, n=1, cutoff=0.6)
    hint = f"; did you mean {near[0]!r}?" if near else ""
    return f"no column {column!r} in the header row (line 1) of {shown}, which has {len(header)} columns{hint}"


def _cell_value(cell: str, shown: str, line: int, column: str, field: str) -> float:
    try:
        x = float(cell)
    except ValueError:
        raise InputError(field, f"{shown} line {line}, column {column!r}: not a number") from None
    if not math.isfinite(x):
        raise InputError(field, f"{shown} line {line}, column {column!r}: not a finite number (nan or infinity)")
    if abs(x) > VALUE_LIMIT:
        raise InputError(field, f"{shown} line {line}, column {column!r}: a value beyond +/-{VALUE_LIMIT:g}, "
                                "too large for the simulation's sums of squares")
    return x
