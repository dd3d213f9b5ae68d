"""Candidate search: filters, coarse prefilter, detailed figure of merit, profile check, ranking.

Stages (each in its own module):

1. Filters (:func:`entry_filter`): elements the entry must contain, may only contain and must
   not contain (128-bit masks, see :func:`refdb.match.index.element_mask`), tags (all of
   them), kind, and at least one strong line inside the scanned d range.
2. Coarse prefilter (:mod:`refdb.match.prefilter`) over every allowed entry.
3. Peak-list figure of merit (:mod:`refdb.match.score`) on the shortlist, with per-candidate
   zero shift, displacement and optional d-scale.
4. Profile check (:mod:`refdb.match.profile_check`) of the :data:`PROFILE_CHECKED` leading
   candidates when the scan is given. Their final score is the weighted geometric mean
   ``score = S₁^(1−λ) · (100·max(R, 0))^λ`` with λ = :data:`PROFILE_WEIGHT`, S₁ the
   peak-list score and R the profile correlation; they are ranked by it ahead of the
   unchecked candidates, which keep S₁.
5. Equivalent entries (same reduced formula, same space group or its enantiomorph, cell lengths within the
   d-scale range :data:`D_SCALE_MAX` (2 %, which the figure of merit cannot tell apart: the
   same phase measured at 5 K and at room temperature) and angles within 1° — or volumes
   within 3 % allowing for a different cell choice of 1–4 times the volume) are folded into
   the best-ranked one's ``equivalents``.

Each candidate carries every component, the fitted geometry and the matched pairs, so the
ranking can be checked by hand.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from refdb.errors import InputError
from refdb.match.index import ATOMIC_NUMBER, SearchIndex, element_mask
from refdb.match.prefilter import prefilter, scale_votes
from refdb.match.profile_check import profile_correlation, rough_background
from refdb.match.score import D_SCALE_MAX, LineScores, WidthModel, gather_lines, score_lines, width_model
from refdb.radiation import Radiation
from refdb.records import KINDS

if TYPE_CHECKING:  # refdb.scan pulls in scipy.signal; the search does not need it to run
    from refdb.scan.types import PeakList, Scan

#: Candidates given the profile check (when a scan is given).
PROFILE_CHECKED = 15
#: Weight λ of the profile correlation in the final score.
PROFILE_WEIGHT = 0.3
#: Candidates within this many points of the first one's score, explaining the same observed
#: peaks, are tied with it. Isostructural phases whose cells differ by less than the fitted
#: d-scale (fcc Fe and Ni, Ge and GaAs) differ by 0.1–4.4 points in the identification
#: benchmark, by intensity details that texture and noise outweigh.
TIE_POINTS = 5.0
#: Share of observed peaks matched by both (Jaccard index) for "the same peaks".
TIE_SAME_PEAKS = 0.9
#: Shortlist size for the detailed score: max(SHORTLIST_MIN, SHORTLIST_PER_TOP × top).
SHORTLIST_MIN = 100
SHORTLIST_PER_TOP = 2


@dataclass(frozen=True)
class SearchFilters:
    """Which entries a search considers (element symbols as given, sorted)."""

    elements_required: tuple[str, ...] = ()
    elements_allowed: tuple[str, ...] | None = None
    elements_excluded: tuple[str, ...] = ()
    tags: tuple[str, ...] = ()
    kind: str | None = None

    def to_dict(self) -> dict:
        return {
            "elements_required": list(self.elements_required),
            "elements_allowed": None if self.elements_allowed is None else list(self.elements_allowed),
            "elements_excluded": list(self.elements_excluded),
            "tags": list(self.tags),
            "kind": self.kind,
        }


@dataclass(frozen=True)
class Components:
    """The parts of a candidate's score (definitions in :mod:`refdb.match.score`)."""

    peak_list_score: float
    expected_found: float
    observed_explained: float
    position: float
    intensity_agreement: float
    strongest_missing: float
    profile_correlation: float | None
    smith_snyder: float
    mean_abs_delta: float | None
    n_possible: int

    def to_dict(self) -> dict:
        return {k: _finite(v) for k, v in self.__dict__.items()}


