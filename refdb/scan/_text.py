"""Shared text machinery of the scan and peak-table readers.

Reading bytes from a file or stdin, refusing binary and non-UTF-8 input with one-line messages,
splitting lines into numeric fields with their line numbers, and the small header form that
refdb's own text files use to state their radiation::

    # wavelength: 1.5406      (Å, one wavelength; no Kα2 is fitted)
    # anode: Cu               (Cu, Co, Fe, Cr, Mo or Ag; Kα1 + Kα2)

The key may follow any of the comment marks ``#``, ``!`` or ``;``; keys are case-insensitive,
and ``=`` may stand for ``:``.
"""

from __future__ import annotations

import re
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refdb.errors import InputError
from refdb.radiation import Radiation, radiation_for

COMMENT_MARKS = ("#", "!", ";")
_HEADER = re.compile(r"^[#!;]\s*(wavelength|anode)\s*[:=]\s*(\S+)", re.IGNORECASE)
_NUMBER_TAIL = re.compile(r"\s*(?:å|a|angstrom)?\s*$", re.IGNORECASE)


@dataclass(frozen=True)
class SourceText:
    """The decoded text of an input and the name to show for it."""

    text: str
    name: str


def read_source(path: str | Path) -> SourceText:
    """Read a file (or stdin for ``"-"``) as UTF-8 text.

    Raises
    ------
    InputError
        The file is missing, unreadable, empty, binary or not UTF-8.
    """
    if str(path) == "-":
        data = sys.stdin.buffer.read() if hasattr(sys.stdin, "buffer") else sys.stdin.read().encode()
        name = "<stdin>"
    else:
        p = Path(path)
        name = p.name
        if not p.exists():
            raise InputError(f"{path}: no such file", "check the path")
        if p.is_dir():
            raise InputError(f"{path} is a folder, not a scan file")
        try:
            data = p.read_bytes()
        except OSError as exc:
            raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from None
    return SourceText(decode(data, name), name)


def decode(data: bytes, name: str) -> str:
    """Decode bytes as UTF-8 (a BOM is allowed), refusing empty, binary and other encodings."""
    if not data.strip():
        raise InputError(f"{name} is empty", "give a file with 2θ and counts columns")
    head = data[:4096]
    controls = sum(1 for b in head if b < 32 and b not in (9, 10, 12, 13))
    if b"\0" in head or controls > len(head) // 100 + 2:
        raise InputError(
            f"{name} looks like a binary file",
            "export the scan as text columns of 2θ and counts, CSV or powder CIF",
        )
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(
            f"{name} is not UTF-8 text (byte 0x{data[exc.start]:02x} on line {line})",
            "save the file as UTF-8",
        ) from None


def header_radiation(text: str, name: str) -> Radiation | None:
    """The radiation stated by ``# wavelength:`` or ``# anode:`` comment lines, if any.

    Raises
    ------
    InputError
        The stated wavelength is not a number or outside 0.1–5 Å, or the anode is unknown.
    """
    found: dict[str, str] = {}
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped.startswith(COMMENT_MARKS):
            if stripped:
                break  # the header ends at the first data line
            continue
        m = _HEADER.match(stripped)
        if m:
            found.setdefault(m.group(1).lower(), f"{m.group(2)}\0{number}")
    if "anode" in found:
        value, line_no = found["anode"].split("\0")
        try:
            return radiation_for(value)
        except InputError as exc:
            raise InputError(f"{name} line {line_no}: {exc.message}", exc.hint) from None
    if "wavelength" in found:
        value, line_no = found["wavelength"].split("\0")
        value = _NUMBER_TAIL.sub("", value)
        try:
            lam = float(value)
        except ValueError:
            raise InputError(
                f"{name} line {line_no}: wavelength {value!r} is not a number", "write e.g. # wavelength: 1.5406"
            ) from None
        try:
            return radiation_for(wavelength=lam)
        except InputError as exc:
            raise InputError(f"{name} line {line_no}: {exc.message}", exc.hint) from None
    return None


def choose_radiation(
    from_file: Radiation | None, given: Radiation | None, name: str, warnings: list[str]
) -> Radiation:
    """The file's radiation if it states one, else the caller's; refuse when neither exists."""
    if from_file is not None:
        if given is not None and not _same_primary(from_file, given):
            warnings.append(
                f"{name} states {from_file.describe()}; the radiation given on the command line "
                f"({given.describe()}) was not used"
            )
        return from_file
    if given is not None:
        return given
    raise InputError(
        f"{name} does not say which radiation was used",
        "give it with --anode Cu or --wavelength 1.5406 in Å, or add a line '# anode: Cu' to the file",
    )


