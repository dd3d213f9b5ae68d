"""``refdb demo``: the whole job on the bundled seed library and demo scans."""

from __future__ import annotations

import time
from dataclasses import replace
from pathlib import Path
from typing import Annotated

import typer

from refdb.cli._common import JsonOpt, emit_json, err, handle_errors, out


def demo(
    out_dir: Annotated[
        Path, typer.Option("--out", help="Folder for the demo library, reports and plots.")
    ] = Path("refdb-demo"),
    top: Annotated[int, typer.Option("--top", min=1, max=20, help="Search candidates shown per scan.")] = 5,
    json_: JsonOpt = False,
) -> None:
    """Build the seed library, then search and unmix the demo scans (invented data).

    The scenario is made up for the demonstration: corrosion products on a steel pipe flange
    from a coastal site. The scans were simulated by refdb from the seed structures; the
    composition used for each is in its header, and the demo compares its findings with it.
    """
    from refdb.cli.mixture_cmds import render_mixture
    from refdb.cli.search_cmds import candidates_table
    from refdb.demo import run_demo
    from refdb.report.caution import CAUTION

    t0 = time.perf_counter()
    run = run_demo(out_dir, progress=lambda msg: err.print(f"[dim]{msg}[/]"))
    elapsed = time.perf_counter() - t0
    if json_:
        emit_json(
            {
                "library": str(run.library),
                "library_stamp": run.library_stamp,
                "scans": [
                    {
                        "scan": o.scan.name,
                        "invented_answer": o.scan.answer,
                        "candidates": [c.to_dict() for c in o.search.candidates[:top]],
                        "phases": o.mixture.as_dict()["phases"],
                        "missed": list(o.missed),
                        "extra": list(o.extra),
                        "report": str(o.report) if o.report else None,
                        "plot": str(o.plot) if o.plot else None,
                    }
                    for o in run.outcomes
                ],
                "seconds": round(elapsed, 2),
                "caution": CAUTION,
            }
        )
        return
    out.print(
        f"[bold]refdb demo[/] — seed library {run.library} ({run.imported} structures imported now; "
        f"stamp {run.library_stamp})"
    )
    out.print(
        "Scenario (invented for the demonstration): corrosion products on a steel pipe flange "
        "from a coastal site. The scans were simulated by refdb; their headers hold the answer."
    )
    for o in run.outcomes:
        out.rule(f"[bold]{o.scan.name}[/]: {o.scan.title}")
        out.print(candidates_table(replace(o.search, candidates=o.search.candidates[:top]), o.scan.path.name))
        render_mixture(o.mixture, caution=False)
        answer = ", ".join(f"{k} {100 * v:.0f} %" for k, v in o.scan.answer.items())
        verdict = "all invented phases found" if not o.missed else f"not found: {', '.join(o.missed)}"
        if o.extra:
            verdict += f"; also reported: {', '.join(o.extra)}"
        out.print(f"Invented answer: {answer} — {verdict}.")
        if o.report:
            out.print(f"Report: {o.report}")
        if o.plot:
            out.print(f"Plot:   {o.plot}")
    out.rule()
    out.print(f"Done in {elapsed:.1f} s. {CAUTION}")


def register(app: typer.Typer) -> None:
    app.command(name="demo")(handle_errors(demo))