@dataclass(frozen=True, eq=False)
class Candidate:
    """One reference entry scored against the unknown.

    Attributes
    ----------
    entry_id, source_id, name, formula, space_group, kind
        Identity of the entry (``source_id``: database code, else the imported file's stem).
    score : float
        Final figure of merit, 0–100 (see :mod:`refdb.match.search`).
    components : Components
    n_matched : int
        Reference lines matched to an observed peak.
    n_expected : int
        Lines expected to be seen (matched, or strong enough to be detected).
    zero_shift, displacement : float
        Fitted, degrees 2θ (:func:`refdb.geometry.peak_shift`).
    d_scale : float
        Fitted isotropic d-scale ε (d_observed = d_reference·(1 + ε)).
    matched : ndarray, shape (n, 2), int
        (observed peak index, reference line index within the entry) pairs.
    predicted_two_theta : ndarray, shape (L,)
        Fitted 2θ of the entry's lines that entered the score, degrees.
    line_index : ndarray, shape (L,), int
        Their positions within the entry.
    line_intensity : ndarray, shape (L,)
        Their intensities, relative to the strongest = 100.
    equivalents : tuple of int
        Entry ids of the same phase from other sources, folded into this candidate.
    """

    entry_id: int
    source_id: str
    name: str
    formula: str
    space_group: str
    kind: str
    score: float
    components: Components
    n_matched: int
    n_expected: int
    zero_shift: float
    displacement: float
    d_scale: float
    matched: np.ndarray
    predicted_two_theta: np.ndarray
    line_index: np.ndarray
    line_intensity: np.ndarray
    equivalents: tuple[int, ...] = ()

    def to_dict(self) -> dict:
        """The stable JSON form (``--json``)."""
        return {
            "entry_id": self.entry_id,
            "source_id": self.source_id,
            "name": self.name,
            "formula": self.formula,
            "space_group": self.space_group,
            "kind": self.kind,
            "score": _finite(self.score),
            "components": self.components.to_dict(),
            "n_matched": self.n_matched,
            "n_expected": self.n_expected,
            "zero_shift": _finite(self.zero_shift),
            "displacement": _finite(self.displacement),
            "d_scale": _finite(self.d_scale),
            "matched": [[int(a), int(b)] for a, b in self.matched],
            "equivalents": list(self.equivalents),
        }


@dataclass(frozen=True, eq=False)
class SearchResult:
    """Candidates best first, and what the search looked at."""

    candidates: tuple[Candidate, ...]
    n_considered: int
    n_entries: int
    filters: SearchFilters
    radiation: Radiation
    two_theta_range: tuple[float, float]
    d_range: tuple[float, float]
    n_peaks: int
    width: WidthModel
    profile_checked: bool = False
    notes: tuple[str, ...] = field(default=())
    #: Leading candidates (the first included) that the data cannot tell apart: see :func:`tied_leaders`.
    n_tied: int = 1

    def to_dict(self) -> dict:
        return {
            "candidates": [c.to_dict() for c in self.candidates],
            "n_tied": self.n_tied,
            "n_considered": self.n_considered,
            "n_entries": self.n_entries,
            "filters": self.filters.to_dict(),
            "radiation": self.radiation.to_dict(),
            "two_theta_range": list(self.two_theta_range),
            "d_range": list(self.d_range),
            "n_peaks": self.n_peaks,
            "profile_checked": self.profile_checked,
            "notes": list(self.notes),
        }


def _finite(x):
    if x is None:
        return None
    if isinstance(x, (int, np.integer)):
        return int(x)
    v = float(x)
    return v if np.isfinite(v) else None


# -- filters ---------------------------------------------------------------------------------


def _symbols(values: Iterable[str] | None, what: str) -> tuple[str, ...] | None:
    if values is None:
        return None
    out = []
    for v in values:
        s = v.strip()
        if not s:
            continue
        s = s[:1].upper() + s[1:].lower()
        if s not in ATOMIC_NUMBER:
            raise InputError(f"unknown element {v!r} in {what}", "give element symbols such as Fe, O, Si")
        out.append(s)
    return tuple(sorted(set(out)))


