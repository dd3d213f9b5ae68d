"""CIF text in, one gemmi data block and its bibliographic facts out.

Private helpers of :mod:`refdb.structure.crystal`: decoding the file, choosing the data block
that holds the structure, and reading the metadata items (names, formula, citation, licence)
that gemmi's small-structure model does not keep. CIF comments are dropped by the CIF parser,
so the licence statement of a COD header is read from the raw text.

References
----------
Hall, Allen & Brown (1991), Acta Cryst. A47, 655 (the CIF format); Wojdyr (2022), J. Open
Source Softw. 7, 4200 (gemmi).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import gemmi

from refdb.errors import InputError

#: Largest CIF refdb reads (a structure file is kilobytes; a bigger file is a wrong file).
MAX_CIF_BYTES = 20_000_000


@dataclass(frozen=True)
class CifSource:
    """The decoded text of a CIF and where it came from."""

    text: str
    file_name: str | None
    warnings: tuple[str, ...] = ()


def load_text(path_or_text: str | Path) -> CifSource:
    """Decode a CIF given as a path or as text.

    A ``str`` that contains a line break is taken as CIF text, anything else as a path.

    Raises
    ------
    InputError
        Missing or unreadable file, empty file, binary content.
    """
    if isinstance(path_or_text, str) and ("\n" in path_or_text or "\r" in path_or_text):
        return CifSource(path_or_text, None)
    path = Path(path_or_text)
    if not path.is_file():
        raise InputError(f"CIF file {path.name or str(path)!r} not found", "check the path")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read {path.name}: {exc.strerror or exc}") from None
    if len(raw) > MAX_CIF_BYTES:
        raise InputError(f"{path.name} is {len(raw) // 1_000_000} MB: too large for a structure CIF")
    text, warnings = decode_bytes(raw, path.name)
    return CifSource(text, path.name, warnings)


def decode_bytes(raw: bytes, name: str) -> tuple[str, tuple[str, ...]]:
    """UTF-8 text (with or without BOM); Latin-1 as a fallback for accented author names.

    CIF 1.1 is ASCII and CIF 2.0 is UTF-8, but many older files carry Latin-1 bytes in author
    names or comments. Latin-1 maps every byte, so binary content is recognised by NUL bytes
    first.
    """
    if not raw.strip():
        raise InputError(f"{name} is empty", "a CIF starts with a data_ block")
    if b"\0" in raw[:4096]:
        raise InputError(f"{name} is a binary file, not a CIF")
    try:
        return raw.decode("utf-8-sig"), ()
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
        return text, (f"{name} is not UTF-8; read it as Latin-1",)


def parse_block(source: CifSource, name_hint: str | None = None) -> gemmi.cif.Block:
    """Parse the text and return the data block that holds atom sites.

    With several such blocks the first is used, unless ``name_hint`` names a block.

    Raises
    ------
    InputError
        Not CIF syntax, no data block, or no block with fractional atom coordinates.
    """
    label = source.file_name or "CIF text"
    if "data_" not in source.text.lower():
        raise InputError(f"{label} is not a CIF: no data_ block", "a CIF starts with a data_ block")
    try:
        doc = gemmi.cif.read_string(source.text)
    except (RuntimeError, ValueError) as exc:
        msg = " ".join(str(exc).split())
        msg = msg.split(":", 1)[-1].strip() if msg.startswith("string") else msg
        raise InputError(f"{label} is not a readable CIF: {msg}") from None
    blocks = [b for b in doc if b.find_values("_atom_site_fract_x")]
    if not blocks:
        if any(b.find_values("_atom_site_Cartn_x") for b in doc):
            raise InputError(
                f"{label} gives Cartesian but no fractional atom coordinates",
                "refdb needs _atom_site_fract_x/y/z",
            )
        raise InputError(f"{label} has no atom coordinates (_atom_site_fract_x/y/z)")
    if name_hint:
        for b in blocks:
            if b.name.lower() == name_hint.lower():
                return b
    return blocks[0]


def value(block: gemmi.cif.Block, *tags: str) -> str | None:
    """The first of ``tags`` that has a real value, unquoted; None for absent, '?' or '.'.

    A quoted question mark or full stop, alone apart from blanks (``' ?'``, as some
    database files write an unknown name), counts as unknown too: no entry should be
    called "?".
    """
    for tag in tags:
        raw = block.find_value(tag)
        if raw is not None and (text := _known(raw)):
            return text
    return None


def _known(raw: str) -> str:
    """A raw CIF value unquoted, its blanks collapsed; "" for '?' or '.', quoted or not."""
    text = " ".join(gemmi.cif.as_string(raw).split())
    return "" if text in ("?", ".") else text


def number(block: gemmi.cif.Block, tag: str, label: str = "CIF") -> float | None:
    """A numeric item without its standard uncertainty, e.g. ``5.4307(2)`` → 5.4307."""
    text = value(block, tag)
    if text is None:
        return None
    try:
        return float(re.sub(r"\(\d+\)$", "", text))
    except ValueError:
        raise InputError(f"{label}: {tag} = {text!r} is not a number") from None


def values(block: gemmi.cif.Block, tag: str) -> list[str]:
    """All values of a looped item, unquoted, without '?', '.' and blanks."""
    return [text for raw in block.find_values(tag) if (text := _known(raw))]


def citation(block: gemmi.cif.Block) -> str | None:
    """``Authors (year). Title. Journal volume, pages.`` from the _publ/_journal items."""
    authors = "; ".join(values(block, "_publ_author_name"))
    year = value(block, "_journal_year")
    title = value(block, "_publ_section_title")
    journal = value(block, "_journal_name_full", "_journal_name_abbrev")
    volume = value(block, "_journal_volume")
    first = value(block, "_journal_page_first")
    last = value(block, "_journal_page_last")
    pages = f"{first}–{last}" if first and last and last != first else first
    parts = []
    if authors:
        parts.append(authors + (f" ({year})" if year else ""))
    elif year:
        parts.append(f"({year})")
    if title:
        parts.append(title.rstrip("."))
    if journal:
        parts.append(" ".join(p for p in (journal, volume and f"{volume}," if pages else volume, pages) if p))
    return ". ".join(parts) + "." if parts else None


_LICENCE_WORDS = ("public domain", "may be used", "licen", "copyright", "attribution", "were provided")


def licence_statement(text: str) -> str | None:
    """The licence paragraphs of a CIF's leading comment block, joined into one line.

    COD files open with a comment header; its paragraphs that mention the public domain or the
    terms of use are the entry's licence statement (see the COD's own pages). Files without
    such a paragraph return None: their terms are unknown and the caller says so.
    """
    header = []
    for line in text.splitlines():
        stripped = line.strip()
        if stripped.lower().startswith("data_"):
            break
        if stripped.startswith("#"):
            header.append(stripped.lstrip("#").strip())
        elif stripped:
            header.append("")
    paragraphs, current = [], []
    for line in header + [""]:
        if line and not set(line) <= set("-=*$"):
            current.append(line)
        elif current:
            paragraphs.append(" ".join(current))
            current = []
    keep = [p for p in paragraphs if any(w in p.lower() for w in _LICENCE_WORDS)]
    return " ".join(keep) if keep else None
