"""``refdb peaks``: read a scan, find and fit its peaks, show them.

The input options (:data:`FormatOpt`, :data:`PeakTableOpt`, :data:`PositionsOpt`) and
:func:`measurement_from_options` are shared with the commands that take a scan or a peak table.
"""

from __future__ import annotations

import csv
import io
import sys
from pathlib import Path
from typing import Annotated

import numpy as np
import typer
from rich.table import Table

from refdb.cli._common import (
    AnodeOpt,
    CsvOpt,
    JsonOpt,
    WavelengthOpt,
    emit_json,
    finite_or_none,
    handle_errors,
    out,
    radiation_from_options,
    warn,
)
from refdb.errors import InputError
from refdb.scan import BACKGROUND_METHODS, SCAN_FORMATS, InternalStandard, PeakList, PeakSearch, Scan
from refdb.scan import find_peaks, load_measurement
from refdb.scan.readers import format_help

FormatOpt = Annotated[
    str,
    typer.Option("--format", help=f"Scan format: auto, or {format_help()}.", show_default=True),
]
PeakTableOpt = Annotated[
    bool,
    typer.Option("--peak-table", help="The input is a table of peak positions and intensities, not a scan."),
]
PositionsOpt = Annotated[
    str | None,
    typer.Option("--positions", help="Peak table's first column when it has no header: d or two_theta."),
]
ScanArg = Annotated[str, typer.Argument(help="Scan file ('-' reads standard input).", show_default=False)]


def measurement_from_options(
    path: str, anode: str | None, wavelength: float | None, fmt: str, peak_table: bool, positions: str | None
) -> Scan | PeakList:
    """Read the scan or peak table a command was given, with its radiation options."""
    radiation = radiation_from_options(anode, wavelength)
    return load_measurement(path, radiation=radiation, fmt=fmt, peak_table=peak_table, positions=positions)


#: Per-peak fields of the JSON and CSV output, in order (a stable contract).
PEAK_FIELDS = (
    "two_theta", "d", "height", "area", "fwhm", "eta",
    "u_two_theta", "u_d", "u_height", "u_area", "u_fwhm", "significance",
)


def peak_rows(peaks: PeakList) -> list[dict[str, float | None]]:
    """One dict per peak with :data:`PEAK_FIELDS` (unknown values are None)."""
    # u(d) = d · cot θ · u(θ), with u(θ) = u(2θ)/2 in radians (first-order propagation).
    half = np.radians(peaks.two_theta) / 2.0
    with np.errstate(divide="ignore", invalid="ignore"):
        u_d = peaks.d / np.tan(half) * np.radians(peaks.u_two_theta) / 2.0
    columns = {
        "two_theta": peaks.two_theta, "d": peaks.d, "height": peaks.height, "area": peaks.area,
        "fwhm": peaks.fwhm, "eta": peaks.eta, "u_two_theta": peaks.u_two_theta, "u_d": u_d,
        "u_height": peaks.u_height, "u_area": peaks.u_area, "u_fwhm": peaks.u_fwhm,
        "significance": peaks.significance,
    }
    return [{k: finite_or_none(columns[k][i]) for k in PEAK_FIELDS} for i in range(len(peaks))]


def _standard(d_text: str | None, tt_text: str | None, name: str, scan: Scan) -> InternalStandard | None:
    if d_text is None and tt_text is None:
        return None
    if d_text is not None and tt_text is not None:
        raise InputError("give --standard-d or --standard-two-theta, not both")
    text = d_text if d_text is not None else tt_text
    try:
        values = np.array([float(v) for v in text.replace(";", ",").split(",") if v.strip()])
    except ValueError:
        raise InputError(f"standard positions {text!r} are not comma-separated numbers") from None
    if values.size == 0:
        raise InputError("no standard positions given")
    if d_text is not None:
        return InternalStandard.from_d(values, scan.radiation, name=name)
    if np.any((values <= 0) | (values >= 180)):
        raise InputError("standard 2θ positions must lie within (0°, 180°)")
    return InternalStandard(two_theta=np.sort(values), name=name)


def _fmt(value: float | None, digits: int, u: float | None = None) -> str:
    """A number, with its uncertainty in the last digits in parentheses (IUCr style) when known."""
    if value is None:
        return "–"
    if u is None or u <= 0:
        return f"{value:.{digits}f}"
    # Two significant digits of the uncertainty decide the decimals shown (at most 6).
    decimals = int(min(6, max(0, 1 - np.floor(np.log10(u)))))
    return f"{value:.{decimals}f}({round(u * 10**decimals):d})"


