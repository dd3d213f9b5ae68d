"""``refdb search``: rank library entries against a scan (or a peak table).

``search --json`` writes one object (a stable contract): ``candidates`` — a list, best first,
each with at least ``entry_id``, ``source_id`` (database code, else the imported file's
stem), ``name``, ``formula``, ``space_group``, ``score`` (0–100) and ``components`` (see
:mod:`refdb.match.score`), plus the fitted ``zero_shift``, ``displacement`` and ``d_scale``,
``n_matched``, ``n_expected``, ``matched`` pairs and ``equivalents`` — and ``source``,
``n_considered``, ``n_entries``, ``filters``, ``radiation``, ``two_theta_range``,
``d_range``, ``n_peaks``, ``profile_checked``, ``n_tied`` (leading candidates the data
cannot tell apart, see :func:`refdb.match.search.tied_leaders`), ``library_stamp``, ``notes``
and ``caution``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from refdb.cli._common import AnodeOpt, JsonOpt, WavelengthOpt, emit_json, handle_errors, out, warn
from refdb.cli.library_cmds import KindOpt, OnlyOpt, TagOpt, WithOpt, WithoutOpt, open_searchable_lib
from refdb.cli.scan_cmds import FormatOpt, PeakTableOpt, PositionsOpt, ScanArg, measurement_from_options
from refdb.chem import split_tokens
from refdb.errors import InputError
from refdb.report.caution import CAUTION_SHORT
from refdb.scan import SCAN_FORMATS, Scan, find_peaks


def search_command(
    scan_path: ScanArg,
    anode: AnodeOpt = None,
    wavelength: WavelengthOpt = None,
    fmt: FormatOpt = "auto",
    peak_table: PeakTableOpt = False,
    positions: PositionsOpt = None,
    with_: WithOpt = None,
    only_from: OnlyOpt = None,
    without: WithoutOpt = None,
    tag: TagOpt = None,
    kind: KindOpt = None,
    top: Annotated[int, typer.Option("--top", min=1, max=500, help="Number of candidates to show.")] = 10,
    fixed_cell: Annotated[
        bool, typer.Option("--fixed-cell", help="Do not fit a d-scale (±2 %) for doped or strained phases.")
    ] = False,
    no_profile: Annotated[
        bool, typer.Option("--no-profile", help="Skip the whole-profile check of the leading candidates.")
    ] = False,
    min_significance: Annotated[
        float, typer.Option("--min-significance", help="Peak-search threshold in standard deviations.")
    ] = 3.5,
    plot: Annotated[
        Path | None,
        typer.Option("--plot", help="Draw the scan with the leading candidates' lines to a .png, .svg or .pdf file."),
    ] = None,
    plot_count: Annotated[int, typer.Option("--plot-count", min=1, max=8, help="Candidates drawn in the plot.")] = 3,
    as_json: JsonOpt = False,
) -> None:
    """Rank reference entries by how well they explain the peaks of a scan or peak table."""
    key = fmt.strip().lower()
    if key != "auto" and key not in SCAN_FORMATS:
        raise typer.BadParameter(f"choose auto or one of {', '.join(SCAN_FORMATS)}", param_hint="--format")
    from refdb.match.search import make_filters

    # Check options before the slow work: filters, plot file.
    filters = make_filters(
        elements_required=split_tokens(with_),
        elements_allowed=split_tokens(only_from) if only_from is not None else None,
        elements_excluded=split_tokens(without), tags=tag or (), kind=kind,
    )
    if plot is not None:
        from refdb.report.search_plot import check_plot_path

        check_plot_path(plot)
    from refdb.match.index import load_index
    from refdb.match.search import search

    with open_searchable_lib() as lib:  # a missing or empty library is reported before the slow work
        peaks, scan, background = _observed_peaks(
            scan_path, anode, wavelength, key, peak_table, positions, min_significance, plot
        )
        index = load_index(lib)
        result = search(
            peaks, index, scan=scan, background=background, elements_required=filters.elements_required,
            elements_allowed=filters.elements_allowed, elements_excluded=filters.elements_excluded,
            tags=filters.tags, kind=filters.kind, top=top,
            d_scale=not fixed_cell, profile_check=not no_profile,
        )
        stamp = index.stamp
    if plot is not None and scan is not None:
        from refdb.report.search_plot import plot_search

        plot_search(scan, peaks, result, plot, count=plot_count, background=background)
    if as_json:
        doc = {"source": peaks.source, **result.to_dict(), "library_stamp": stamp, "caution": CAUTION_SHORT}
        emit_json(doc)
        return
    for note in result.notes:
        warn(note)
    out.print(candidates_table(result, peaks.source))
    out.print(CAUTION_SHORT)


def _observed_peaks(scan_path, anode, wavelength, key, peak_table, positions, min_significance, plot):
    """(peaks, scan or None, background or None) from a scan file or a peak table."""
    data = measurement_from_options(scan_path, anode, wavelength, key, peak_table, positions)
    scan, background = None, None
    if isinstance(data, Scan):
        for note in data.warnings:
            warn(note)
        found = find_peaks(data, min_significance=min_significance)
        for note in found.warnings[len(data.warnings):]:
            warn(note)
        peaks, scan, background = found.peaks, data, found.background
    else:
        peaks = data
        if plot is not None:
            raise InputError("--plot needs a scan, not a peak table")
    if len(peaks) == 0:
        raise InputError("no peaks were found in the scan", "check the file, or lower --min-significance")
    return peaks, scan, background


def candidates_table(result, source: str) -> Table:
    title = (
        f"Candidates for {source} — {result.n_peaks} peaks, {result.radiation.describe()}, "
        f"{result.n_considered} of {result.n_entries} entries considered"
    )
    t = Table(title=title, title_justify="left", caption=_caption(result), caption_justify="left")
    for name, just in (
        ("#", "right"), ("entry", "right"), ("source id", "left"), ("name", "left"), ("formula", "left"),
        ("space group", "left"), ("score", "right"), ("found", "right"), ("explained", "right"),
        ("position", "right"), ("intensity", "right"), ("profile", "right"), ("lines", "right"),
        ("Δ2θ₀ °", "right"), ("disp. °", "right"), ("d-scale %", "right"),
    ):
        wrap = name in ("name", "formula")
        t.add_column(name, justify=just, overflow="fold" if wrap else "ellipsis", no_wrap=not wrap,
                     max_width=28 if wrap else None, min_width=14 if name == "name" else None)
    for k, c in enumerate(result.candidates, start=1):
        comp = c.components
        name = c.name + (f" (+{len(c.equivalents)} equivalent)" if c.equivalents else "")
        t.add_row(
            f"{k}=" if result.n_tied > 1 and k <= result.n_tied else str(k),
            str(c.entry_id), c.source_id, name, c.formula, c.space_group or "",
            f"{c.score:.1f}", f"{comp.expected_found:.2f}", f"{comp.observed_explained:.2f}",
            f"{comp.position:.2f}", f"{comp.intensity_agreement:.2f}",
            "" if comp.profile_correlation is None else f"{comp.profile_correlation:.2f}",
            f"{c.n_matched}/{c.n_expected}", f"{c.zero_shift:+.3f}", f"{c.displacement:+.3f}",
            f"{100 * c.d_scale:+.2f}",
        )
    return t


def _caption(result) -> str:
    return (
        "found: share of the expected line intensity observed; explained: share of the observed "
        "intensity the entry accounts for; lines: matched/expected; profile: correlation with the "
        "net scan (leading candidates); #: '=' marks leading candidates the data cannot tell apart."
    )


def register(app: typer.Typer) -> None:
    """Add ``refdb search`` to the application."""
    app.command(name="search")(handle_errors(search_command))
