"""``refdb unmix`` (phases and weight fractions of one scan) and ``refdb batch`` (many scans).

``unmix --json`` writes one object (a stable contract): ``phases`` — a list, each with at
least ``entry_id``, ``source_id``, ``name``, ``formula`` and ``weight_fraction`` (0–1, null
when not quantified) — plus ``fit``, ``unexplained_peaks``, ``detection_limits``,
``rejected``, ``parameters``, ``library_stamp`` and ``caution``
(see :func:`refdb.match.mixture.mixture_as_dict`).
"""

from __future__ import annotations

import csv
import io
import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from refdb.cli._common import (
    AnodeOpt,
    JsonOpt,
    WavelengthOpt,
    emit_json,
    err,
    handle_errors,
    out,
    radiation_from_options,
    state,
    warn,
)
from refdb.cli.library_cmds import KindOpt, OnlyOpt, TagOpt, WithOpt, WithoutOpt, open_searchable_lib
from refdb.errors import InputError
from refdb.report.caution import CAUTION

MaxPhasesOpt = Annotated[int, typer.Option("--max-phases", min=1, max=12, help="At most this many phases.")]
QuantOpt = Annotated[
    str, typer.Option("--quant", help="Weight fractions from 'cell' (mass × volume), 'rir' (I/Ic) or 'auto'.")
]
StandardOpt = Annotated[
    str | None,
    typer.Option(
        "--standard",
        metavar="ENTRY_ID:FRACTION",
        help="An internal standard mixed into the specimen, e.g. 12:0.20 for 20 wt % of entry 12; "
        "makes fractions absolute and reports the amorphous/unidentified rest.",
    ),
]
FormatOpt = Annotated[str, typer.Option("--format", help="Scan format name, or auto.")]


def _standard(text: str | None) -> tuple[int, float] | None:
    if not text:
        return None
    try:
        ident, frac = text.split(":", 1)
        value = float(frac.rstrip("%")) / (100.0 if frac.endswith("%") else 1.0)
        return int(ident), value
    except ValueError:
        raise InputError(f"cannot read --standard {text!r}", "write ENTRY_ID:FRACTION, e.g. 12:0.2 or 12:20%") from None


def _filters(require, only, exclude, tag, kind) -> dict:
    """The library's filter options (``--with``, ``--only-from``, ``--without``, ``--tag``,
    ``--kind``) as keyword arguments of :func:`refdb.match.mixture.decompose`."""
    from refdb.chem import split_element_list

    return {
        "elements_required": split_element_list(require),
        "elements_allowed": split_element_list(only) if only else None,
        "elements_excluded": split_element_list(exclude),
        "tags": tuple(tag or ()),
        "kind": kind,
    }


def unmix(
    scan_path: Annotated[str, typer.Argument(metavar="SCAN", help="Scan file ('-' reads standard input).")],
    anode: AnodeOpt = None,
    wavelength: WavelengthOpt = None,
    fmt: FormatOpt = "auto",
    require: WithOpt = None,
    only: OnlyOpt = None,
    exclude: WithoutOpt = None,
    tag: TagOpt = None,
    kind: KindOpt = None,
    max_phases: MaxPhasesOpt = 6,
    quant: QuantOpt = "auto",
    standard: StandardOpt = None,
    report: Annotated[Path | None, typer.Option("--report", help="Write a self-contained HTML report.")] = None,
    plot: Annotated[Path | None, typer.Option("--plot", help="Write the figure (.png, .svg or .pdf).")] = None,
    as_json: JsonOpt = False,
) -> None:
    """Identify the phases of a scan and estimate their weight fractions."""
    from refdb.match.mixture import decompose
    from refdb.scan import load_scan

    from refdb.report.mixture_plot import PLOT_FORMATS

    if plot is not None and plot.suffix.lower() not in PLOT_FORMATS:  # refuse before the long work
        raise InputError(f"cannot write a plot as {plot.name!r}", f"use one of {', '.join(PLOT_FORMATS)}")
    radiation = radiation_from_options(anode, wavelength)
    std = _standard(standard)
    filters = _filters(require, only, exclude, tag, kind)
    scan = load_scan(scan_path, radiation=radiation, fmt=fmt)
    for w in scan.warnings:
        warn(w)
    with open_searchable_lib() as lib:
        result = decompose(scan, lib, max_phases=max_phases, quant_method=quant, standard=std, **filters)
    if report is not None:
        from refdb.report.html import write_mixture_html

        write_mixture_html(result, report)
        err.print(f"Report written to {report}")
    if plot is not None:
        if result.fit is None:
            warn("no phase identified: no plot written")
        else:
            from refdb.report.mixture_plot import save_mixture_plot

            save_mixture_plot(result, plot)
            err.print(f"Plot written to {plot}")
    if as_json:
        emit_json(result.as_dict())
        return
    render_mixture(result)


def _pct(w: float, u: float) -> str:
    if w != w:  # NaN
        return "n/q"
    return f"{100 * w:.1f} ± {100 * u:.1f}" if u == u else f"{100 * w:.1f}"


