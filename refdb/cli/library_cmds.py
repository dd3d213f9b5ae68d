"""Library commands: init, list, show, remove, tag, export, load, stats, add cif|measured."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table

from refdb.chem import split_element_list
from refdb.cli._common import JsonOpt, emit_json, err, fail, finite_or_none, handle_errors, out, state
from refdb.errors import InputError
from refdb.records import KINDS

WithOpt = Annotated[str | None, typer.Option("--with", help="Elements every entry must contain, e.g. Fe,O.")]
WithoutOpt = Annotated[str | None, typer.Option("--without", help="Elements no entry may contain.")]
OnlyOpt = Annotated[
    str | None, typer.Option("--only-from", help="Entries made only of these elements, e.g. Fe,O,H,Cl.")
]
TagOpt = Annotated[list[str] | None, typer.Option("--tag", help="Only entries with this tag (repeatable).")]
KindOpt = Annotated[str | None, typer.Option("--kind", help="computed or measured.")]


def open_lib(*, create: bool = False, upgrade: bool = False):
    """Open the library named by --db / REFDB_DATABASE / the default location."""
    from refdb.library import open_library

    return open_library(state().get("db"), create=create, upgrade=upgrade)


def open_searchable_lib():
    """Open the library for search or decomposition: it must hold at least one entry."""
    from refdb.errors import LibraryError

    lib = open_lib()
    if lib.count() == 0:
        lib.close()
        raise LibraryError(
            f"the library {lib.display} has no entries",
            "add references with: refdb add cif FOLDER; refdb demo shows a seed library at work",
        )
    return lib


def _check_kind(kind: str | None) -> str | None:
    if kind is not None and kind not in KINDS:
        raise InputError(f"unknown kind {kind!r}", f"use one of {', '.join(KINDS)}")
    return kind


def init() -> None:
    """Create the library, or upgrade an older one to this version's schema."""
    with open_lib(create=True, upgrade=True) as lib:
        n = lib.count()
        before, head = lib.schema_change or (None, "")
        if before is None:
            err.print(f"Created library at {lib.display} (schema {head}).")
        elif before != head:
            err.print(f"Upgraded library at {lib.display} from schema {before} to {head}; {n} entries kept.")
        else:
            err.print(f"Library at {lib.display} is up to date (schema {head}, {n} entries).")


def list_entries(
    text: Annotated[str | None, typer.Argument(help="Text to find in name, mineral name or formula.")] = None,
    with_: WithOpt = None,
    without: WithoutOpt = None,
    only_from: OnlyOpt = None,
    tag: TagOpt = None,
    kind: KindOpt = None,
    limit: Annotated[int | None, typer.Option("--limit", min=1, help="Show at most this many.")] = None,
    json_: JsonOpt = False,
) -> None:
    """List library entries, optionally filtered by elements, text, tag and kind."""
    with open_lib() as lib:
        rows = lib.list(
            elements_required=split_element_list(with_),
            elements_excluded=split_element_list(without),
            elements_allowed=split_element_list(only_from) if only_from else None,
            text=text,
            tags=tag or (),
            kind=_check_kind(kind),
            limit=limit,
        )
    if json_:
        emit_json(
            [
                {
                    "entry_id": r.id,
                    "kind": r.kind,
                    "name": r.name,
                    "mineral_name": r.mineral_name,
                    "formula": r.formula_reduced,
                    "space_group": r.space_group,
                    "sg_number": r.sg_number,
                    "source": r.source,
                    "source_id": r.source_id,
                    "lines": r.n_lines,
                    "tags": list(r.tags),
                }
                for r in rows
            ]
        )
        return
    table = Table(title=f"{len(rows)} entr{'y' if len(rows) == 1 else 'ies'}", title_justify="left")
    table.add_column("id", justify="right", no_wrap=True)
    table.add_column("kind", no_wrap=True)
    table.add_column("name", max_width=30, no_wrap=True, overflow="ellipsis")
    table.add_column("formula", max_width=24, no_wrap=True, overflow="ellipsis")
    table.add_column("space group", no_wrap=True)
    table.add_column("source id", max_width=18, no_wrap=True, overflow="ellipsis")
    table.add_column("lines", justify="right", no_wrap=True)
    table.add_column("tags", max_width=20, overflow="ellipsis")
    for r in rows:
        name = r.mineral_name or r.name
        table.add_row(
            str(r.id), r.kind, name, r.formula_reduced, r.space_group or "",
            r.source_id or "", str(r.n_lines), " ".join(r.tags),
        )
    out.print(table)