def _table(peaks: PeakList, title: str) -> Table:
    table = Table(title=title, title_justify="left", caption="height in counts, area in counts·°, "
                  "significance = height / u(height); (n) = standard uncertainty in the last digits",
                  caption_justify="left")
    for name in ("#", "2θ (°)", "d (Å)", "height", "area", "FWHM (°)", "η", "signif."):
        table.add_column(name, justify="right", no_wrap=True)
    for i, row in enumerate(peak_rows(peaks), start=1):
        table.add_row(
            str(i),
            _fmt(row["two_theta"], 4, row["u_two_theta"]),
            _fmt(row["d"], 5),
            _fmt(row["height"], 0),
            _fmt(row["area"], 2, row["u_area"]),
            _fmt(row["fwhm"], 4),
            _fmt(row["eta"], 2),
            _fmt(row["significance"], 1),
        )
    return table


def _write_csv(peaks: PeakList) -> None:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=PEAK_FIELDS, lineterminator="\n")
    writer.writeheader()
    for row in peak_rows(peaks):
        writer.writerow({k: "" if v is None else repr(float(v)) for k, v in row.items()})
    sys.stdout.write(buffer.getvalue())


def peaks_command(
    scan_path: ScanArg,
    anode: AnodeOpt = None,
    wavelength: WavelengthOpt = None,
    fmt: FormatOpt = "auto",
    peak_table: PeakTableOpt = False,
    positions: PositionsOpt = None,
    background: Annotated[
        str, typer.Option("--background", help=f"Background method: {', '.join(BACKGROUND_METHODS)}.")
    ] = "snip",
    min_significance: Annotated[
        float,
        typer.Option("--min-significance", help="Smallest peak height, in standard deviations, to report."),
    ] = 3.5,
    kalpha2: Annotated[
        bool, typer.Option("--kalpha2/--no-kalpha2", help="Fit the Kα2 line with each peak.")
    ] = True,
    standard_d: Annotated[
        str | None,
        typer.Option("--standard-d", help="Internal standard d-spacings in Å, comma-separated: fit zero "
                     "shift and sample displacement and correct the peaks."),
    ] = None,
    standard_two_theta: Annotated[
        str | None, typer.Option("--standard-two-theta", help="Internal standard Kα1 positions in ° 2θ, comma-separated.")
    ] = None,
    standard_name: Annotated[str, typer.Option("--standard-name", help="Name of the internal standard.")] = "internal standard",
    plot: Annotated[
        Path | None, typer.Option("--plot", help="Draw counts, background, fit and peaks to a .png, .svg or .pdf file.")
    ] = None,
    as_json: JsonOpt = False,
    as_csv: CsvOpt = False,
) -> None:
    """Find the peaks of a scan: positions (Kα1), d-spacings, heights, areas and widths."""
    if as_json and as_csv:
        raise InputError("give --json or --csv, not both")
    key = fmt.strip().lower()
    if key != "auto" and key not in SCAN_FORMATS:
        raise typer.BadParameter(f"choose auto or one of {', '.join(SCAN_FORMATS)}", param_hint="--format")
    data = measurement_from_options(scan_path, anode, wavelength, key, peak_table, positions)
    result: PeakSearch | None = None
    if isinstance(data, Scan):
        for note in data.warnings:
            warn(note)
        standard = _standard(standard_d, standard_two_theta, standard_name, data)
        result = find_peaks(
            data, background=background, min_significance=min_significance, alpha2=kalpha2,
            internal_standard=standard,
        )
        peaks = result.peaks
        for note in result.warnings[len(data.warnings):]:
            warn(note)
        if plot is not None:
            from refdb.report.peaks_plot import plot_peak_search

            plot_peak_search(data, result, plot)
    else:
        peaks = data
        if plot is not None or standard_d or standard_two_theta:
            raise InputError("--plot and internal standards need a scan, not a peak table")
    if as_json:
        emit_json(_json(peaks, result))
    elif as_csv:
        _write_csv(peaks)
    else:
        title = f"{len(peaks)} peaks in {peaks.source} ({peaks.radiation.describe()})"
        out.print(_table(peaks, title))
        if result is not None and result.standard is not None:
            c = result.standard
            out.print(
                f"{c.name}: {c.matched_peaks.size} lines matched; zero shift {c.zero_shift:+.4f}°, "
                f"displacement {c.displacement:+.4f}° (× cos θ); rms {c.rms_before:.4f}° → {c.rms_after:.4f}°"
            )


def _json(peaks: PeakList, result: PeakSearch | None) -> dict:
    return {
        "source": peaks.source,
        "radiation": peaks.radiation.to_dict(),
        "two_theta_range": list(peaks.two_theta_range),
        "parameters": result.parameters if result is not None else None,
        "n_groups": result.n_groups if result is not None else None,
        "groups_converged": int(result.converged.sum()) if result is not None else None,
        "standard": result.standard.to_dict() if result is not None and result.standard is not None else None,
        "warnings": list(result.warnings) if result is not None else [],
        "peaks": peak_rows(peaks),
    }


def register(app: typer.Typer) -> None:
    """Add ``refdb peaks`` to the application."""
    app.command(name="peaks")(handle_errors(peaks_command))