def render_mixture(result, *, caution: bool = True) -> None:
    q = result.quantification
    if not result.phases:
        out.print("No phase identified.")
    else:
        basis = "crystalline phases" if q is None or q.basis == "crystalline" else "whole specimen"
        table = Table(title=f"{result.scan_source}: phases (wt % of {basis})", title_justify="left")
        for col in ("Phase", "Formula", "Entry", "Source id", "wt %", "Scale", "Shift °2θ", "d-scale", "Evidence"):
            table.add_column(col, justify="right" if col in ("wt %", "Scale", "Shift °2θ", "d-scale", "Entry") else "left")
        for p in result.phases:
            table.add_row(
                p.name + (" (standard)" if p.is_standard else ""), p.formula, str(p.entry_id), p.source_id or "",
                _pct(p.weight_fraction, p.u_weight_fraction), f"{p.scale:.4g}",
                f"{p.zero_shift:+.3f} {p.displacement:+.3f}·cosθ", f"{p.d_scale:.5f}", p.evidence.text,
            )
        out.print(table)
        if q is not None and q.basis == "absolute":
            out.print(f"Amorphous or unidentified: {_pct(q.rest, q.u_rest)} wt %")
        out.print(f"Fit: Rwp {100 * result.rwp:.2f} %, Rexp {100 * result.fit.rexp:.2f} %, GoF {result.gof:.2f}")
    u = result.unexplained
    if len(u):
        t = Table(title="Unexplained peaks", title_justify="left")
        for col in ("2θ °", "d Å", "Height", "σ"):
            t.add_column(col, justify="right")
        for tt, d, h, s in zip(u.two_theta, u.d, u.height, u.significance, strict=True):
            t.add_row(f"{tt:.3f}", f"{d:.4f}", f"{h:.0f}", f"{s:.1f}")
        out.print(t)
    else:
        out.print("Unexplained peaks: none above the noise.")
    for n in result.notes:
        warn(n)
    out.print(f"Library stamp {result.library_stamp}.")
    if caution:
        out.print(CAUTION)


def batch(
    inputs: Annotated[list[str], typer.Argument(metavar="DIR|FILES...", help="Scan files and/or folders of scans.")],
    mode: Annotated[str, typer.Option("--mode", help="'unmix' (phases and fractions) or 'search' (candidates).")] = "unmix",
    summary: Annotated[
        Path | None, typer.Option("--summary", help="Write the summary to this .csv or .json file (default: CSV on stdout).")
    ] = None,
    reports: Annotated[Path | None, typer.Option("--reports", help="Folder for one HTML report per scan (unmix).")] = None,
    workers: Annotated[int, typer.Option("--workers", min=1, max=64, help="Worker processes.")] = 2,
    anode: AnodeOpt = None,
    wavelength: WavelengthOpt = None,
    fmt: FormatOpt = "auto",
    require: WithOpt = None,
    only: OnlyOpt = None,
    exclude: WithoutOpt = None,
    tag: TagOpt = None,
    kind: KindOpt = None,
    max_phases: MaxPhasesOpt = 6,
    quant: QuantOpt = "auto",
    standard: StandardOpt = None,
    top: Annotated[int, typer.Option("--top", min=1, help="Candidates kept per scan in search mode.")] = 5,
    as_json: JsonOpt = False,
) -> None:
    """Run unmix or search on many scans in parallel and write one summary."""
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from refdb.match.batch import BatchOptions, collect_scans, run_batch, summary_rows

    radiation_from_options(anode, wavelength)  # check the options before starting workers
    with open_searchable_lib():  # and that there is something to search
        pass
    paths = collect_scans(inputs)
    options = BatchOptions(
        library_url=state().get("db"), mode=mode.strip().lower(), anode=anode, wavelength=wavelength, fmt=fmt,
        decompose={"max_phases": max_phases, "quant_method": quant, "standard": _standard(standard),
                   **_filters(require, only, exclude, tag, kind)},
        top=top, report_dir=str(reports) if reports else None,
    )
    progress = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                        console=err, disable=not err.is_terminal, transient=False)
    with progress:
        task = progress.add_task(f"{options.mode}", total=len(paths))

        def done(o) -> None:
            progress.advance(task)
            if not o.ok:
                err.print(f"[yellow]Skipped[/] {o.scan}: {o.error}", markup=True, highlight=False)

        outcomes = run_batch(paths, options, workers=workers, on_done=done)
    n_bad = sum(not o.ok for o in outcomes)
    err.print(f"{len(outcomes) - n_bad} of {len(outcomes)} scans analysed" + (f", {n_bad} skipped." if n_bad else "."))
    err.print(CAUTION)
    as_json = as_json or (summary is not None and summary.suffix.lower() == ".json")
    if as_json:
        data = [{"scan": o.scan, "status": "ok" if o.ok else "error", "error": o.error or None,
                 "report": o.report, "result": o.result} for o in outcomes]
        emit_json(data, summary)
        return
    rows = summary_rows(outcomes)
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(rows[0]), lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    if summary is None:
        sys.stdout.write(buf.getvalue())
    else:
        try:
            summary.write_text(buf.getvalue(), encoding="utf-8")
        except OSError as exc:
            raise InputError(f"cannot write {summary}: {exc.strerror}") from None
        err.print(f"Summary written to {summary}")


def register(app: typer.Typer) -> None:
    """Add ``unmix`` and ``batch`` to the application."""
    app.command(name="unmix")(handle_errors(unmix))
    app.command(name="batch")(handle_errors(batch))