def show(
    entry_id: Annotated[int, typer.Argument(help="Entry id (see refdb list).")],
    lines: Annotated[int, typer.Option("--lines", help="How many of the strongest lines to show.")] = 15,
    json_: JsonOpt = False,
) -> None:
    """Show one entry: provenance, cell, and its lines."""
    from refdb.library.transfer import entry_to_json

    with open_lib() as lib:
        e = lib.get(entry_id)
    if json_:
        obj = {"entry_id": e.id, **entry_to_json(e)}
        obj["source_id"] = e.display_source_id
        emit_json(obj)
        return
    t = Table(show_header=False, box=None, pad_edge=False)
    t.add_column(style="bold")
    t.add_column()
    cell = "" if e.cell is None else "  ".join(f"{x:.5g}" for x in e.cell)
    for k, v in (
        ("entry", f"{e.id} ({e.kind})"),
        ("name", e.name),
        ("mineral", e.mineral_name or ""),
        ("formula", f"{e.formula}  →  {e.formula_reduced}"),
        ("elements", " ".join(e.elements)),
        ("space group", f"{e.space_group or ''} ({e.sg_number})" if e.sg_number else (e.space_group or "")),
        ("cell a b c α β γ", cell),
        ("volume, Z", f"{e.volume:.4g} Å³, Z = {e.z:g}" if e.volume and e.z else ""),
        ("density", f"{e.density:.4g} g/cm³" if e.density else ""),
        ("RIR (I/Ic)", f"{e.rir:.3g}" if e.rir else ""),
        ("wavelength", f"{e.wavelength:.6f} Å" if e.wavelength else ""),
        ("source", f"{e.source} {e.display_source_id}"),
        ("DOI", e.doi or ""),
        ("citation", e.citation or ""),
        ("licence", e.licence or "(none stated)"),
        ("file", e.file_name or ""),
        ("tags", " ".join(e.tags)),
        ("notes", e.notes),
        ("added", e.created.isoformat(timespec="seconds") + " UTC"),
    ):
        if v:
            t.add_row(k, str(v))
    out.print(t)
    _print_lines(e, lines)


def _print_lines(e, n: int) -> None:
    """The ``n`` strongest lines of an entry: computed entries for Cu Kα1, measured ones as
    measured."""
    import numpy as np

    L = e.lines
    tt = None
    if e.kind == "computed" and L.f2 is not None:
        from refdb.radiation import radiation_for
        from refdb.structure import stick_pattern

        sticks = stick_pattern(L, radiation_for("Cu", alpha2=False), two_theta_range=(0.0, 180.0))
        # Lines too short in d for Cu (d < λ/2) cannot be observed with it: intensity 0, no 2θ.
        rel = np.zeros(len(L))
        rel[sticks.line_index] = sticks.intensity
        tt = np.full(len(L), np.nan)
        tt[sticks.line_index] = sticks.two_theta
        label = "I (Cu Kα1, computed)"
    else:
        raw = L.intensity if L.intensity is not None else np.zeros(len(L))
        rel = raw * (100.0 / raw.max()) if raw.size and raw.max() > 0 else raw
        label = f"I (measured, λ = {e.wavelength:.4f} Å)" if e.wavelength else "I"
    order = np.argsort(-rel, kind="stable")[:n]
    order = order[np.argsort(-L.d[order], kind="stable")]
    table = Table(title=f"{min(n, len(L))} strongest of {len(L)} lines", title_justify="left")
    table.add_column("d (Å)", justify="right")
    if tt is not None:
        table.add_column("2θ Cu (°)", justify="right")
    table.add_column("h k l", justify="right")
    table.add_column("m", justify="right")
    table.add_column(label, justify="right")
    for i in order:
        row = [f"{L.d[i]:.5f}"]
        if tt is not None:
            row.append("" if not np.isfinite(tt[i]) else f"{tt[i]:.3f}")
        row.append("" if L.hkl is None else " ".join(str(int(x)) for x in L.hkl[i]))
        row.append("" if L.multiplicity is None else str(int(L.multiplicity[i])))
        row.append(f"{rel[i]:.1f}")
        table.add_row(*row)
    out.print(table)