def make_filters(*, elements_required: Iterable[str] = (), elements_allowed: Iterable[str] | None = None,
                 elements_excluded: Iterable[str] = (), tags: Iterable[str] = (), kind: str | None = None) -> SearchFilters:
    """Check and normalise filter values.

    Raises
    ------
    InputError
        Unknown element symbols, an unknown kind, or contradictory element sets.
    """
    req = _symbols(elements_required, "the required elements") or ()
    allowed = _symbols(elements_allowed, "the allowed elements")
    excl = _symbols(elements_excluded, "the excluded elements") or ()
    if kind is not None and kind.lower() not in KINDS:
        raise InputError(f"unknown entry kind {kind!r}", f"choose one of {', '.join(KINDS)}")
    both = set(req) & set(excl)
    if both:
        raise InputError(f"elements both required and excluded: {', '.join(sorted(both))}")
    if allowed is not None and not set(req) <= set(allowed):
        raise InputError(
            f"required elements not in the allowed set: {', '.join(sorted(set(req) - set(allowed)))}",
            "add them to the allowed elements",
        )
    return SearchFilters(req, allowed, excl, tuple(sorted({t.strip() for t in tags if t.strip()})),
                         None if kind is None else kind.lower())


def entry_filter(index: SearchIndex, filters: SearchFilters) -> np.ndarray:
    """Boolean mask over the index's entries (shape (E,)) for the filters.

    Required: ``(bits & R) == R``; allowed: ``(bits & ~A) == 0``; excluded: ``(bits & X) == 0``,
    word by word over the two uint64 words. An unknown tag selects nothing.
    """
    bits = index.elements
    ok = np.ones(index.n_entries, dtype=bool)
    if filters.elements_required:
        r = element_mask(filters.elements_required)
        ok &= np.all((bits & r) == r, axis=1)
    if filters.elements_allowed is not None:
        a = element_mask(filters.elements_allowed)
        ok &= np.all((bits & ~a) == 0, axis=1)
    if filters.elements_excluded:
        x = element_mask(filters.elements_excluded)
        ok &= np.all((bits & x) == 0, axis=1)
    if filters.kind is not None:
        ok &= index.kind == KINDS.index(filters.kind)
    for tag in filters.tags:
        if tag not in index.tag_names:
            return np.zeros(index.n_entries, dtype=bool)
        code = index.tag_names.index(tag)
        has = np.zeros(index.n_entries, dtype=bool)
        has[index.tag_entry[index.tag_code == code]] = True
        ok &= has
    return ok


# -- search ----------------------------------------------------------------------------------


def _check_peaks(peaks: PeakList) -> None:
    if len(peaks) == 0:
        raise InputError("the peak list is empty: nothing to search with",
                         "check the scan, or lower the peak-search threshold")
    tt = np.asarray(peaks.two_theta, dtype=float)
    if not np.all(np.isfinite(tt)) or np.any(np.diff(tt) <= 0):
        raise InputError("peak positions must be finite and strictly increasing in 2θ")
    if np.any((tt <= 0) | (tt >= 180)):
        raise InputError("peak positions must lie between 0 and 180° 2θ", "are they d-spacings or radians?")


def _d_range(peaks: PeakList) -> tuple[float, float]:
    lo, hi = peaks.two_theta_range
    lam = peaks.radiation.wavelength
    d = lam / (2.0 * np.sin(np.radians(np.array([min(hi, 179.9), max(lo, 0.1)])) / 2.0))
    return float(d[0]), float(d[1])


def _scan_arrays(scan: Scan | None, background: np.ndarray | None) -> np.ndarray | None:
    if scan is None:
        return None
    if background is None:
        return rough_background(scan)
    bg = np.asarray(background, dtype=float)
    if bg.shape != scan.two_theta.shape:
        raise InputError(f"background has {bg.size} points but the scan has {len(scan)}")
    return bg


