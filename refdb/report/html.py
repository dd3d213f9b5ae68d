"""A self-contained HTML report of a mixture decomposition.

One file, no network: styles are inline, the figure is a base64 PNG in a ``data:`` URI, and
nothing refers to an outside address, so the report can be archived, mailed or opened
offline years later.
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Iterable, Sequence
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from refdb import __version__
from refdb.errors import InputError
from refdb.match.mixture import MixtureResult
from refdb.report.caution import CAUTION

_STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;margin:2em auto;max-width:70em;
color:#222;line-height:1.4;padding:0 1em}
h1{font-size:1.5em;margin-bottom:.2em}h2{font-size:1.15em;margin-top:1.6em;border-bottom:1px solid #ccc}
table{border-collapse:collapse;margin:.5em 0;font-size:.92em}
th,td{border:1px solid #ccc;padding:.25em .6em;text-align:left;vertical-align:top}
th{background:#f2f2f2}td.num{text-align:right;font-variant-numeric:tabular-nums}
.caution{border-left:4px solid #c60;background:#fff6ec;padding:.6em 1em;margin:1em 0}
.meta{color:#555;font-size:.9em}img{max-width:100%;height:auto;border:1px solid #ddd}
"""


def _fmt(x: Any, spec: str = ".4g") -> str:
    if x is None:
        return "–"
    try:
        f = float(x)
    except (TypeError, ValueError):
        return html.escape(str(x))
    return format(f, spec) if math.isfinite(f) else "–"


def _ident(entry_id: int | None) -> str:
    return "–" if entry_id is None else str(int(entry_id))


def _pct(w: float, u: float) -> str:
    if not math.isfinite(w):
        return "not quantified"
    return f"{100 * w:.1f} ± {100 * u:.1f}" if math.isfinite(u) else f"{100 * w:.1f}"


