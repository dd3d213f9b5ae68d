"""What every command shares: error handling, console streams, output options."""

from __future__ import annotations

import functools
import json
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, TypeVar

import typer
from rich.console import Console

from refdb.errors import RefdbError

if TYPE_CHECKING:
    from refdb.radiation import Radiation

F = TypeVar("F", bound=Callable[..., Any])

#: Data goes to stdout; messages, warnings and progress go to stderr.
# When output goes to a file or pipe there is no terminal width to respect; tables are laid out
# for 160 columns instead of rich's default 80, so they stay readable in logs.
out = Console(highlight=False, width=None if sys.stdout.isatty() else 160)
err = Console(stderr=True, highlight=False, soft_wrap=True)

JsonOpt = Annotated[bool, typer.Option("--json", help="Write machine-readable JSON to stdout.")]
CsvOpt = Annotated[bool, typer.Option("--csv", help="Write CSV to stdout.")]
AnodeOpt = Annotated[
    str | None,
    typer.Option("--anode", help="X-ray tube anode: Cu, Co, Fe, Cr, Mo or Ag (Kα1 + Kα2)."),
]
WavelengthOpt = Annotated[
    float | None, typer.Option("--wavelength", help="A single wavelength in Å instead of an anode.")
]


#: Settings of the running command, filled by the root callback (``db`` URL, ``debug`` flag).
#: One process runs one command, so a module-level mapping is enough; tests reset it per call.
_STATE: dict[str, Any] = {}


def state() -> dict[str, Any]:
    """The running command's shared settings (``db`` URL, ``debug`` flag)."""
    return _STATE


def debug_enabled() -> bool:
    return bool(state().get("debug"))


def handle_errors(func: F) -> F:
    """Turn refdb errors into ``Error: …`` on stderr and exit status 1 (traceback with --debug)."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except (typer.Exit, typer.Abort, typer.TyperException, typer.BadParameter):
            raise
        except RefdbError as exc:
            if debug_enabled():
                raise
            fail(exc.one_line())
        except KeyboardInterrupt:
            err.print("Interrupted.")
            raise typer.Exit(130) from None
        except BrokenPipeError:
            raise typer.Exit(0) from None
        except Exception as exc:  # an unexpected failure: one line, traceback only on request
            if debug_enabled():
                raise
            fail(
                f"unexpected {type(exc).__name__}: {' '.join(str(exc).split())} "
                "(this is a bug in refdb; rerun with --debug for the traceback)"
            )

    return wrapper  # type: ignore[return-value]


def fail(message: str, code: int = 1) -> None:
    """Print ``Error: message`` on stderr and exit."""
    err.print(f"[bold red]Error:[/] {message}", markup=True, highlight=False)
    raise typer.Exit(code)


def warn(message: str) -> None:
    err.print(f"[yellow]Warning:[/] {message}", markup=True, highlight=False)


def emit_json(data: Any, path: Path | None = None) -> None:
    """Write JSON to stdout (or a file), UTF-8, stable key order as given."""
    text = json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False, default=_json_default)
    if path is None:
        sys.stdout.write(text + "\n")
        sys.stdout.flush()
    else:
        path.write_text(text + "\n", encoding="utf-8")


def _json_default(obj: Any) -> Any:
    import numpy as np

    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def finite_or_none(x: Any) -> Any:
    """NaN and inf become None so that JSON output stays valid."""
    import math

    if x is None:
        return None
    try:
        f = float(x)
    except (TypeError, ValueError):
        return x
    return f if math.isfinite(f) else None


def radiation_from_options(
    anode: str | None, wavelength: float | None, *, required: bool = False
) -> Radiation | None:
    """Turn ``--anode`` / ``--wavelength`` into a :class:`~refdb.radiation.Radiation`.

    Returns None when neither is given and ``required`` is False.

    Raises
    ------
    InputError
        Both are given, neither is given while ``required``, an unknown anode, or a wavelength
        outside 0.1–5 Å.
    """
    from refdb.errors import InputError
    from refdb.radiation import radiation_for

    if anode is None and wavelength is None:
        if required:
            raise InputError("no radiation given", "pass --anode Cu or --wavelength 1.5406 (Å)")
        return None
    if anode is not None and wavelength is not None:
        raise InputError("give --anode or --wavelength, not both")
    return radiation_for(anode, wavelength=wavelength)
