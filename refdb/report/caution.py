"""The one caution text that every report, table and JSON document carries.

Phase identification from a powder pattern is a screening result. The text is kept in one
place so that the command line, the HTML report and the JSON output say the same thing.
"""

from __future__ import annotations

#: One short paragraph, plain text (no markup), for people reading a report.
CAUTION = (
    "Screening result: phases, weight fractions and detection limits obtained by matching a "
    "powder pattern against a reference library are not a certified analysis. Confirm "
    "important identifications by an independent method. Regulated determinations — "
    "respirable crystalline silica, asbestos, pharmaceutical release testing — need "
    "accredited methods, the local codes that govern them and licensed practice."
)

#: The same message in one line, for a terminal footer or a CSV comment.
CAUTION_SHORT = (
    "Screening result, not a certified analysis; regulated determinations (respirable "
    "crystalline silica, asbestos, pharmaceutical release) need accredited methods, local "
    "codes and licensed practice."
)


def caution_text(short: bool = False) -> str:
    """Return the caution paragraph, or its one-line form when ``short`` is true."""
    return CAUTION_SHORT if short else CAUTION
