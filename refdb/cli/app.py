"""The ``refdb`` typer application: global options and command registration."""

from __future__ import annotations

import importlib
import os
import sys
from typing import Annotated

# numpy's BLAS on one thread unless the user says otherwise (set before numpy loads): the
# command line's matrices are small, and on a laptop's few cores extra BLAS threads only
# compete with each other (about 10 % less CPU time for `refdb unmix` on a 2-core machine).
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import typer  # noqa: E402

from refdb import __version__  # noqa: E402
from refdb.allocator import keep_freed_memory  # noqa: E402
from refdb.cli._common import state  # noqa: E402

app = typer.Typer(
    name="refdb",
    help=(
        "Powder X-ray diffraction phase identification against an open reference library.\n\n"
        "Results are screening results: confirm identifications by an independent method. "
        "Regulated determinations (respirable crystalline silica, asbestos, pharmaceutical "
        "release) need accredited methods, local codes and licensed practice."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    context_settings={"help_option_names": ["-h", "--help"]},
)

#: Command modules, each with a ``register(app)`` function; kept in the order of the help text.
COMMAND_MODULES = (
    "refdb.cli.library_cmds",
    "refdb.cli.structure_cmds",
    "refdb.cli.scan_cmds",
    "refdb.cli.search_cmds",
    "refdb.cli.mixture_cmds",
    "refdb.cli.demo_cmds",
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"refdb {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    db: Annotated[
        str | None,
        typer.Option(
            "--db",
            envvar="REFDB_DATABASE",
            help="Library location: a SQLAlchemy URL (sqlite:///…, postgresql+psycopg://…) or a "
            "file path. Default: library.sqlite in the user data directory.",
            show_envvar=True,
        ),
    ] = None,
    debug: Annotated[bool, typer.Option("--debug", help="Show tracebacks for errors.")] = False,
    version: Annotated[
        bool,
        typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit."),
    ] = False,
) -> None:
    s = state()
    s.clear()
    s["db"] = db
    s["debug"] = debug


for _name in COMMAND_MODULES:
    try:
        _module = importlib.import_module(_name)
    except ModuleNotFoundError as _exc:  # a command group not written yet
        if _exc.name != _name:
            raise
        continue
    _module.register(app)


def main() -> None:
    """Console-script entry point."""
    keep_freed_memory()  # the process is ours (refdb.allocator)
    try:
        app()
    except BrokenPipeError:
        sys.exit(0)
