"""Chemical formulas: parsing, element sets and Hill-order reduced formulas.

Accepted input: element symbols with optional counts (integers or decimals), parentheses and
brackets with multipliers, hydrate dots (``·``, ``•`` or ``*`` followed by an optional
count; a ``.`` is always a decimal point), and the space-separated CIF style (``Fe3 O4``). Charges in CIF type symbols
(``Fe3+``) are not part of a formula.
"""

from __future__ import annotations

import re
import gemmi

from refdb.errors import InputError

_TOKEN = re.compile(r"([A-Z][a-z]?)|(\d*\.?\d+)|([(\[])|([)\]])|(\s+)")


def is_element(symbol: str) -> bool:
    """True for a real chemical element symbol (H … Og), case-sensitive; D counts as H."""
    if symbol in ("D", "T"):
        return True
    try:
        return gemmi.Element(symbol).atomic_number > 0 and gemmi.Element(symbol).name == symbol
    except Exception:
        return False


def parse_formula(formula: str) -> dict[str, float]:
    """Element counts of a formula, e.g. ``"CaSO4·2H2O"`` → ``{Ca: 1, S: 1, O: 6, H: 4}``.

    Raises
    ------
    InputError
        Unknown element, unbalanced parentheses or an empty formula.
    """
    text = formula.strip()
    if not text:
        raise InputError("empty chemical formula")
    # Split off hydrate parts: "A·nB" → A + n×B
    # Only ·, • and * separate hydrate parts: a "." is a decimal point (CIF sums like "O6.9").
    parts = re.split(r"\s*[·•*]\s*", text)
    total: dict[str, float] = {}
    for i, part in enumerate(parts):
        mult = 1.0
        if i > 0:
            m = re.match(r"(\d+(?:\.\d+)?)\s*(.*)$", part)
            if m:
                mult, part = float(m.group(1)), m.group(2)
        for el, n in _parse_group(part, formula).items():
            total[el] = total.get(el, 0.0) + n * mult
    return {el: n for el, n in total.items() if n > 0}


def _parse_group(text: str, original: str) -> dict[str, float]:
    stack: list[dict[str, float]] = [{}]
    pos = 0
    last: dict[str, float] | str | None = None
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if not m:
            raise InputError(f"cannot read formula {original!r} at {text[pos:pos + 8]!r}")
        el, num, opn, cls, _space = m.groups()
        pos = m.end()
        if el:
            if el in ("D", "T"):  # deuterium and tritium count as hydrogen
                el = "H"
            if not is_element(el):
                raise InputError(f"unknown element {el!r} in formula {original!r}")
            stack[-1][el] = stack[-1].get(el, 0.0) + 1.0
            last = el
        elif num:
            n = float(num)
            if isinstance(last, str):
                stack[-1][last] += n - 1.0
            elif isinstance(last, dict):
                for k, v in last.items():
                    stack[-1][k] = stack[-1].get(k, 0.0) + v * (n - 1.0)
            else:
                raise InputError(f"a count without an element in formula {original!r}")
            last = None
        elif opn:
            stack.append({})
            last = None
        elif cls:
            if len(stack) == 1:
                raise InputError(f"unbalanced parentheses in formula {original!r}")
            group = stack.pop()
            for k, v in group.items():
                stack[-1][k] = stack[-1].get(k, 0.0) + v
            last = group
    if len(stack) != 1:
        raise InputError(f"unbalanced parentheses in formula {original!r}")
    if not stack[0]:
        raise InputError(f"no elements in formula {original!r}")
    return stack[0]


def hill_formula(counts: dict[str, float], *, reduce: bool = True) -> str:
    """Hill-order formula (C, H first when C is present, then alphabetical) without spaces.

    With ``reduce`` the counts are divided by their greatest common divisor when all are
    integers, so ``Fe24 O32`` → ``Fe3O4``.
    """
    if not counts:
        return ""
    values = dict(counts)
    if reduce and all(abs(v - round(v)) < 1e-6 and round(v) > 0 for v in values.values()):
        from math import gcd

        g = 0
        for v in values.values():
            g = gcd(g, int(round(v)))
        values = {k: round(v) / g for k, v in values.items()}
    keys = sorted(values)
    if "C" in values:
        keys = ["C"] + (["H"] if "H" in values else []) + [k for k in keys if k not in ("C", "H")]

    def fmt(v: float) -> str:
        if abs(v - round(v)) < 1e-6:
            return "" if round(v) == 1 else str(int(round(v)))
        return f"{v:.3f}".rstrip("0").rstrip(".")

    return "".join(f"{k}{fmt(values[k])}" for k in keys)


def elements_of(formula: str) -> tuple[str, ...]:
    """The elements of a formula, sorted alphabetically."""
    return tuple(sorted(parse_formula(formula)))


def split_tokens(text: str | None) -> list[str]:
    """``"Fe,O  Cl;S"`` → ``["Fe", "O", "Cl", "S"]``: a list typed on a command line, split on
    commas, semicolons and blanks, not yet checked."""
    return [tok for tok in re.split(r"[\s,;]+", (text or "").strip()) if tok]


def split_element_list(text: str | None) -> tuple[str, ...]:
    """``"Fe,O  Cl"`` → ``("Cl", "Fe", "O")``; each must be an element symbol.

    Raises
    ------
    InputError
        A token that is not an element symbol (symbols are case-sensitive: ``Co`` vs ``CO``).
    """
    out = []
    for tok in split_tokens(text):
        sym = tok[:1].upper() + tok[1:].lower()
        if not is_element(sym):
            raise InputError(f"{tok!r} is not an element symbol", "give symbols like Fe,O,Cl")
        out.append(sym)
    return tuple(sorted(set(out)))