def _same_primary(a: Radiation, b: Radiation) -> bool:
    return abs(a.wavelength - b.wavelength) < 1e-4 and len(a.wavelengths) == len(b.wavelengths)


@dataclass(frozen=True, eq=False)
class Rows:
    """Numeric rows of a text table.

    Attributes
    ----------
    values : ndarray, shape (n, k)
        The numbers, one row per data line (k = the number of columns of the first data row).
    line_numbers : ndarray of int, shape (n,)
        1-based line number of each row in the file.
    header : tuple of str
        Column names from a header line, or ``()``.
    """

    values: np.ndarray
    line_numbers: np.ndarray
    header: tuple[str, ...] = ()


def split_fields(line: str) -> list[str]:
    """Split a data line on semicolons, commas or whitespace (a ``;`` file may use decimal commas)."""
    if ";" in line:
        return [f.strip().replace(",", ".") for f in line.split(";") if f.strip()]
    if "," in line:
        return [f.strip() for f in line.split(",") if f.strip()]
    return line.split()


def _is_number(field: str) -> bool:
    try:
        float(field)
    except ValueError:
        return False
    return True


def numeric_rows(text: str, name: str, *, allow_header: bool, min_columns: int = 2) -> Rows:
    """Parse the data lines of a column file.

    Comment lines (``#``, ``!``, ``;``) and blank lines are skipped. With ``allow_header``, the
    first non-comment line may be a header of column names (no field numeric). Every other line
    must hold as many numbers as the first data row (at least ``min_columns``); extra fields
    are ignored.

    Raises
    ------
    InputError
        A data line has a non-numeric field or too few columns (the line number is given), or
        there are no data lines.
    """
    fast = _plain_columns(text, allow_header=allow_header, min_columns=min_columns)
    return fast if fast is not None else _rows_by_line(text, name, allow_header=allow_header, min_columns=min_columns)


def _rows_by_line(text: str, name: str, *, allow_header: bool, min_columns: int) -> Rows:
    """:func:`numeric_rows` one line at a time, with the line number of any problem."""
    rows: list[list[float]] = []
    numbers: list[int] = []
    header: tuple[str, ...] = ()
    width = 0
    for number, line in _data_lines(text):
        fields = split_fields(line)
        if not rows and not header and allow_header and not any(_is_number(f) for f in fields):
            header = tuple(fields)
            continue
        if not width:
            width = len(fields)
            if width < min_columns:
                raise InputError(
                    f"{name} line {number}: {width} column where {min_columns} are needed ({_clip(line)})",
                    "a scan has 2θ and counts columns",
                )
        if len(fields) < width:
            raise InputError(f"{name} line {number}: expected {width} columns, found {len(fields)} ({_clip(line)})")
        try:
            rows.append([float(f) for f in fields[:width]])
        except ValueError:
            bad = next(f for f in fields[:width] if not _is_number(f))
            raise InputError(f"{name} line {number}: {bad!r} is not a number ({_clip(line)})") from None
        numbers.append(number)
    if not rows:
        raise InputError(f"{name} has no data lines", "give 2θ and counts columns")
    values = np.array(rows, dtype=float)
    return Rows(values, np.array(numbers, dtype=np.int64), header)


def _plain_columns(text: str, *, allow_header: bool, min_columns: int) -> Rows | None:
    """:func:`numeric_rows` for the common case — whitespace-separated columns, the same number
    of fields on every data line — converting all fields in one numpy call; None for anything
    else (commas, semicolons, ragged or bad lines), which the line-by-line reader then handles
    and explains."""
    if ";" in text or "," in text:
        return None
    data = _data_lines(text)
    header: tuple[str, ...] = ()
    if data and allow_header and not any(_is_number(f) for f in data[0][1].split()):
        header = tuple(data[0][1].split())
        data = data[1:]
    if not data:
        return None
    split = [line.split() for _, line in data]
    width = len(split[0])
    if width < min_columns or any(len(f) != width for f in split):
        return None
    try:
        values = np.array(split, dtype=float)
    except ValueError:
        return None
    return Rows(values, np.array([n for n, _ in data], dtype=np.int64), header)


def _data_lines(text: str) -> list[tuple[int, str]]:
    """(1-based line number, stripped line) of every line that is neither blank nor a comment."""
    stripped = ((n, raw.strip()) for n, raw in enumerate(text.splitlines(), start=1))
    return [(n, line) for n, line in stripped if line and not line.startswith(COMMENT_MARKS)]


def _clip(line: str, n: int = 40) -> str:
    return line if len(line) <= n else line[: n - 1] + "…"