def _score_rows(peaks: PeakList, index: SearchIndex, rows: np.ndarray, eps0: np.ndarray | None, *,
                d_scale: bool, width: WidthModel, scan: Scan | None, background: np.ndarray | None,
                n_profile: int):
    """Score index rows: lines, line scores, final scores, correlations (NaN if unchecked)."""
    d_lo, d_hi = _d_range(peaks)
    reach = D_SCALE_MAX if d_scale else 0.0
    rad = peaks.radiation
    lines = gather_lines(index, rows, rad.wavelength, (d_lo / (1 + reach) * 0.995, d_hi / (1 - reach) * 1.005),
                         monochromator_two_theta=rad.monochromator_two_theta)
    sc = score_lines(peaks, lines, d_scale=d_scale, d_scale_start=eps0, width=width)
    final = sc.score.copy()
    corr = np.full(rows.size, np.nan)
    if scan is not None and n_profile > 0:
        lead = np.argsort(-sc.score, kind="stable")[:n_profile]
        sub = _subset(lines, sc, lead)
        corr[lead] = profile_correlation(scan, background, sub[0], sub[1], peaks, width)
        final[lead] = sc.score[lead] ** (1 - PROFILE_WEIGHT) * (100.0 * np.maximum(corr[lead], 0.0)) ** PROFILE_WEIGHT
    return lines, sc, final, corr


def _subset(lines, sc: LineScores, sel: np.ndarray):
    from refdb.match.score import LineSet

    sub_lines = LineSet(lines.rows[sel], lines.d[sel], lines.two_theta[sel], lines.intensity[sel], lines.line[sel])
    fields = {k: (v[sel] if isinstance(v, np.ndarray) else v) for k, v in sc.__dict__.items()}
    return sub_lines, LineScores(**fields)


def _make_candidate(index: SearchIndex, row: int, i: int, lines, sc: LineScores, final: float,
                    corr: float | None, equivalents: tuple[int, ...] = ()) -> Candidate:
    valid = lines.line[i] >= 0
    m = sc.matched[i]
    obs_i, line_i = sc.nearest[i][m], lines.line[i][m]
    order = np.lexsort((line_i, obs_i))
    pairs = np.stack([obs_i[order], line_i[order]], axis=1).astype(np.int64)
    inten = lines.intensity[i][valid]
    top = float(inten.max()) if inten.size else 1.0
    comp = Components(
        peak_list_score=float(sc.score[i]),
        expected_found=float(sc.expected_found[i]),
        observed_explained=float(sc.observed_explained[i]),
        position=float(sc.position[i]),
        intensity_agreement=float(sc.intensity_agreement[i]),
        strongest_missing=float(sc.strongest_missing[i]),
        profile_correlation=None if corr is None else float(corr),
        smith_snyder=float(sc.smith_snyder[i]),
        mean_abs_delta=None if not np.isfinite(sc.mean_abs_delta[i]) else float(sc.mean_abs_delta[i]),
        n_possible=int(sc.n_possible[i]),
    )
    kind_code = int(index.kind[row])
    return Candidate(
        entry_id=int(index.entry_id[row]),
        source_id=index.text_of("source_id", row) or f"#{int(index.entry_id[row])}",
        name=index.text_of("name", row),
        formula=index.text_of("formula", row),
        space_group=index.text_of("space_group", row),
        kind=KINDS[kind_code] if 0 <= kind_code < len(KINDS) else "computed",
        score=final,
        components=comp,
        n_matched=int(sc.n_matched[i]),
        n_expected=int(sc.n_expected[i]),
        zero_shift=float(sc.zero_shift[i]),
        displacement=float(sc.displacement[i]),
        d_scale=float(sc.d_scale[i]),
        matched=pairs,
        predicted_two_theta=sc.predicted[i][valid],
        line_index=lines.line[i][valid],
        line_intensity=inten * (100.0 / top) if top > 0 else inten,
        equivalents=equivalents,
    )


#: Enantiomorphic space-group pairs (ITC Vol. A, the 11 pairs): a powder pattern cannot tell
#: a structure from its mirror image, so left- and right-handed entries are one phase.
ENANTIOMORPHS = {76: 78, 91: 95, 92: 96, 144: 145, 151: 153, 152: 154, 169: 170, 171: 172, 178: 179, 180: 181,
                 212: 213}
_CANONICAL_SG = {b: a for a, b in ENANTIOMORPHS.items()}


def _phase_key(index: SearchIndex, row: int) -> tuple[str, str]:
    formula = index.text_of("formula_reduced", row).replace(" ", "")
    sg = int(index.sg_number[row])
    sg = _CANONICAL_SG.get(sg, sg)
    return formula, str(sg) if sg else index.text_of("space_group", row).replace(" ", "").lower()