def remove(
    entry_ids: Annotated[list[int], typer.Argument(help="Entry ids to delete.")],
) -> None:
    """Delete entries (with their reflections) from the library."""
    with open_lib() as lib:
        for eid in entry_ids:
            e = lib.remove(eid)
            err.print(f"Removed entry {eid}: {e.name} ({e.formula_reduced}).")


def tag(
    entry_id: Annotated[int, typer.Argument(help="Entry id.")],
    tags: Annotated[list[str] | None, typer.Argument(help="Tags to add.")] = None,
    drop: Annotated[list[str] | None, typer.Option("--drop", help="A tag to take off (repeatable).")] = None,
    json_: JsonOpt = False,
) -> None:
    """Add tags to an entry (and take others off with --drop)."""
    with open_lib() as lib:
        now = lib.set_tags(entry_id, add=tags or (), remove=drop or ())
    if json_:
        emit_json({"entry_id": entry_id, "tags": list(now)})
    else:
        out.print(f"{entry_id}: {' '.join(now) if now else '(no tags)'}")


def export(
    output: Annotated[Path | None, typer.Option("--output", "-o", help="Write to this file instead of stdout.")] = None,
) -> None:
    """Write the whole library as JSON lines (lossless; read back with refdb load)."""
    from refdb.library.transfer import export_library

    with open_lib() as lib:
        if output is None:
            n = export_library(lib, sys.stdout)
        else:
            tmp = output.with_name(output.name + ".part")
            try:
                with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
                    n = export_library(lib, fh)
                tmp.replace(output)
            except OSError as exc:
                tmp.unlink(missing_ok=True)
                fail(f"cannot write {output}: {exc.strerror}")
    err.print(f"Exported {n} entries.")


def load(
    source: Annotated[str, typer.Argument(help="An export file (refdb export), or - for stdin.")],
) -> None:
    """Add the entries of an export file to the library (existing ones are kept)."""
    from refdb.library.transfer import load_export

    with open_lib() as lib:
        if source == "-":
            added, present = load_export(lib, sys.stdin, source="<stdin>")
        else:
            path = Path(source)
            if not path.is_file():
                raise InputError(f"no such file: {source}")
            try:
                with open(path, encoding="utf-8") as fh:
                    added, present = load_export(lib, fh, source=path.name)
            except UnicodeDecodeError:
                raise InputError(f"{path.name} is not UTF-8 text", "give a file written by refdb export") from None
    err.print(f"Loaded {added} new entries; {present} were already present.")


def stats(json_: JsonOpt = False) -> None:
    """Counts by kind, source and licence, and the library's stamp."""
    with open_lib() as lib:
        s = lib.stats()
    if json_:
        emit_json(
            {
                "location": s.location,
                "schema_revision": s.schema_revision,
                "entries": s.entries,
                "reflections": s.reflections,
                "by_kind": s.by_kind,
                "by_source": s.by_source,
                "by_licence": s.by_licence,
                "stamp": s.stamp,
            }
        )
        return
    out.print(f"Library {s.location}  (schema {s.schema_revision})")
    out.print(f"{s.entries} entries, {s.reflections} reflections; stamp [bold]{s.stamp}[/]")
    for title, data in (("kind", s.by_kind), ("source", s.by_source), ("licence", s.by_licence)):
        t = Table(title=f"by {title}", title_justify="left")
        t.add_column(title)
        t.add_column("entries", justify="right")
        for k, v in data.items():
            t.add_row(str(k), str(v))
        out.print(t)


# -- add ------------------------------------------------------------------------------------
add_app = typer.Typer(help="Add references to the library: computed from CIFs, or measured peak lists.", no_args_is_help=True)


