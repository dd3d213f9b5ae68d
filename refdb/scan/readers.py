"""Scan readers behind one facade, :func:`load_scan`, and the table of formats it knows.

Formats (see :data:`SCAN_FORMATS`):

``xy``
    Plain columns: 2θ (degrees), counts and optionally a third column of standard
    uncertainties, separated by whitespace, commas or semicolons (a semicolon file may use
    decimal commas). Lines starting with ``#``, ``!`` or ``;`` are comments; the comment lines
    ``# wavelength: 1.5406`` (Å) or ``# anode: Cu`` state the radiation.
``csv``
    Columns with a header line naming them (``2theta``/``two_theta``/``angle``,
    ``counts``/``intensity``, optional ``sigma``/``esd``/``uncertainty``; units in brackets are
    ignored), any of the separators above, the same comment lines.
``pdcif``
    The IUCr powder CIF dictionary (pdCIF): 2θ from ``_pd_meas_2theta_scan`` (or
    ``_pd_proc_2theta_corrected``, or ``_pd_meas_2theta_range_min/max/inc``), counts from
    ``_pd_meas_counts_total`` (or ``_pd_meas_intensity_total``, ``_pd_proc_intensity_total``),
    standard uncertainties from the values' parentheses, radiation from
    ``_pd_proc_wavelength`` / ``_diffrn_radiation_wavelength`` (a loop with
    ``_diffrn_radiation_wavelength_wt`` gives several lines) and ``_diffrn_radiation_type`` /
    ``_diffrn_source_target``. Read with gemmi's CIF parser.

Reference: Toby, B. H. (2006). "CIF applications. XVII. pdCIF", in International Tables for
Crystallography Vol. G, §4.7 (the powder CIF dictionary).
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refdb.errors import InputError
from refdb.radiation import ANODES, Radiation, radiation_for
from refdb.scan._text import SourceText, choose_radiation, header_radiation, numeric_rows, read_source
from refdb.scan.types import Scan
from refdb.scan.validate import make_scan


@dataclass(frozen=True)
class ScanFormat:
    """One readable scan format: its name, a one-line description, file extensions, reader."""

    name: str
    description: str
    extensions: tuple[str, ...]
    read: Callable[[SourceText, Radiation | None], Scan]


def _read_xy(src: SourceText, radiation: Radiation | None) -> Scan:
    rows = numeric_rows(src.text, src.name, allow_header=False)
    notes: list[str] = []
    rad = choose_radiation(header_radiation(src.text, src.name), radiation, src.name, notes)
    sigma = rows.values[:, 2] if rows.values.shape[1] >= 3 else None
    return make_scan(
        rows.values[:, 0], rows.values[:, 1], sigma, rad,
        source=src.name, line_numbers=rows.line_numbers, warnings=notes,
    )


_ANGLE_NAMES = {"2theta", "twotheta", "tth", "2th", "angle", "2θ", "position", "x"}
_COUNT_NAMES = {"counts", "count", "intensity", "int", "i", "y", "cps", "yobs", "iobs", "icounts"}
_SIGMA_NAMES = {"sigma", "esd", "su", "u", "error", "err", "uncertainty", "dy", "sigmay", "ycalcsigma"}


def column_key(name: str) -> str:
    """A header name reduced for matching: lower case, units in brackets and punctuation removed."""
    key = re.sub(r"[\(\[\{].*?[\)\]\}]", "", name.lower())
    return re.sub(r"[\s_\-./°'\"]+", "", key.replace("θ", "theta").replace("2θ", "2theta"))


def _find_column(header: tuple[str, ...], names: set[str]) -> int | None:
    keys = [column_key(h) for h in header]
    return next((i for i, k in enumerate(keys) if k in names), None)


def _read_csv(src: SourceText, radiation: Radiation | None) -> Scan:
    rows = numeric_rows(src.text, src.name, allow_header=True)
    if not rows.header:
        raise InputError(f"{src.name} has no header line", "read it with --format xy, or add e.g. '2theta,counts'")
    notes: list[str] = []
    i_tt = _find_column(rows.header, _ANGLE_NAMES)
    i_y = _find_column(rows.header, _COUNT_NAMES)
    i_s = _find_column(rows.header, _SIGMA_NAMES)
    if i_tt is None or i_y is None:
        i_tt, i_y = 0, 1
        notes.append(
            f"{src.name}: header {', '.join(rows.header)!s} names no 2θ/counts columns; "
            "the first two columns were read as 2θ and counts"
        )
    width = rows.values.shape[1]
    for i in (i_tt, i_y, i_s):
        if i is not None and i >= width:
            raise InputError(f"{src.name}: the header names {len(rows.header)} columns but the rows have {width}")
    rad = choose_radiation(header_radiation(src.text, src.name), radiation, src.name, notes)
    sigma = rows.values[:, i_s] if i_s is not None else None
    return make_scan(
        rows.values[:, i_tt], rows.values[:, i_y], sigma, rad,
        source=src.name, line_numbers=rows.line_numbers, warnings=notes,
    )


_SU = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+))(?:[eE]([+-]?\d+))?\((\d+)\)$")


def cif_numbers(values: list[str], what: str, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Numbers and their standard uncertainties (NaN where none) from CIF value strings.

    ``12.3(11)`` is 12.3 with uncertainty 1.1 (the digits in parentheses count in the last
    decimal place, IUCr CIF convention).

    Raises
    ------
    InputError
        A value is not a number (``?`` and ``.`` included), naming its row.
    """
    out = np.empty(len(values))
    su = np.full(len(values), np.nan)
    for i, text in enumerate(values):
        m = _SU.match(text)
        if m:
            mantissa, exponent, digits = m.groups()
            decimals = len(mantissa.split(".")[1]) if "." in mantissa else 0
            scale = 10.0 ** (int(exponent) if exponent else 0)
            out[i] = float(mantissa) * scale
            su[i] = int(digits) * 10.0 ** (-decimals) * scale
            continue
        try:
            out[i] = float(text)
        except ValueError:
            raise InputError(f"{name}: {what} row {i + 1} is {text!r}, not a number") from None
    return out, su