def _same_cell(index: SearchIndex, a: int, b: int) -> bool:
    ca, cb = np.asarray(index.cell[a], dtype=float), np.asarray(index.cell[b], dtype=float)
    if np.all(np.isfinite(ca)) and np.all(np.isfinite(cb)):
        if np.all(np.abs(ca[:3] / cb[:3] - 1.0) <= D_SCALE_MAX) and np.all(np.abs(ca[3:] - cb[3:]) <= 1.0):
            return True
    va, vb = float(index.volume[a]), float(index.volume[b])
    if np.isfinite(va) and np.isfinite(vb) and va > 0 and vb > 0:
        ratio = max(va, vb) / min(va, vb)
        return bool(np.any(np.abs(ratio / np.arange(1, 5) - 1.0) <= 0.03))
    return not (np.isfinite(va) or np.isfinite(vb))


def group_rows(index: SearchIndex, rows: Sequence[int], top: int) -> list[tuple[int, list[int]]]:
    """Fold rows of the same phase (module docstring) into the first of them.

    Parameters
    ----------
    rows : sequence of int
        Index rows, best first.
    top : int
        Stop opening new groups after this many; later rows still join existing groups.

    Returns
    -------
    list of (row, [equivalent rows])
        At most ``top`` groups, in the order of their first row.
    """
    groups: list[tuple[int, list[int]]] = []
    by_key: dict[tuple[str, str], list[int]] = {}
    for row in rows:
        row = int(row)
        key = _phase_key(index, row)
        placed = False
        if key[0]:
            for g in by_key.get(key, ()):
                if _same_cell(index, groups[g][0], row):
                    groups[g][1].append(row)
                    placed = True
                    break
        if not placed and len(groups) < top:
            by_key.setdefault(key, []).append(len(groups))
            groups.append((row, []))
    return groups


def search(peaks: PeakList, index: SearchIndex, *, scan: Scan | None = None, background: np.ndarray | None = None,
           elements_required: Iterable[str] = (), elements_allowed: Iterable[str] | None = None,
           elements_excluded: Iterable[str] = (), tags: Iterable[str] = (), kind: str | None = None,
           top: int = 20, d_scale: bool = True, profile_check: bool = True, shortlist: int | None = None) -> SearchResult:
    """Rank library entries against an observed peak list (module docstring).

    Parameters
    ----------
    peaks : PeakList
        Observed peaks (Kα1 positions), at least one.
    index : SearchIndex
        From :func:`refdb.match.index.load_index`.
    scan : Scan, optional
        The scan the peaks came from; enables the profile check.
    background : ndarray, shape (n,), optional
        Background of ``scan`` in counts; a rough rolling-minimum estimate when omitted.
    elements_required, elements_allowed, elements_excluded : iterable of str
        Element filters: entries must contain all of the first, only elements of the second
        (None: any), none of the third.
    tags : iterable of str
        Entries must carry all of these tags.
    kind : {"computed", "measured"}, optional
    top : int
        Number of candidates returned (after folding equivalents), ≥ 1.
    d_scale : bool
        Fit an isotropic d-scale up to ±2 % (doped, strained or thermally expanded phases).
    profile_check : bool
        Run the whole-profile check when ``scan`` is given.
    shortlist : int, optional
        Entries the prefilter passes to the detailed score; default
        max(:data:`SHORTLIST_MIN`, :data:`SHORTLIST_PER_TOP` × ``top``).

    Returns
    -------
    SearchResult

    Raises
    ------
    InputError
        Empty or unsorted peak list, unknown elements, kinds or contradictory filters, a
        background of the wrong length, ``top`` < 1.
    """
    _check_peaks(peaks)
    if top < 1:
        raise InputError(f"top must be at least 1, not {top}")
    filters = make_filters(elements_required=elements_required, elements_allowed=elements_allowed,
                           elements_excluded=elements_excluded, tags=tags, kind=kind)
    bg = _scan_arrays(scan, background)
    allowed = entry_filter(index, filters)
    width = width_model(peaks)
    d_range = _d_range(peaks)
    notes: list[str] = []
    if shortlist is not None and shortlist < 1:
        raise InputError("the shortlist must hold at least one entry")
    n_short = shortlist if shortlist is not None else max(SHORTLIST_MIN, SHORTLIST_PER_TOP * top)
    short = prefilter(peaks, index, allowed, d_scale=d_scale, width=width, d_range=d_range, keep=n_short)
    ranked: list[Candidate] = []
    checked = False
    if short.rows.size:
        lines, sc, final, corr = _score_rows(
            peaks, index, short.rows, short.d_scale, d_scale=d_scale, width=width, scan=scan, background=bg,
            n_profile=max(PROFILE_CHECKED, min(top, 50)) if (profile_check and scan is not None) else 0,
        )
        checked = bool(np.isfinite(corr).any())
        useful = np.flatnonzero((final > 0) | (sc.n_matched > 0))
        # Profile-checked candidates first (ranked by the final score), then the rest by S₁.
        order = useful[np.lexsort((short.rows[useful], -final[useful], ~np.isfinite(corr[useful])))]
        pos_of = {int(r): i for i, r in enumerate(short.rows)}
        for row, eq in group_rows(index, short.rows[order], top):
            i = pos_of[row]
            ranked.append(_make_candidate(index, row, i, lines, sc, float(final[i]),
                                          corr[i] if np.isfinite(corr[i]) else None,
                                          tuple(int(index.entry_id[r]) for r in eq)))
    if len(peaks) < 3:
        notes.append("fewer than 3 peaks: identifications rest on very little evidence")
    n_tied = tied_leaders(ranked)
    if n_tied > 1:
        notes.append(
            f"the first {n_tied} candidates explain the same peaks and score within {TIE_POINTS:.0f} points of "
            "each other: the pattern cannot tell them apart (isostructural phases, cells within the fitted "
            "d-scale); the elements present can — filter by them"
        )
    return SearchResult(
        candidates=tuple(ranked),
        n_considered=int(allowed.sum()),
        n_entries=index.n_entries,
        filters=filters,
        radiation=peaks.radiation,
        two_theta_range=(float(peaks.two_theta_range[0]), float(peaks.two_theta_range[1])),
        d_range=d_range,
        n_peaks=len(peaks),
        width=width,
        profile_checked=checked,
        notes=tuple(notes),
        n_tied=n_tied,
    )


