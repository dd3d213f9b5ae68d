"""``refdb simulate``: the powder pattern of a crystal structure (CIF) for an anode."""

from __future__ import annotations

import csv
import sys
from dataclasses import replace
from pathlib import Path
from typing import Annotated

import numpy as np
import typer
from rich.table import Table

from refdb.cli._common import AnodeOpt, CsvOpt, JsonOpt, WavelengthOpt, emit_json, err, handle_errors, out, warn
from refdb.errors import InputError
from refdb.radiation import radiation_for
from refdb.records import ReferenceData
from refdb.structure import Sticks, compute_reflections, read_crystal, reference_from_crystal, stick_pattern


def simulate(
    cif: Annotated[Path, typer.Argument(help="Crystal structure file (CIF).", show_default=False)],
    anode: AnodeOpt = None,
    wavelength: WavelengthOpt = None,
    two_theta_range: Annotated[
        tuple[float, float], typer.Option("--range", help="First and last 2θ in degrees.")
    ] = (5.0, 90.0),
    d_min: Annotated[float, typer.Option("--d-min", help="Shortest d-spacing computed, Å.")] = 0.7,
    anomalous: Annotated[
        bool, typer.Option("--anomalous", help="Include f′ and f″ of each element at the Kα1 energy.")
    ] = False,
    monochromator: Annotated[
        float | None,
        typer.Option(
            "--monochromator",
            help="2θ of a diffracted-beam monochromator in degrees (graphite 002 with Cu: 26.6).",
        ),
    ] = None,
    csv_out: CsvOpt = False,
    json_out: JsonOpt = False,
    plot: Annotated[
        Path | None, typer.Option("--plot", help="Also draw the pattern (Kα doublet and sticks) to a PNG file.")
    ] = None,
) -> None:
    """Compute the powder pattern of a crystal structure: 2θ, d, hkl, multiplicity, intensity."""
    if csv_out and json_out:
        raise InputError("choose one of --csv and --json")
    radiation = radiation_for(
        anode if anode or wavelength is not None else "Cu", wavelength=wavelength, monochromator_two_theta=monochromator
    )
    crystal = read_crystal(cif)
    for w in crystal.warnings:
        warn(w)
    reference = reference_from_crystal(crystal, d_min=d_min)
    if anomalous:
        lines = compute_reflections(crystal, d_min=d_min, anomalous_radiation=radiation)
        reference = replace(reference, lines=lines)
    sticks = stick_pattern(reference, radiation, two_theta_range=two_theta_range)
    primary = _primary(sticks)
    if plot is not None:
        from refdb.structure.plot import plot_pattern

        title = f"{reference.name} ({reference.formula_reduced}), {reference.space_group}"
        plot_pattern(sticks, plot, title=title, two_theta_range=two_theta_range)
        err.print(f"Wrote {plot.name}")
    rows = _rows(sticks, primary)
    if json_out:
        emit_json({"reference": _describe(reference), "radiation": radiation.to_dict(), "reflections": rows})
    elif csv_out:
        writer = csv.DictWriter(sys.stdout, fieldnames=list(rows[0]) if rows else ["two_theta"], lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    else:
        _table(reference, radiation.describe(), rows)


def _primary(sticks: Sticks) -> np.ndarray:
    """Indices of the primary-line (Kα1) sticks."""
    first = sticks.radiation.line_names[0]
    return np.array([i for i, n in enumerate(sticks.line_name) if n == first], dtype=np.int64)


def _rows(sticks: Sticks, primary: np.ndarray) -> list[dict]:
    top = float(sticks.absolute[primary].max()) if primary.size else 0.0
    rows = []
    for i in primary:
        h, k, l = (int(v) for v in sticks.hkl[i]) if sticks.hkl is not None else (None, None, None)
        rows.append(
            {
                "two_theta": round(float(sticks.two_theta[i]), 4),
                "d": round(float(sticks.d[i]), 5),
                "h": h,
                "k": k,
                "l": l,
                "multiplicity": int(sticks.multiplicity[i]) if sticks.multiplicity is not None else None,
                "intensity": round(float(sticks.absolute[i]) * 100.0 / top, 3) if top > 0 else 0.0,
            }
        )
    return rows


def _describe(ref: ReferenceData) -> dict:
    return {
        "name": ref.name,
        "formula": ref.formula,
        "formula_reduced": ref.formula_reduced,
        "space_group": ref.space_group,
        "sg_number": ref.sg_number,
        "cell": list(ref.cell) if ref.cell else None,
        "volume": ref.volume,
        "z": ref.z,
        "density": ref.density,
        "rir": ref.rir,
        "source": ref.source,
        "source_id": ref.source_id,
        "doi": ref.doi,
        "licence": ref.licence,
    }


def _table(ref: ReferenceData, radiation: str, rows: list[dict]) -> None:
    a, b, c, al, be, ga = ref.cell or (0, 0, 0, 0, 0, 0)
    title = (
        f"{ref.name} — {ref.formula_reduced}, {ref.space_group}\n"
        f"a={a:.4f} b={b:.4f} c={c:.4f} Å, α={al:g} β={be:g} γ={ga:g}°; {radiation}; I/Ic = {ref.rir:.2f}"
    )
    table = Table(title=title, title_justify="left")
    for col, justify in (("2θ (°)", "right"), ("d (Å)", "right"), ("h k l", "center"), ("m", "right"), ("I", "right")):
        table.add_column(col, justify=justify)
    for r in rows:
        hkl = f"{r['h']} {r['k']} {r['l']}" if r["h"] is not None else ""
        table.add_row(f"{r['two_theta']:.3f}", f"{r['d']:.4f}", hkl, str(r["multiplicity"] or ""), f"{r['intensity']:.1f}")
    out.print(table)
    if not rows:
        warn("no reflection inside the 2θ range")


def register(app: typer.Typer) -> None:
    """Add ``simulate`` to the application."""
    app.command(name="simulate")(handle_errors(simulate))