def add_cif(
    paths: Annotated[list[Path], typer.Argument(help="CIF files and folders (searched recursively).")],
    d_min: Annotated[float, typer.Option("--d-min", help="Smallest d-spacing (Å) to compute.")] = 0.7,
    tag_: Annotated[list[str] | None, typer.Option("--tag", help="Tag every new entry (repeatable).")] = None,
    workers: Annotated[int | None, typer.Option("--workers", min=1, help="Worker processes (default: 2 for large imports).")] = None,
    json_: JsonOpt = False,
) -> None:
    """Import crystal structures: compute each pattern and store it with its provenance."""
    from refdb.library.ingest import collect_cif_files, import_cifs

    if not (0.3 <= d_min <= 5.0):
        raise InputError(f"--d-min {d_min} is outside 0.3–5 Å")
    with open_lib(create=True) as lib:
        total = len(collect_cif_files(paths))
        show_bar = err.is_terminal and not json_
        with Progress(
            TextColumn("[progress.description]{task.description}"), BarColumn(), MofNCompleteColumn(),
            TimeRemainingColumn(), console=err, disable=not show_bar, transient=True,
        ) as bar:
            task = bar.add_task("importing", total=total)
            report = import_cifs(
                lib, paths, d_min=d_min, tags=tag_ or (), workers=workers,
                progress=lambda done, _t, name: bar.update(task, completed=done, description=name[:30]),
            )
    if json_:
        emit_json(
            {
                "imported": [{"file": f, "entry_id": i} for f, i in report.imported],
                "already_present": [{"file": f, "entry_id": i} for f, i in report.present],
                "failed": [{"file": f, "reason": r} for f, r in report.failed],
            }
        )
    else:
        for f, reason in report.failed:
            err.print(f"[red]failed[/] {Path(f).name}: {reason}")
        err.print(
            f"Imported {len(report.imported)}, already present {len(report.present)}, "
            f"failed {len(report.failed)} (of {report.total} files)."
        )
    if report.failed and not report.imported and not report.present:
        raise typer.Exit(1)


def add_measured(
    peak_file: Annotated[Path, typer.Argument(help="Peak list: d (Å) or 2θ (°) with intensity, one line per peak.")],
    name: Annotated[str, typer.Option("--name", help="Name of the phase.")],
    formula: Annotated[str, typer.Option("--formula", help="Chemical formula, e.g. Fe3O4.")],
    source: Annotated[str, typer.Option("--source", help="Where it was measured (lab, sample id).")] = "in-house",
    anode: Annotated[str | None, typer.Option("--anode", help="Anode the peaks were measured with (Cu, Co, …).")] = None,
    wavelength: Annotated[float | None, typer.Option("--wavelength", help="Wavelength in Å instead of an anode.")] = None,
    positions: Annotated[
        str | None, typer.Option("--positions", help="What the first column holds: d or two_theta (else from a header line).")
    ] = None,
    rir: Annotated[float | None, typer.Option("--rir", help="Measured I/Ic (corundum = 1), if known.")] = None,
    licence: Annotated[str | None, typer.Option("--licence", help="Licence of the data.")] = None,
    tag_: Annotated[list[str] | None, typer.Option("--tag", help="Tag (repeatable).")] = None,
    json_: JsonOpt = False,
) -> None:
    """Store a measured reference (a standard run on your own instrument) from its peak list."""
    from refdb.library.ingest import measured_reference
    from refdb.radiation import radiation_for
    from refdb.scan import load_peak_table

    if anode is None and wavelength is None:
        raise InputError("say which radiation the peaks were measured with", "add --anode Cu or --wavelength 1.5406")
    radiation = radiation_for(anode, wavelength=wavelength)
    peaks = load_peak_table(peak_file, radiation=radiation, positions=positions)
    data = measured_reference(
        peaks.d, peaks.relative_intensity, wavelength=peaks.radiation.wavelength, name=name,
        formula=formula, source=source, source_id=peak_file.stem, file_name=peak_file.name,
        licence=licence, rir=rir, tags=tag_ or (),
    )
    with open_lib(create=True) as lib:
        res = lib.add(data)
    if json_:
        emit_json({"entry_id": res.entry_id, "created": res.created, "lines": len(data.lines), "rir": finite_or_none(rir)})
    elif res.created:
        err.print(f"Added measured reference {res.entry_id}: {name} ({data.formula_reduced}), {len(data.lines)} lines.")
    else:
        err.print(f"Already present as entry {res.entry_id}.")


def register(app: typer.Typer) -> None:
    app.command(name="init")(handle_errors(init))
    app.command(name="list")(handle_errors(list_entries))
    app.command(name="show")(handle_errors(show))
    app.command(name="remove")(handle_errors(remove))
    app.command(name="tag")(handle_errors(tag))
    app.command(name="export")(handle_errors(export))
    app.command(name="load")(handle_errors(load))
    app.command(name="stats")(handle_errors(stats))
    add_app.command(name="cif")(handle_errors(add_cif))
    add_app.command(name="measured")(handle_errors(add_measured))
    app.add_typer(add_app, name="add")