def _cif_value(block, tags: tuple[str, ...]) -> str | None:
    for tag in tags:
        value = block.find_value(tag)
        if value is not None and value not in ("?", "."):
            return value.strip("'\"")
    return None


def _cif_column(block, tags: tuple[str, ...]) -> tuple[str, list[str]] | None:
    for tag in tags:
        col = block.find_values(tag)
        if len(col):
            return tag, [col[i] for i in range(len(col))]
    return None


def _pdcif_radiation(block, name: str) -> Radiation | None:
    kind = _cif_value(block, ("_diffrn_source_target", "_diffrn_radiation_type", "_diffrn_radiation_source"))
    anode = None
    single_line = False
    if kind:
        m = re.match(r"\s*([A-Z][a-z]?)", kind)
        anode = m.group(1) if m and m.group(1) in ANODES else None
        single_line = bool(re.search(r"(\\a|alpha|a)\s*~?1", kind, re.IGNORECASE))
    lams: np.ndarray = np.array([])
    weights: np.ndarray = np.array([])
    found = _cif_column(block, ("_diffrn_radiation_wavelength",)) or _cif_column(block, ("_pd_proc_wavelength",))
    if found:
        lams, _ = cif_numbers(found[1], found[0], name)
        wt = _cif_column(block, ("_diffrn_radiation_wavelength_wt",))
        weights = cif_numbers(wt[1], wt[0], name)[0] if wt and len(wt[1]) == len(lams) else np.ones(len(lams))
    if anode and (lams.size == 0 or abs(lams[0] - ANODES[anode][0]) < 0.002):
        # "Cu K\a" (or a Kα-mean wavelength) means the doublet; "Cu K\a~1~" a monochromatised Kα1.
        if single_line:
            return radiation_for(wavelength=float(lams[0]) if lams.size else ANODES[anode][0])
        return radiation_for(anode)
    if lams.size == 1:
        return radiation_for(wavelength=float(lams[0]))
    if lams.size > 1:
        order = np.argsort(-weights, kind="stable")
        lams, weights = lams[order], weights[order] / weights[order][0]
        for lam in lams:
            radiation_for(wavelength=float(lam))  # range check
        return Radiation(
            label=f"{lams[0]:.5f} Å",
            wavelengths=lams,
            weights=weights,
            line_names=tuple(f"line{i + 1}" for i in range(lams.size)),
        )
    return None