def _table(headers: Sequence[str], rows: Iterable[Sequence[str]], numeric: Sequence[int] = ()) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in headers)
    body = []
    for row in rows:
        cells = "".join(
            f'<td class="num">{c}</td>' if i in numeric else f"<td>{c}</td>" for i, c in enumerate(row)
        )
        body.append(f"<tr>{cells}</tr>")
    if not body:
        return "<p>None.</p>"
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def mixture_html(result: MixtureResult, *, title: str | None = None, include_plot: bool = True) -> str:
    """The report as one HTML document (string).

    Parameters
    ----------
    result : MixtureResult
    title : str, optional
        Default ``Phase analysis: <scan name>``.
    include_plot : bool
        Embed the figure (base64 PNG). Skipped automatically when no phase was identified.
    """
    e = html.escape
    name = result.scan_source or "scan"
    heading = title or f"Phase analysis: {name}"
    q = result.quantification
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{e(heading)}</title><style>{_STYLE}</style></head><body>",
        f"<h1>{e(heading)}</h1>",
        f'<p class="meta">refdb {e(__version__)} · {e(datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC"))} · '
        f"radiation {e(result.radiation)} · library stamp <code>{e(result.library_stamp)}</code></p>",
        f'<div class="caution"><strong>Caution.</strong> {e(CAUTION)}</div>',
    ]
    if include_plot and result.fit is not None:
        from refdb.report.mixture_plot import mixture_image

        png = base64.b64encode(mixture_image(result, "png", dpi=110)).decode("ascii")
        parts.append(f'<h2>Pattern</h2><img alt="observed, calculated and difference pattern with phase lines" '
                     f'src="data:image/png;base64,{png}">')
    basis = ""
    if q is not None:
        basis = ("fractions of the quantified crystalline phases (sum 100 %)" if q.basis == "crystalline"
                 else "fractions of the whole specimen, from the internal standard")
        method = "cell mass × volume (Hill & Howard 1987)" if q.method == "cell" else "reference intensity ratios (Chung 1974)"
        basis = f"<p>Weight % are {e(basis)}; method: {e(method)}. Uncertainties are 1σ from counting statistics only.</p>"
    parts.append("<h2>Phases</h2>" + basis)
    parts.append(_table(
        ["Phase", "Formula", "Entry", "Source id", "wt %", "Scale", "Zero shift (°)", "Displacement (°)", "d-scale", "Evidence"],
        [
            [e(p.name) + (" (internal standard)" if p.is_standard else ""), e(p.formula), _ident(p.entry_id),
             e(p.source_id or "–"), _pct(p.weight_fraction, p.u_weight_fraction), _fmt(p.scale),
             _fmt(p.zero_shift, ".4f"), _fmt(p.displacement, ".4f"), _fmt(p.d_scale, ".5f"), e(p.evidence.text)]
            for p in result.phases
        ],
        numeric=(4, 5, 6, 7, 8),
    ))
    if q is not None and q.basis == "absolute":
        parts.append(f"<p>Amorphous or unidentified: {_pct(q.rest, q.u_rest)} wt %.</p>")
    if result.fit is not None:
        f = result.fit
        parts.append("<h2>Fit quality</h2>" + _table(
            ["Rwp", "Rexp", "GoF (χ²/ν)", "Points", "Parameters", "Converged"],
            [[_fmt(100 * f.rwp, ".2f") + " %", _fmt(100 * f.rexp, ".2f") + " %", _fmt(f.gof, ".3f"), str(f.n_points),
              str(f.n_parameters), "yes" if f.converged else "no"]],
            numeric=(0, 1, 2, 3, 4),
        ))
    u = result.unexplained
    parts.append("<h2>Unexplained peaks</h2><p>Peaks the identified phases leave above the noise: "
                 "a phase missing from the library, or one the search filters excluded.</p>")
    parts.append(_table(["2θ (°)", "d (Å)", "Height (counts)", "Significance (σ)"],
                        [[_fmt(t, ".3f"), _fmt(d, ".4f"), _fmt(h, ".0f"), _fmt(s, ".1f")]
                         for t, d, h, s in zip(u.two_theta, u.d, u.height, u.significance, strict=True)],
                        numeric=(0, 1, 2, 3)))
    parts.append("<h2>Detection limits</h2><p>Smallest weight fraction whose strongest line would stand 3σ "
                 "above the local noise of this scan.</p>")
    parts.append(_table(["Phase", "Formula", "Entry", "Limit (wt %)", "Deciding line 2θ (°)"],
                        [[e(d.name), e(d.formula), _ident(d.entry_id),
                          _fmt(100 * d.weight_fraction, ".2f"), _fmt(d.two_theta, ".2f")] for d in result.detection_limits],
                        numeric=(3, 4)))
    parts.append("<h2>Candidates turned down</h2>")
    parts.append(_table(["Phase", "Entry", "Reason"], [[e(r.name), str(r.entry_id), e(r.reason)] for r in result.rejected]))
    parts.append("<h2>Processing</h2>")
    params = dict(result.parameters) | {"scan": result.scan_source, "library stamp": result.library_stamp}
    parts.append(_table(["Parameter", "Value"], [[e(str(k)), e(_plain(v))] for k, v in params.items()]))
    if result.notes:
        parts.append("<h2>Notes</h2><ul>" + "".join(f"<li>{e(n)}</li>" for n in result.notes) + "</ul>")
    parts.append(f'<div class="caution"><strong>Caution.</strong> {e(CAUTION)}</div></body></html>')
    return "\n".join(parts) + "\n"


def _plain(v: Any) -> str:
    if isinstance(v, float):
        return _fmt(v, ".6g")
    if isinstance(v, (list, tuple)):
        return ", ".join(_plain(x) for x in v) or "–"
    if isinstance(v, dict):
        return "; ".join(f"{k}: {_plain(x)}" for k, x in v.items() if x not in (None, [], ()))
    return "–" if v is None else str(v)


def write_mixture_html(result: MixtureResult, path: str | Path, **kwargs: Any) -> Path:
    """Write :func:`mixture_html` to ``path`` (UTF-8).

    Raises
    ------
    InputError
        The file cannot be written.
    """
    out = Path(path)
    text = mixture_html(result, **kwargs)
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot write {out}: {exc.strerror}", "check the folder exists and is writable") from None
    return out