def tied_leaders(candidates: Sequence[Candidate]) -> int:
    """How many leading candidates, the first included, the data cannot tell apart.

    A candidate is tied with the first when its score is within :data:`TIE_POINTS` of the
    first's and the observed peaks the two match overlap by at least :data:`TIE_SAME_PEAKS`
    (Jaccard index); counting stops at the first candidate that is not tied.
    """
    if not candidates:
        return 0
    first = candidates[0]
    peaks0 = set(first.matched[:, 0].tolist())
    n = 1
    for c in candidates[1:]:
        peaks = set(c.matched[:, 0].tolist())
        overlap = len(peaks0 & peaks) / max(len(peaks0 | peaks), 1)
        if first.score - c.score > TIE_POINTS or overlap < TIE_SAME_PEAKS:
            break
        n += 1
    return n


def score_entries(peaks: PeakList, index: SearchIndex, entry_ids: Sequence[int], *, scan: Scan | None = None,
                  background: np.ndarray | None = None, d_scale: bool = True,
                  profile_check: bool = False) -> tuple[Candidate, ...]:
    """Score given entries against a peak list with the search's figure of merit.

    For mixture decomposition and for explaining why an expected phase ranks where it does.
    No prefilter, no filters and no folding of equivalents; the result follows the order of
    ``entry_ids``.

    Raises
    ------
    InputError
        Empty or unsorted peak list.
    LibraryError
        An entry id not in the index.
    """
    _check_peaks(peaks)
    rows = index.row_of(entry_ids)
    bg = _scan_arrays(scan, background) if profile_check else None
    width = width_model(peaks)
    _key, eps0 = scale_votes(peaks, index, rows, width=width, d_scale=d_scale, d_range=_d_range(peaks))
    if rows.size == 0:
        return ()
    lines, sc, final, corr = _score_rows(peaks, index, rows, eps0, d_scale=d_scale, width=width,
                                         scan=scan if profile_check else None, background=bg,
                                         n_profile=rows.size if profile_check else 0)
    return tuple(
        _make_candidate(index, int(row), i, lines, sc, float(final[i]), corr[i] if np.isfinite(corr[i]) else None)
        for i, row in enumerate(rows)
    )