def _read_pdcif(src: SourceText, radiation: Radiation | None) -> Scan:
    import gemmi

    try:
        doc = gemmi.cif.read_string(src.text)
    except (RuntimeError, ValueError) as exc:
        raise InputError(f"{src.name} is not valid CIF: {' '.join(str(exc).split())}") from None
    for block in doc:
        counts = _cif_column(
            block, ("_pd_meas_counts_total", "_pd_meas_intensity_total", "_pd_proc_intensity_total")
        )
        if counts is None:
            continue
        y, y_su = cif_numbers(counts[1], counts[0], src.name)
        angles = _cif_column(block, ("_pd_meas_2theta_scan", "_pd_proc_2theta_corrected"))
        if angles is not None:
            tt, _ = cif_numbers(angles[1], angles[0], src.name)
        else:
            tt = _pdcif_range(block, y.size, src.name)
        if tt.size != y.size:
            raise InputError(f"{src.name}: {tt.size} 2θ values but {y.size} counts")
        notes: list[str] = []
        rad = choose_radiation(_pdcif_radiation(block, src.name), radiation, src.name, notes)
        sigma = y_su if np.all(np.isfinite(y_su)) else None
        return make_scan(tt, y, sigma, rad, source=src.name, warnings=notes)
    raise InputError(
        f"{src.name} has no powder data block",
        "a powder CIF needs _pd_meas_counts_total or _pd_meas_intensity_total values",
    )


def _pdcif_range(block, n: int, name: str) -> np.ndarray:
    tags = ("_pd_meas_2theta_range_min", "_pd_meas_2theta_range_max", "_pd_meas_2theta_range_inc")
    values = [_cif_value(block, (t,)) for t in tags]
    if any(v is None for v in values):
        raise InputError(
            f"{name} gives counts but no 2θ values",
            "it needs _pd_meas_2theta_scan or _pd_meas_2theta_range_min/_max/_inc",
        )
    lo, hi, inc = (cif_numbers([v], t, name)[0][0] for v, t in zip(values, tags, strict=True))
    if inc <= 0 or hi <= lo:
        raise InputError(f"{name}: 2θ range {lo:g}–{hi:g}° with step {inc:g}° is empty")
    expected = int(round((hi - lo) / inc)) + 1
    if expected != n:
        raise InputError(f"{name}: the 2θ range {lo:g}–{hi:g}° step {inc:g}° has {expected} points but {n} counts")
    return lo + inc * np.arange(n)


#: The readable scan formats, by name; ``load_scan(fmt=...)`` and ``--format`` choose from it.
SCAN_FORMATS: dict[str, ScanFormat] = {
    f.name: f
    for f in (
        ScanFormat("xy", "text columns: 2θ, counts [, uncertainty]", (".xy", ".xye", ".dat", ".txt", ".asc"), _read_xy),
        ScanFormat("csv", "columns with a header line naming 2θ and counts", (".csv", ".tsv"), _read_csv),
        ScanFormat("pdcif", "IUCr powder CIF (pdCIF)", (".cif", ".pcif", ".pdcif"), _read_pdcif),
    )
}


def format_help() -> str:
    """One line listing the formats, for option help texts."""
    return "; ".join(f"{f.name}: {f.description}" for f in SCAN_FORMATS.values())


def guess_format(src: SourceText, path: str | Path) -> str:
    """The format of a text: from its content where it is unmistakable, else its extension."""
    text = src.text
    if re.search(r"^\s*data_", text, re.MULTILINE) and "_pd_" in text:
        return "pdcif"
    suffix = Path(str(path)).suffix.lower()
    for f in SCAN_FORMATS.values():
        if suffix in f.extensions and f.name == "pdcif":
            return "pdcif"
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped or stripped.startswith(("#", "!", ";")):
            continue
        fields = re.split(r"[;,\s]+", stripped)
        numeric = 0
        for field in fields:
            try:
                float(field.replace(",", "."))
                numeric += 1
            except ValueError:
                pass
        return "csv" if numeric == 0 else "xy"
    return "xy"


def load_scan(path: str | Path, *, radiation: Radiation | None = None, fmt: str = "auto") -> Scan:
    """Read a measured scan.

    Parameters
    ----------
    path : str or Path
        The file; ``"-"`` reads standard input.
    radiation : Radiation, optional
        Used when the file does not state its radiation (a file's own statement wins, and a
        different ``radiation`` is noted in ``Scan.warnings``).
    fmt : str
        ``"auto"`` (default: from content and extension) or a name in :data:`SCAN_FORMATS`
        (case-insensitive).

    Returns
    -------
    Scan
        Points sorted by increasing 2θ; corrections noted in ``warnings``.

    Raises
    ------
    InputError
        Unknown format, unreadable, empty, binary or non-UTF-8 file, malformed rows (with their
        line number), no radiation, or data refused by :func:`refdb.scan.validate.make_scan`.
    """
    key = fmt.strip().lower()
    if key != "auto" and key not in SCAN_FORMATS:
        raise InputError(f"unknown scan format {fmt!r}", f"choose auto or one of {', '.join(SCAN_FORMATS)}")
    src = read_source(path)
    if key == "auto":
        key = guess_format(src, path)
    return SCAN_FORMATS[key].read(src, radiation)
