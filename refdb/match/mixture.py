"""Mixture decomposition: which library phases a scan contains, how much, and what is left.

Procedure (:func:`decompose`)
-----------------------------
1. Find the scan's peaks (:func:`refdb.scan.peaks.find_peaks`) and estimate the background
   (SNIP, :func:`refdb.match.refine.snip_background`) and the instrument width (Caglioti
   function fitted to the peak widths).
2. Round by round: search the library with the peaks not yet explained
   (:func:`refdb.match.search.search`), fit each of the leading candidates together with the
   phases already accepted (scales only, at the candidate's own d-scale), and refine them in
   order of the improvement in χ² they bring: the close contenders (within
   :data:`CONTENDER_SHARE` of the best improvement) :data:`REFINED_PER_ROUND` at a time, the
   rest one by one. A close contender is not refined when its scale-only χ² lies above the
   group's best refined χ² by more than :data:`CONTENDER_REACH` times the largest drop a
   refinement brought in that group (and the threshold): refinement moves lines by
   hundredths of a degree and cannot close such a gap. Of a group that pass the acceptance
   test below, the one with the lowest refined χ² is added (each
   trial refines the whole mixture with :func:`refdb.match.refine.refine_mixture`), and the
   scan's peaks that the refined mixture does not account for (net counts above the
   calculated ones by 3σ and by :data:`MISFIT_FRACTION`) feed the next round's search; the
   search's profile check compares candidates with the scan minus the calculated phases.
   When none of a group passes but one was turned down only because its present lines all
   fall on the reflections of an accepted phase (a lattice objection, below), the two may be
   entries of one lattice with different intensities: the accepted one is replaced by the
   candidate when that lowers χ² with as many parameters and the candidate passes in the
   swapped fit (:func:`_swap_trial`).
3. Stop when no candidate passes, no significant residual peak is left, or ``max_phases``
   are accepted. Then, on the joint fit, drop one at a time (weakest first) any phase that
   no longer passes: its removal costs no more than the threshold, or its own lines no
   longer stand (a phase accepted early can be made redundant by later ones).
4. Optional preferred orientation (:func:`_try_texture`), the final checks again, and the
   stand-in check (:func:`_drop_stand_ins`): a phase whose reflections carry the
   unexplained peaks but with other intensities is a phase of its structure type that the
   library lacks; it is dropped and a note names the lattice.
5. Weight fractions (:mod:`refdb.match.quant`), detection limits (:mod:`refdb.match.detection`)
   and the peaks of the final residual ("unexplained peaks").

Acceptance test
---------------
A phase is accepted only when both hold:

* **Information criterion.** Its improvement of the weighted residual, rescaled by the
  goodness of fit so that a systematically imperfect model does not buy phases,
  ``Δχ² / max(GoF, 1)``, exceeds the Bayesian information criterion penalty
  ``k · ln(n)`` for the k = 3 parameters it adds (scale, d-scale, width) over n scan points
  (Schwarz 1978, Ann. Stat. 6, 461), and also exceeds ``min_delta_chi2`` (default 25, a
  5σ-equivalent improvement).
* **Its own strong lines are there.** For each of its :data:`STRONG_LINES_CHECKED` strongest
  lines (by refined height in counts) that stands at least 3σ above the noise, the net
  observed counts within ±½ FWHM (observed minus all other phases and background) must reach
  at least :data:`LINE_PRESENT_RATIO` of what the phase predicts there. A phase whose
  strongest line is missing, or with more than a quarter of its strong lines missing, is
  rejected; so is a phase with fewer than :data:`STRONG_LINES_CHECKED` strong lines of which
  one is clearly absent (net counts below :data:`ABSENT_RATIO` of a prediction at least
  :data:`ABSENT_SIGMA` standard deviations above the noise): a fitted shift and d-scale can
  put two or three lines of a simple lattice on another phase's peaks, but not all of them.
  At least :data:`MIN_OWN_LINES` of the present lines must be its *own*: lines
  where it gives at least :data:`OWN_LINE_SHARE` of the calculated counts, so that its
  evidence does not rest only on peaks that other phases also explain (a high-symmetry
  phase with few lines can otherwise hide in the lines of others). At least
  :data:`MIN_RESOLVED_LINES` present line must lie apart from every line that another
  identified phase draws. Lines are counted once per reflection: the Kα2 (or Kβ) maximum of a
  stronger line is not a line of its own.
* **Not a patch on another phase's lattice.** When every present line of the phase falls on
  a reflection (however weak) of one other identified phase, and chance is an unlikely
  explanation given how dense that phase's reflections are, the phase is rejected
  (:func:`_lattice_objection`): it only adds intensity where the other phase's intensities
  are wrong — the signature of an isostructural stand-in for a phase missing from the library.

So a phase absent from the library leaves its peaks unexplained rather than being forced onto
an entry that shares lines with it. The same tests are repeated on the final fit (after the
optional texture step), weakest phase first.

References: Hill & Howard (1987) J. Appl. Cryst. 20, 467 (weight fractions); Chung (1974)
J. Appl. Cryst. 7, 519 (reference intensity ratios); Golub & Pereyra (1973) SIAM J. Numer.
Anal. 10, 413 (variable projection).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any, Protocol

import numpy as np

from refdb.errors import InputError
from refdb.match.detection import DetectionLimit, detection_limits
from refdb.match.quant import METHODS, Quantification, quantify
from refdb.match.refine import (
    PhaseStart,
    RefinementResult,
    LinearSolver,
    _chebyshev_basis,
    caglioti_from_widths,
    phase_profile,
    refine_mixture,
    snip_background,
)
from refdb.radiation import Radiation
from refdb.records import ReferenceEntry
from refdb.report.caution import CAUTION
from refdb.scan.profile_fit import line_centers
from refdb.scan.types import PeakList, Scan

#: Parameters a phase adds to the model (scale, d-scale, width factor).
PARAMETERS_PER_PHASE = 3
#: Candidates refined side by side per round before the best passing one is taken. Six rather
#: than three: isostructural candidates (CeO₂ and UO₂) have close scale-only gains in any
#: order, and the right one must be refined alongside (benchmark: 3–10 wt % recall 86.1 →
#: 87.5 %, false phases 0.083 → 0.067 per scan, median time unchanged).
REFINED_PER_ROUND = 6
#: Function evaluations of the refinement that judges a candidate (the joint fits after the
#: rounds get 40; the phases already accepted start from their refined values).
TRIAL_EVALUATIONS = 20
#: Trials whose scale-only gain reaches this share of the round's best are close contenders.
CONTENDER_SHARE = 0.7
#: A close contender is refined only while its scale-only χ² is within this many times the
#: largest χ² drop a refinement brought in its group (at least the acceptance threshold) of
#: the group's best refined χ². On 60 scans of the batch benchmark, refining every contender,
#: the 115 refined after a group's first lay 4.7–760 times (median 38) that drop behind the
#: best one refined before them (isostructural cubic phases: CeO₂, UO₂, GaP, ZnS; MgO, δ-Fe,
#: V), and none of them fitted best; the mixture benchmark is unchanged on seeds 7 and 2026.
CONTENDER_REACH = 3.0
#: Entries given the detailed score in the searches of the residual (after the first phase).
#: The prefilter ranks by the strongest observed peaks; in a residual those often belong to a
#: phase missing from the library, and a minor phase's lines then win it too few votes for
#: the default shortlist of 100 (benchmark, 3–10 wt % recall, seeds 2026 / 7 / 100k-entry
#: index: 88.9 / 90.3 / 69.6 % → 93.1 / 88.7 / 78.3 %; false phases 0.050 / 0.100 / 0.100 →
#: 0.050 / 0.083 / 0.100 per scan; the 1,000-scan batch took 140 s instead of 114–121 s, 121–122 s
#: after the refinement stopped solving the scales twice per step).
RESIDUAL_SHORTLIST = 600
#: Strongest lines of a phase examined for presence.
STRONG_LINES_CHECKED = 8
#: A candidate with at least this many strong lines checked and at most a third of them
#: present on its scale-only fit is turned away unrefined (:meth:`_Context.hopeless`).
HOPELESS_MIN_CHECKED = 3
#: Net observed / predicted counts a line needs to count as present.
LINE_PRESENT_RATIO = 0.4
#: A strong line is clearly absent when its net observed counts stay below this share of the
#: prediction while the prediction stands :data:`ABSENT_SIGMA` standard deviations above the
#: noise (its absence is then itself ≥ 8.5σ). A phase with fewer than
#: :data:`STRONG_LINES_CHECKED` strong lines may not have one: fitted shift and d-scale can
#: line up two or three lines of a simple lattice with a phase missing from the library, but
#: not all of them. Mixture benchmark, seeds 2026 / 7 / 3 / 11, final fits: every false hcp
#: Zr or Np phase (13 of the 21 false phases) had one of its four strong lines at 18–100σ with
#: −0.05 to 0.07 of its counts; of the true phases with fewer than eight strong lines, the
#: least present line held 0.22 of its counts.
ABSENT_RATIO = 0.15
ABSENT_SIGMA = 10.0
#: A line is the phase's "own" where it gives at least this share of the calculated counts.
OWN_LINE_SHARE = 0.5
#: Present own lines a phase needs (its evidence must not rest only on other phases' lines).
#: Requiring one when only two lines stand above 3σ found one more minor phase in 72 of the
#: benchmark but tripled the false phases in scans without an absent phase (0.024 → 0.073).
MIN_OWN_LINES = 2
#: Present lines a phase needs that lie apart (> ½ FWHM) from every line another identified
#: phase draws 3σ above the noise. A phase whose lines all coincide with another's is evidenced
#: by intensity alone — what an isostructural stand-in for a phase missing from the library
#: leaves behind (a bcc metal on a spinel's or a rock salt's even lines).
MIN_RESOLVED_LINES = 1
#: Largest chance probability (module docstring of :func:`_lattice_objection`) of one phase's
#: reflections covering all present lines of another that still counts as chance.
COINCIDENCE_CHANCE = 0.01
#: Half-width (degrees 2θ) of the window in which a phase's reflection density is counted.
DENSITY_HALF_WINDOW = 2.0
#: A residual peak on an identified line must exceed this fraction of the line's height.
MISFIT_FRACTION = 0.10
#: Standard deviations a residual peak needs to be reported as unexplained.
UNEXPLAINED_SIGMA = 5.0
#: Unexplained peaks listed at most.
MAX_UNEXPLAINED = 15


class LibraryLike(Protocol):
    """What decomposition needs from a library (``refdb.library.Library`` has it)."""

    def get_many(self, ids: Iterable[int]) -> list[ReferenceEntry]: ...
    def stamp(self) -> str: ...


@dataclass(frozen=True)
class Evidence:
    """Why a phase was accepted.

    Attributes
    ----------
    delta_chi2 : float
        Improvement of χ² when the phase was added, divided by max(GoF, 1).
    threshold : float
        What it had to exceed: max(k·ln n, ``min_delta_chi2``).
    lines_present, lines_checked : int
        Strong lines found / examined (see module docstring).
    search_score : float
        Figure of merit of the library search in the round it was found (0–100).
    round : int
        Round of the decomposition in which it was accepted (1 = first).
    text : str
        The same, as one sentence.
    """

    delta_chi2: float
    threshold: float
    lines_present: int
    lines_checked: int
    search_score: float
    round: int
    text: str


@dataclass(frozen=True, eq=False)
class MixturePhase:
    """One identified phase with its refined parameters and weight fraction.

    ``weight_fraction`` is 0–1 on the basis of :attr:`MixtureResult.quantification`
    (NaN when the phase cannot be quantified); uncertainties are 1σ. ``line_two_theta``
    (degrees) and ``line_intensity`` (strongest = 100), shape (L,), are the phase's primary
    (Kα1) lines inside the scan at the refined d-scale and shift, for drawing.
    """

    name: str
    formula: str
    entry_id: int | None
    source_id: str | None
    weight_fraction: float
    u_weight_fraction: float
    scale: float
    u_scale: float
    zero_shift: float
    displacement: float
    d_scale: float
    u_d_scale: float
    width_scale: float
    evidence: Evidence
    is_standard: bool = False
    line_two_theta: np.ndarray = field(default_factory=lambda: np.zeros(0))
    line_intensity: np.ndarray = field(default_factory=lambda: np.zeros(0))


@dataclass(frozen=True)
class Rejection:
    """A candidate that was fitted and turned down, with the reason."""

    name: str
    formula: str
    entry_id: int
    reason: str


@dataclass(frozen=True, eq=False)
class MixtureResult:
    """Outcome of :func:`decompose`.

    Attributes
    ----------
    phases : tuple of MixturePhase
        In order of decreasing weight fraction.
    fit : RefinementResult or None
        Final refinement (observed, calculated, background, per-phase profiles); None when no
        phase was accepted.
    quantification : Quantification or None
    unexplained : PeakList
        Residual peaks above the noise after the final refinement, strongest first (at most
        :data:`MAX_UNEXPLAINED`).
    detection_limits : tuple of DetectionLimit
        For the accepted phases and every candidate that was fitted and rejected.
    rejected : tuple of Rejection
    parameters : dict
        Processing parameters (JSON-ready).
    library_stamp : str
    scan_source : str
    radiation : str
    caution : str
    """

    phases: tuple[MixturePhase, ...]
    fit: RefinementResult | None
    quantification: Quantification | None
    unexplained: PeakList
    detection_limits: tuple[DetectionLimit, ...]
    rejected: tuple[Rejection, ...]
    parameters: dict[str, Any]
    library_stamp: str
    scan_source: str
    radiation: str
    caution: str = CAUTION
    notes: tuple[str, ...] = field(default=())

    @property
    def rwp(self) -> float:
        return self.fit.rwp if self.fit else float("nan")

    @property
    def gof(self) -> float:
        return self.fit.gof if self.fit else float("nan")

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready description (the ``--json`` contract of ``refdb unmix``)."""
        return mixture_as_dict(self)


def decompose(
    scan: Scan,
    library: LibraryLike,
    *,
    index: Any = None,
    elements_required: Iterable[str] = (),
    elements_allowed: Iterable[str] | None = None,
    elements_excluded: Iterable[str] = (),
    tags: Iterable[str] = (),
    kind: str | None = None,
    max_phases: int = 6,
    candidates_per_round: int = 12,
    min_significance: float = 3.5,
    min_delta_chi2: float = 25.0,
    quant_method: str = "auto",
    standard: tuple[int, float] | None = None,
    background_degree: int = 3,
) -> MixtureResult:
    """Identify and quantify the phases of a scan (module docstring).

    Parameters
    ----------
    scan : Scan
    library : Library
        Gives the entries (``get_many``) and, unless ``index`` is given, the search index.
    index : SearchIndex, optional
        A prebuilt index (default :func:`refdb.match.index.load_index` of ``library``).
    elements_required, elements_allowed, elements_excluded, tags, kind
        Search filters, as in :func:`refdb.match.search.search`.
    max_phases : int
        At most this many phases, 1–12. Default 6.
    candidates_per_round : int
        Leading search candidates tried per round (a scale-only fit each; only those that
        improve χ² enough are refined). Default 12.
    min_significance : float
        Peak-search threshold (σ) for scan and residual peaks. Default 3.5.
    min_delta_chi2 : float
        Smallest (GoF-rescaled) χ² improvement a phase must bring. Default 25.
    quant_method : str
        ``auto``, ``cell`` or ``rir`` (:mod:`refdb.match.quant`).
    standard : (entry_id, weight_fraction), optional
        An internal standard mixed into the specimen: it is fitted from the start and makes
        the fractions absolute, with the amorphous/unidentified rest reported.
    background_degree : int
        Chebyshev degree refined on top of the SNIP background. Default 3.

    Returns
    -------
    MixtureResult

    Raises
    ------
    InputError
        Bad options, or a standard that is not in the library.
    LibraryError
        The library cannot be read.
    """
    from refdb.match.search import search
    from refdb.scan.peaks import find_peaks

    if quant_method.strip().lower() not in METHODS:
        raise InputError(f"unknown quantification method {quant_method!r}", f"choose one of {', '.join(METHODS)}")
    if not 1 <= max_phases <= 12:
        raise InputError(f"max_phases must be 1–12, not {max_phases}")
    if candidates_per_round < 1:
        raise InputError("candidates_per_round must be at least 1")
    if index is None:
        from refdb.match.index import load_index

        index = load_index(library)
    filters = {
        "elements_required": tuple(elements_required),
        "elements_allowed": None if elements_allowed is None else tuple(elements_allowed),
        "elements_excluded": tuple(elements_excluded),
        "tags": tuple(tags),
        "kind": kind,
    }
    peaks_all = find_peaks(scan, min_significance=min_significance)
    background = snip_background(scan)
    caglioti = caglioti_from_widths(peaks_all.peaks.two_theta, peaks_all.peaks.fwhm)
    n = len(scan)
    threshold = max(PARAMETERS_PER_PHASE * math.log(n), min_delta_chi2)
    ctx = _Context(scan, background, caglioti, background_degree, threshold)

    refs: list[ReferenceEntry] = []
    starts: list[PhaseStart] = []
    evidence: list[Evidence] = []
    rejected: dict[int, Rejection] = {}
    notes: list[str] = list(peaks_all.warnings)
    std_index = None
    if standard is not None:
        std_id = standard[0]
        got = library.get_many([int(std_id)])
        if not got:
            raise InputError(f"internal standard entry {std_id} is not in the library", "see `refdb list`")
        refs.append(got[0])
        starts.append(PhaseStart())
        evidence.append(Evidence(float("nan"), threshold, 0, 0, float("nan"), 0, "declared internal standard"))
        std_index = 0
    fit = ctx.refine(refs, starts) if refs else None
    chi2_now = fit.chi2 if fit else ctx.chi2_background_only()

    n_std = 0 if std_index is None else 1
    final_no: set[int] = set()  # turned down on a refined fit: not tried again
    rnd = 0
    while len(refs) - n_std < max_phases:
        rnd += 1
        peaks = ctx.residual_peaks(peaks_all.peaks, fit)
        if len(peaks) == 0:
            break
        taken = {r.id for r in refs}
        rest = ctx.residual_scan(fit)
        result = search(
            peaks, index, **filters, top=candidates_per_round + len(taken), scan=rest,
            shortlist=None if fit is None else RESIDUAL_SHORTLIST,
            background=np.clip(np.minimum(ctx.background, rest.counts), 0.0, None) if fit is None else
            np.clip(fit.background, 0.0, None),
        )
        # A candidate whose scale-only gain fell short may be tried again once the fit has
        # changed (a shift refined with a wrong first phase can hide a real one); one turned
        # down on its refined fit or its lines is not.
        cands = [c for c in result.candidates if c.entry_id not in taken and c.entry_id not in final_no][
            :candidates_per_round
        ]
        if not cands:
            break
        entries = {e.id: e for e in library.get_many([c.entry_id for c in cands])}
        trials = []
        for c in cands:  # a handful of scale-only trials per round
            ref = entries.get(c.entry_id)
            if ref is None:
                continue
            st = PhaseStart(zero_shift=c.zero_shift, displacement=c.displacement, d_scale=1.0 + c.d_scale)
            gain = ctx.gain_with(fit, chi2_now, ref, st)
            if fit is not None and fit.phases:
                # The specimen's shift is shared and already refined: prefer it, unless the
                # candidate's own fitted shift does better (the shared one can be off).
                shared = replace(st, zero_shift=fit.phases[0].zero_shift, displacement=fit.phases[0].displacement)
                gain_shared = ctx.gain_with(fit, chi2_now, ref, shared)
                if gain_shared >= gain:
                    gain, st = gain_shared, shared
            trials.append((gain, c, ref, st))
        trials.sort(key=lambda t: -t[0])
        # Refine the leading trials in groups of REFINED_PER_ROUND and keep the passing one with
        # the lowest χ²: scale-only gains rank candidates roughly, and an isostructural entry
        # with a stretched cell can come first although another fits better once refined.
        accepted = False
        top_gain = trials[0][0] if trials else 0.0
        close, others = [], []
        for gain, c, ref, st in trials:
            if gain <= threshold:
                rejected[c.entry_id] = Rejection(c.name, c.formula, c.entry_id, f"Δχ²/GoF {gain:.0f} not above {threshold:.0f}")
            else:
                (close if gain >= CONTENDER_SHARE * top_gain else others).append((gain, c, ref, st))
        # Close contenders (scale-only gain within CONTENDER_SHARE of the best) are refined
        # side by side; the others one at a time, in order.
        groups = [close[g0 : g0 + REFINED_PER_ROUND] for g0 in range(0, len(close), REFINED_PER_ROUND)]
        groups += [[o] for o in others]
        gof_floor = ctx.gof_floor(fit)
        for group in groups:
            best = swap = None
            drop = ctx.threshold * gof_floor  # largest χ² drop by refinement in the group
            for gain, c, ref, st in group:
                before = chi2_now - gain * gof_floor  # scale-only χ²
                if best is not None and before - best[0].chi2 > CONTENDER_REACH * drop:
                    continue  # out of reach of the best refined contender (see CONTENDER_REACH)
                carried = _carry(fit, starts)
                hopeless = ctx.hopeless(refs, carried, ref, st)
                if hopeless:
                    rejected[c.entry_id] = Rejection(c.name, c.formula, c.entry_id, hopeless)
                    final_no.add(c.entry_id)
                    continue
                trial_fit = ctx.refine(refs + [ref], carried + [st], evaluations=TRIAL_EVALUATIONS)
                drop = max(drop, before - trial_fit.chi2)
                verdict = ctx.judge(trial_fit, refs + [ref], len(refs), chi2_now)
                if not verdict.ok:
                    rejected[c.entry_id] = Rejection(c.name, c.formula, c.entry_id, verdict.reason)
                    final_no.add(c.entry_id)
                    if swap is None and verdict.covered_by not in (None, std_index):
                        found = _swap_trial(ctx, refs, carried, trial_fit, verdict.covered_by, ref, st, chi2_now)
                        if found is not None:
                            swap = (*found, c, ref)
                elif best is None or trial_fit.chi2 < best[0].chi2:
                    best = (trial_fit, verdict, c, ref, st)
            if best is not None:
                trial_fit, verdict, c, ref, st = best
                refs.append(ref)
                starts = _carry(trial_fit, starts + [st])
                evidence.append(verdict.evidence(c.score, rnd))
            elif swap is not None:
                # Same number of phases, lower χ²: the candidate's intensities fit where the
                # accepted phase's lattice alone did.
                trial_fit, sw_starts, verdict, q, c, ref = swap
                old = refs[q]
                rejected[old.id] = Rejection(
                    old.name, old.formula, old.id,
                    f"replaced by {ref.name}, whose lines fall on its reflections with intensities that fit "
                    f"better (χ² {chi2_now:.0f} → {trial_fit.chi2:.0f}, same number of parameters)",
                )
                final_no.add(old.id)
                refs[q] = ref
                starts = _carry(trial_fit, sw_starts)
                ev = verdict.evidence(c.score, rnd)
                evidence[q] = replace(ev, text=f"{ev.text}; took the place of {old.name} (same reflections, "
                                               f"intensities fit better)")
            else:
                continue
            rejected.pop(c.entry_id, None)  # turned down earlier: a low gain, or the objection a swap answers
            fit, chi2_now = trial_fit, trial_fit.chi2
            accepted = True
            break
        if not accepted:
            break

    fit, starts = _drop_unsupported(ctx, refs, starts, evidence, fit, rejected, std_index)
    if fit is not None and refs:
        fit, starts, evidence = _try_texture(
            ctx, peaks_all.peaks, refs, starts, evidence, fit, std_index,
            threshold=max(math.log(n), min_delta_chi2),
        )
        # Texture changes the intensities other phases were accepted to make up for: check again.
        fit, starts = _drop_unsupported(ctx, refs, starts, evidence, fit, rejected, std_index)
        fit, starts = _drop_stand_ins(ctx, peaks_all.peaks, refs, starts, evidence, fit, rejected, std_index, notes)

    return _assemble(scan, library, ctx, peaks_all.peaks, refs, evidence, fit, rejected, std_index, standard,
                     quant_method, min_significance, filters, max_phases, notes)


def _swap_trial(ctx, refs, carried, trial_fit, q, ref, start, chi2_now):
    """Refit with accepted phase q replaced by ``ref`` (last phase of ``trial_fit``), whose
    present lines all fall on q's reflections.

    Two entries of one lattice (fluorite and AlP, two spinels) explain the same peak
    positions; whichever is accepted first makes the other look like a patch on its misfit.
    The swapped fit has as many parameters as the current one, so it is kept when its χ² is
    lower and ``ref`` passes the acceptance test in it (its Δχ² measured by removing it,
    scales of the others refitted). Returns ``(fit, starts, verdict, q)`` or ``None``.
    """
    sw_refs = list(refs)
    sw_refs[q] = ref
    sw_starts = list(carried)
    sw_starts[q] = _carry(trial_fit, list(carried) + [start])[-1]
    sw_fit = ctx.refine(sw_refs, sw_starts, evaluations=TRIAL_EVALUATIONS)
    if sw_fit.chi2 >= chi2_now:
        return None
    verdict = ctx.judge(sw_fit, sw_refs, q, sw_fit.chi2 + ctx.gain_of(sw_fit, q) * ctx.gof_floor(sw_fit))
    return (sw_fit, sw_starts, verdict, q) if verdict.ok else None


def _drop_unsupported(ctx, refs, starts, evidence, fit, rejected, std_index):
    """Final check on the joint fit: drop, weakest first, phases that later ones made redundant
    or whose own lines no longer stand (never the declared standard).

    ``refs``, ``evidence`` and ``rejected`` are updated in place; returns the new fit and
    starting values.
    """
    while fit is not None and len(refs) > (1 if std_index is not None else 0):
        worst, worst_gain, why = None, math.inf, ""
        for p in range(len(refs)):
            if p == std_index:
                continue
            gain = ctx.gain_of(fit, p)
            lc = _check_lines(fit, p, ctx.scan.radiation)
            objection = _line_objection(lc) or _lattice_objection(fit, refs, p, lc, ctx.scan)[0]
            if (gain <= ctx.threshold or objection) and gain < worst_gain:
                worst, worst_gain = p, gain
                why = objection or f"redundant once other phases were refined (Δχ²/GoF {gain:.0f})"
        if worst is None:
            break
        e = refs[worst]
        rejected[e.id] = Rejection(e.name, e.formula, e.id, why)
        starts = _carry(fit, starts)
        del refs[worst], starts[worst], evidence[worst]
        fit = ctx.refine(refs, starts) if refs else None
    return fit, starts


#: At most this many phases are given a preferred orientation.
MAX_TEXTURED = 2


def _try_texture(ctx, peaks, refs, starts, evidence, fit, std_index, *, threshold):
    """Preferred orientation for phases whose strongest misfit sits on one of their lines.

    Platy or needle-like crystals (lepidocrocite, micas, calcite on its cleavage) lie in the
    holder with one zone favoured, so one family of lines is too strong for a random powder.
    When the strongest unexplained peak lies on a line of an identified phase (within half a
    FWHM), that phase is refined with a March–Dollase factor along the line's normal (Dollase
    1986, J. Appl. Cryst. 19, 267). One parameter is added, so the χ² improvement must beat
    the same information-criterion threshold (here ``max(ln n, min_delta_chi2)``); otherwise
    the fit is kept as it was. At most :data:`MAX_TEXTURED` phases are textured.
    """
    from refdb.profiles import caglioti_fwhm
    from refdb.structure import stick_pattern

    tried: set[int] = set()
    for _ in range(MAX_TEXTURED):
        left = ctx.residual_peaks(peaks, fit)
        if len(left) == 0:
            break
        k = int(np.argmax(left.height))
        tt = float(left.two_theta[k])
        width = float(caglioti_fwhm(tt, *ctx.caglioti))
        j = int(np.clip(np.searchsorted(fit.two_theta, tt), 0, len(fit.two_theta) - 1))
        share = fit.phase_profiles[:, j]
        order = [int(p) for p in np.argsort(-share) if p != std_index and p not in tried and share[p] > 0]
        if not order:
            break
        p = order[0]
        tried.add(p)
        ref, ph = refs[p], fit.phases[p]
        if ref.lines.hkl is None or ref.cell is None:
            continue
        lo, hi = float(fit.two_theta[0]), float(fit.two_theta[-1])
        sticks = stick_pattern(ref.lines, ctx.scan.radiation, two_theta_range=(lo, hi))
        primary = np.asarray(sticks.line_name) == sticks.line_name[0]
        pos = ctx.scan.radiation.two_theta(sticks.d * ph.d_scale)
        near = primary & (np.abs(pos - tt) <= 0.5 * width)
        if not near.any():
            continue
        axis = tuple(int(v) for v in sticks.hkl[np.flatnonzero(near)[np.argmax(sticks.intensity[near])]])
        if axis == (0, 0, 0):
            continue
        trial_starts = _carry(fit, starts)
        trial_starts[p] = replace(trial_starts[p], texture_axis=axis)
        trial = ctx.refine(refs, trial_starts)
        gain = (fit.chi2 - trial.chi2) / ctx.gof_floor(fit)
        if gain <= threshold:
            continue
        r = trial.phases[p].texture_ratio
        evidence = list(evidence)
        ev = evidence[p]
        evidence[p] = replace(
            ev, text=ev.text + f"; preferred orientation along {' '.join(map(str, axis))}, "
            f"March–Dollase r = {r:.2f} (Δχ²/GoF = {gain:.0f})"
        )
        fit, starts = trial, trial_starts
    return fit, starts, evidence


@dataclass
class _Verdict:
    ok: bool
    reason: str
    delta: float
    threshold: float
    present: int
    checked: int
    own: int = 0
    covered_by: int | None = None  # the phase whose reflections carry all its present lines

    def evidence(self, score: float, rnd: int) -> Evidence:
        text = (
            f"adds Δχ²/GoF = {self.delta:.0f} (needed > {self.threshold:.0f}); "
            f"{self.present} of {self.checked} strongest lines present, {self.own} of them its own; "
            f"search score {score:.0f}"
        )
        return Evidence(self.delta, self.threshold, self.present, self.checked, float(score), rnd, text)


class _Context:
    """What every fit of one decomposition shares: scan, background, widths, threshold."""

    def __init__(self, scan, background, caglioti, degree, threshold):
        self.scan = scan
        self.background = background
        self.caglioti = caglioti
        self.degree = degree
        self.threshold = threshold
        self.eta = 0.5  # pseudo-Voigt mixing of the latest full refinement
        # What every scale-only solve shares: the net counts, and weights and background basis.
        self._linear = LinearSolver(_chebyshev_basis(scan.two_theta, degree),
                                    1.0 / np.clip(scan.sigma, 1e-6, None) ** 2, scan.counts - background)

    def refine(self, refs, starts, *, quick: bool = False, evaluations: int = 40) -> RefinementResult:
        fit = refine_mixture(
            self.scan, refs, starts=starts, background=self.background, background_degree=self.degree,
            caglioti=self.caglioti, refine=not quick, max_evaluations=evaluations, eta=self.eta,
        )
        if not quick:
            self.eta = fit.eta
        return fit

    def hopeless(self, refs, starts, ref, start: PhaseStart) -> str:
        """Why ``ref`` need not be refined at all, or ``""``: at its starting shift and d-scale
        (the search's), with every scale fitted, none of its lines stands 3σ above the noise,
        or at most a third of its strong lines (three or more) are present.

        A refinement moves lines by a few hundredths of a degree and cannot make up for that,
        and it costs about ten times the scale-only fit. On the mixture benchmark (seed 2026,
        60 scans) this turned 115 of 738 candidates away unrefined, with recall, false phases
        and weight fractions unchanged on seeds 2026 and 7.
        """
        quick = self.refine(list(refs) + [ref], list(starts) + [start], quick=True)
        lc = _check_lines(quick, len(refs), self.scan.radiation)
        if lc.checked == 0:
            return "no line stands 3σ above the noise at its best scale (before refinement)"
        if lc.checked >= HOPELESS_MIN_CHECKED and lc.present <= lc.checked / 3:
            return f"only {lc.present} of {lc.checked} strong lines present (before refinement)"
        return ""

    def residual_scan(self, fit: RefinementResult | None) -> Scan:
        """The scan minus the calculated phases of ``fit`` (background kept), clipped at zero:
        what the search's profile check should compare candidates with."""
        if fit is None or not fit.phases:
            return self.scan
        counts = np.clip(self.scan.counts - fit.phase_profiles.sum(axis=0), 0.0, None)
        return replace(self.scan, counts=counts)

    def _chi2(self, cols: np.ndarray) -> float:
        """χ² of the best non-negative combination of ``cols`` plus the background."""
        return self._linear.chi2(cols)

    def _unit_columns(self, fit: RefinementResult) -> list[np.ndarray]:
        return [p.profile / p.scale if p.scale > 0 else np.zeros_like(p.profile) for p in fit.phases]

    def gain_with(self, fit: RefinementResult | None, chi2_now: float, ref, start: PhaseStart) -> float:
        """Δχ²/max(GoF, 1) from adding ``ref`` at ``start`` (shift and d-scale) to ``fit``, the
        other phases' profiles fixed."""
        cols = self._unit_columns(fit) if fit is not None else []
        cols.append(phase_profile(
            ref, self.scan.two_theta, self.scan.radiation, zero_shift=start.zero_shift,
            displacement=start.displacement, d_scale=start.d_scale, caglioti=self.caglioti, eta=self.eta,
        ))
        return (chi2_now - self._chi2(np.column_stack(cols))) / self.gof_floor(fit)

    def gain_of(self, fit: RefinementResult, p: int) -> float:
        """Δχ²/max(GoF, 1) that phase p of ``fit`` brings (the others' profiles fixed)."""
        cols = [c for i, c in enumerate(self._unit_columns(fit)) if i != p]
        chi2 = self._chi2(np.column_stack(cols)) if cols else self.chi2_background_only()
        return (chi2 - fit.chi2) / self.gof_floor(fit)

    def chi2_background_only(self) -> float:
        return self._chi2(np.zeros((len(self.scan), 0)))

    @staticmethod
    def gof_floor(fit: RefinementResult | None) -> float:
        return max(fit.gof, 1.0) if fit is not None else 1.0

    def residual_peaks(self, peaks: PeakList, fit: RefinementResult | None, *, k_sigma: float = 3.0) -> PeakList:
        """The scan's peaks that the phases of ``fit`` leave unexplained (module docstring).

        At each peak the net observed counts (counts − background, averaged over the point and
        its two neighbours) are compared with the phases' calculated counts; a peak stays when
        the excess exceeds ``k_sigma`` standard deviations of that average, scaled by
        √max(GoF, 1), and :data:`MISFIT_FRACTION` of the calculated counts. Its height
        becomes the excess. Without a fit the SNIP background is used and nothing is
        calculated.
        """
        if len(peaks) == 0:
            return peaks
        if fit is None or not fit.phases:
            x, obs_all, bkg, calc = self.scan.two_theta, self.scan.counts, self.background, None
            sigma, gof = self.scan.sigma, 1.0
        else:
            x, obs_all, bkg, calc = fit.two_theta, fit.observed, fit.background, fit.calculated - fit.background
            sigma, gof = fit.sigma, self.gof_floor(fit)
        i = np.clip(np.searchsorted(x, peaks.two_theta), 1, x.size - 2)
        net = obs_all - bkg
        obs = (net[i - 1] + net[i] + net[i + 1]) / 3.0
        model = np.zeros_like(obs) if calc is None else (calc[i - 1] + calc[i] + calc[i + 1]) / 3.0
        excess = obs - model
        floor = np.maximum(k_sigma * sigma[i] / np.sqrt(3.0) * math.sqrt(gof), MISFIT_FRACTION * model)
        keep = np.flatnonzero(excess > floor)
        frac = np.clip(excess[keep] / np.maximum(obs[keep], 1e-9), 0.0, 1.0)
        return _take(peaks, keep, frac)

    def judge(self, fit: RefinementResult, refs: Sequence[ReferenceEntry], p: int, chi2_before: float) -> _Verdict:
        """Acceptance test for phase ``p`` of ``fit`` (module docstring)."""
        delta = (chi2_before - fit.chi2) / max(fit.gof, 1.0)
        prof = fit.phases[p].profile
        lc = _check_lines(fit, p, self.scan.radiation)
        present, checked = lc.present, lc.checked
        if fit.phases[p].scale <= 0 or not np.any(prof / fit.sigma >= 3.0):
            return _Verdict(False, "no line stands 3σ above the noise at the fitted scale", delta, self.threshold, present, checked)
        if delta <= self.threshold:
            return _Verdict(False, f"Δχ²/GoF {delta:.0f} not above {self.threshold:.0f}", delta, self.threshold, present, checked)
        reason = _line_objection(lc)
        if reason:
            return _Verdict(False, reason, delta, self.threshold, present, checked)
        reason, q = _lattice_objection(fit, refs, p, lc, self.scan)
        if reason:
            return _Verdict(False, reason, delta, self.threshold, present, checked, covered_by=q)
        return _Verdict(True, "", delta, self.threshold, present, checked, lc.own_present)


def _line_objection(lc: _LineCheck) -> str:
    """Why the strong-line evidence of a phase is not enough, or ``""``."""
    if lc.strongest_missing:
        return "its strongest line is missing"
    if lc.checked and (lc.checked - lc.present) > lc.checked / 4:
        return f"only {lc.present} of {lc.checked} strong lines present"
    if lc.absent and lc.checked < STRONG_LINES_CHECKED:
        return (f"{lc.absent} of its {lc.checked} strong lines clearly absent (below {ABSENT_RATIO:.0%} of the "
                f"predicted counts, predicted ≥ {ABSENT_SIGMA:.0f}σ)")
    if lc.own_present < MIN_OWN_LINES:
        return (f"only {lc.own_present} of its lines present where it gives most of the calculated "
                f"intensity (needs {MIN_OWN_LINES})")
    if lc.resolved_present < MIN_RESOLVED_LINES:
        return ("every line of it that is present falls on a line of another identified phase: "
                "the extra intensity there says those lines are misfitted, not that this phase is present")
    return ""


@dataclass(frozen=True)
class _LineCheck:
    present: int  # strong lines whose net observed counts reach LINE_PRESENT_RATIO
    checked: int  # strong lines examined (≥ 3σ at the fitted scale)
    strongest_missing: bool
    own_present: int  # present lines where this phase gives ≥ OWN_LINE_SHARE of the calculated counts
    resolved_present: int = 0  # present lines with no line of another phase within ½ FWHM
    present_at: np.ndarray = field(default_factory=lambda: np.zeros(0))  # 2θ of the present lines
    absent: int = 0  # strong lines clearly absent (ABSENT_RATIO, ABSENT_SIGMA)


def _check_lines(fit: RefinementResult, p: int, radiation: Radiation) -> _LineCheck:
    """Presence of the strong lines of phase p of ``fit`` (module docstring).

    Lines are the local maxima of the phase's calculated profile; each is judged on the
    counts within ±½ FWHM of its maximum. A maximum within ½ FWHM of where the Kα2 (or Kβ)
    component of a stronger line falls is that line's satellite and is not counted again, so
    one reflection cannot pass for two lines.
    """
    prof = fit.phases[p].profile
    x = fit.two_theta
    net_calc = fit.calculated - fit.background
    net = fit.observed - (fit.calculated - prof)
    tops = _line_tops(prof)
    if tops.size == 0:
        return _LineCheck(0, 0, True, 0)
    tops = tops[np.argsort(-prof[tops])]
    step = float(np.median(np.diff(x)))
    present = checked = own = resolved = absent = 0
    present_at: list[float] = []
    strongest_missing = False
    half_pts = max(1, int(round(0.5 * _typical_fwhm(fit) / step)))
    other_tops = _visible_tops(fit, exclude=p)
    ratios = np.asarray(radiation.wavelengths[1:], dtype=float) / float(radiation.wavelengths[0])
    satellites = np.zeros(0)
    rank = -1
    for i in tops[: 4 * STRONG_LINES_CHECKED]:  # bounded: a few lines per phase
        if checked >= STRONG_LINES_CHECKED:
            break
        if np.any(np.abs(satellites - x[i]) <= half_pts * step):
            continue
        sat = line_centers(np.array([x[i]]), ratios)[0][0]
        satellites = np.concatenate([satellites, sat[np.isfinite(sat)]])
        rank += 1
        sl = slice(max(0, i - half_pts), i + half_pts + 1)
        pred = float(prof[sl].sum())
        noise = float(np.sqrt(np.sum(fit.sigma[sl] ** 2)))
        if prof[i] < 3.0 * fit.sigma[i] or pred <= 3.0 * noise:
            continue
        checked += 1
        seen = float(net[sl].sum())
        ok = seen >= LINE_PRESENT_RATIO * pred
        absent += seen < ABSENT_RATIO * pred and pred >= ABSENT_SIGMA * noise
        present += ok
        own += ok and pred >= OWN_LINE_SHARE * float(net_calc[sl].sum())
        resolved += ok and not np.any(np.abs(other_tops - i) <= half_pts)
        if ok:
            present_at.append(float(x[i]))
        if rank == 0 and not ok:
            strongest_missing = True
    return _LineCheck(present, checked, strongest_missing, own, resolved, np.array(present_at), absent)


def _coverage(points: np.ndarray, reflections: np.ndarray, fwhm: float) -> tuple[np.ndarray, float]:
    """Which of ``points`` (2θ) lie on one of ``reflections`` (2θ), and how likely by chance.

    A point is covered when a reflection lies within ½ FWHM. By chance a point at random
    would be covered with probability p_i = (reflection density within
    ±:data:`DENSITY_HALF_WINDOW` of it) × (window of one FWHM); the returned probability is
    that of at least as many points being covered as are, the upper tail of the
    Poisson-binomial distribution of the p_i.

    Returns
    -------
    covered : ndarray of bool, shape (n,)
    chance : float
        1.0 when fewer than two points are covered.
    """
    if points.size == 0 or reflections.size == 0:
        return np.zeros(points.size, dtype=bool), 1.0
    dist = np.abs(points[:, None] - reflections[None, :])
    covered = dist.min(axis=1) <= 0.5 * fwhm
    m = int(covered.sum())
    if m < 2:
        return covered, 1.0
    p_i = np.clip(np.sum(dist <= DENSITY_HALF_WINDOW, axis=1) / (2.0 * DENSITY_HALF_WINDOW) * fwhm, 0.0, 1.0)
    dist_k = np.zeros(points.size + 1)  # distribution of the number covered by chance
    dist_k[0] = 1.0
    for p in p_i:  # n ≤ a few dozen points
        dist_k[1:] = dist_k[1:] * (1.0 - p) + dist_k[:-1] * p
        dist_k[0] *= 1.0 - p
    return covered, float(dist_k[m:].sum())


def _lattice_objection(fit: RefinementResult, refs: Sequence[ReferenceEntry], p: int, lc: _LineCheck,
                       scan: Scan) -> tuple[str, int | None]:
    """Objection when every present line of phase p sits on a reflection of one other phase,
    and that phase's index (``("", None)`` without objection).

    Another identified phase A "covers" a line of p when one of A's reflections — any of
    them, however weak A draws it — lies within ½ FWHM at A's refined cell and shift. When A
    covers all of p's present lines, p's evidence is intensity at A's reflection positions:
    what A with other intensities (a phase of A's structure type missing from the library,
    texture) explains as well. It counts only when chance is an unlikely cause
    (:func:`_coverage` below :data:`COINCIDENCE_CHANCE` divided by the number of
    other phases); a low-symmetry phase with reflections everywhere covers anything and so
    proves nothing.
    """
    others = [q for q in range(len(refs)) if q != p]
    fw = _typical_fwhm(fit)
    for q in others:
        covered, chance = _coverage(lc.present_at, _drawn_lines(refs[q], fit.phases[q], scan)["line_two_theta"], fw)
        if covered.all() and chance < COINCIDENCE_CHANCE / len(others):
            return (f"each of its {lc.present_at.size} present lines falls on a reflection of {refs[q].name} "
                    f"(by chance: p = {chance:.1g}), so the intensity there is that phase's misfit, not this "
                    f"phase"), q
    return "", None


def _drop_stand_ins(ctx, peaks, refs, starts, evidence, fit, rejected, std_index, notes):
    """Drop an identified phase whose lattice explains the unexplained peaks but whose
    intensities do not.

    When at least two of the unexplained peaks lie on reflections of one identified phase,
    more than chance allows (:func:`_coverage`), and one of them is at least as high as that
    phase draws its own line there, the phase has the right lattice and the wrong intensities: a phase of the same structure type that the library does not
    hold (a rock salt standing in for another, a spinel for a spinel). It is dropped, its
    peaks are reported as unexplained, and a note names the lattice they index on.
    ``refs``, ``evidence``, ``rejected`` and ``notes`` are updated in place.
    """
    while fit is not None and refs:
        left = _unexplained(ctx, peaks, fit)
        if len(left) < 2:
            break
        fw = _typical_fwhm(fit)
        n_other = max(len(refs) - (std_index is not None), 1)
        at = np.clip(np.searchsorted(fit.two_theta, left.two_theta), 0, fit.two_theta.size - 1)
        stand_in = None
        for q in range(len(refs)):
            if q == std_index:
                continue
            covered, chance = _coverage(left.two_theta, _drawn_lines(refs[q], fit.phases[q], ctx.scan)["line_two_theta"], fw)
            excess = left.height / np.maximum(fit.phases[q].profile[at], 1e-9)
            if chance < COINCIDENCE_CHANCE / n_other and np.any(covered & (excess >= 1.0)):
                stand_in = q
                break
        if stand_in is None:
            break
        e = refs[stand_in]
        k = int(np.flatnonzero(covered)[np.argmax(excess[covered])])
        why = (f"its lattice matches but not its intensities: {int(covered.sum())} of the {len(left)} unexplained "
               f"peaks fall on its reflections (by chance: p = {chance:.1g}); at {left.two_theta[k]:.2f}° the scan "
               f"shows {1.0 + excess[k]:.1f} times the line it predicts")
        rejected[e.id] = Rejection(e.name, e.formula, e.id, why)
        notes.append(f"the unexplained peaks index on the lattice of {e.name} ({e.space_group}, d-scale "
                     f"{fit.phases[stand_in].d_scale:.4f}) with other intensities: likely a phase of that "
                     f"structure type that the library does not hold")
        starts = _carry(fit, starts)
        del refs[stand_in], starts[stand_in], evidence[stand_in]
        fit = ctx.refine(refs, starts) if refs else None
        fit, starts = _drop_unsupported(ctx, refs, starts, evidence, fit, rejected, std_index)
    return fit, starts


def _visible_tops(fit: RefinementResult, *, exclude: int) -> np.ndarray:
    """Grid indices of the line maxima, 3σ above the noise, of every phase but ``exclude``."""
    found = [np.zeros(0, dtype=np.int64)]
    for q, ph in enumerate(fit.phases):
        if q == exclude:
            continue
        tops = _line_tops(ph.profile)
        found.append(tops[ph.profile[tops] >= 3.0 * fit.sigma[tops]])
    return np.concatenate(found)


def _line_tops(prof: np.ndarray) -> np.ndarray:
    """Grid indices of the local maxima of a calculated profile (its lines)."""
    return np.flatnonzero((prof[1:-1] > prof[:-2]) & (prof[1:-1] >= prof[2:])) + 1


def _typical_fwhm(fit: RefinementResult) -> float:
    u, v, w = fit.caglioti
    t = np.tan(np.radians(np.median(fit.two_theta)) / 2.0)
    return float(np.sqrt(max(u * t * t + v * t + w, 1e-6)))


def _carry(fit: RefinementResult | None, starts: Sequence[PhaseStart]) -> list[PhaseStart]:
    """Starting values for the next fit: the refined values of ``fit`` where it has them."""
    if fit is None:
        return list(starts)
    out = []
    for i, s in enumerate(starts):
        if i < len(fit.phases):
            p = fit.phases[i]
            out.append(replace(s, zero_shift=p.zero_shift, displacement=p.displacement, d_scale=p.d_scale,
                               width_scale=p.width_scale))
        else:
            out.append(s)
    return out


def _assemble(scan, library, ctx, peaks, refs, evidence, fit, rejected, std_index, standard, quant_method,
              min_significance, filters, max_phases, notes) -> MixtureResult:
    quant = None
    phases: list[MixturePhase] = []
    limits: tuple[DetectionLimit, ...] = ()
    if fit is not None and refs:
        scales = np.array([p.scale for p in fit.phases])
        quant = quantify(scales, fit.scale_covariance, refs, scan.radiation, method=quant_method,
                         standard=None if std_index is None else (std_index, float(standard[1])))
        notes.extend(quant.notes)
        for i, (ref, pf, ev) in enumerate(zip(refs, fit.phases, evidence, strict=True)):
            phases.append(MixturePhase(
                name=ref.name, formula=ref.formula, entry_id=ref.id, source_id=ref.display_source_id,
                weight_fraction=float(quant.weight_fraction[i]), u_weight_fraction=float(quant.u_weight_fraction[i]),
                scale=pf.scale, u_scale=pf.u_scale, zero_shift=pf.zero_shift, displacement=pf.displacement,
                d_scale=pf.d_scale, u_d_scale=pf.u_d_scale, width_scale=pf.width_scale, evidence=ev,
                is_standard=(i == std_index), **_drawn_lines(ref, pf, scan),
            ))
        assessed = list(refs) + [e for e in library.get_many(sorted(rejected)) if e.id not in {r.id for r in refs}]
        limits = detection_limits(scan, fit, quant, assessed)
        order = np.argsort([-(p.weight_fraction if np.isfinite(p.weight_fraction) else -1) for p in phases], kind="stable")
        phases = [phases[i] for i in order]
    unexplained = _unexplained(ctx, peaks, fit)
    params = {
        "min_significance": min_significance,
        "max_phases": max_phases,
        "acceptance_threshold_delta_chi2": ctx.threshold,
        "parameters_per_phase": PARAMETERS_PER_PHASE,
        "line_present_ratio": LINE_PRESENT_RATIO,
        "line_absent_ratio": ABSENT_RATIO,
        "line_absent_sigma": ABSENT_SIGMA,
        "background": f"SNIP + Chebyshev degree {ctx.degree}",
        "caglioti_uvw": list(fit.caglioti if fit else ctx.caglioti),
        "eta": fit.eta if fit else None,
        "quantification": quant.method if quant else None,
        "basis": quant.basis if quant else None,
        "filters": {k: (list(v) if isinstance(v, tuple) else v) for k, v in filters.items()},
        "two_theta_range": [float(scan.two_theta[0]), float(scan.two_theta[-1])],
        "points": len(scan),
    }
    return MixtureResult(
        phases=tuple(phases), fit=fit, quantification=quant, unexplained=unexplained,
        detection_limits=limits, rejected=tuple(rejected.values()), parameters=params,
        library_stamp=str(library.stamp()), scan_source=scan.source, radiation=scan.radiation.describe(),
        notes=tuple(notes),
    )


def _drawn_lines(ref: ReferenceEntry, pf, scan: Scan) -> dict[str, np.ndarray]:
    """Kα1 line positions (refined) and relative intensities of a phase inside the scan."""
    from refdb.geometry import peak_shift
    from refdb.radiation import radiation_for
    from refdb.structure.pattern import stick_pattern

    primary = radiation_for(wavelength=scan.radiation.wavelength, monochromator_two_theta=scan.radiation.monochromator_two_theta)
    lo, hi = float(scan.two_theta[0]), float(scan.two_theta[-1])
    scaled = replace(ref, lines=replace(ref.lines, d=ref.lines.d * pf.d_scale))
    st = stick_pattern(scaled, primary, two_theta_range=(max(lo - 1.0, 0.5), min(hi + 1.0, 179.5)),
                       measured_wavelength=ref.wavelength or primary.wavelength)
    tt = st.two_theta + peak_shift(st.two_theta, zero_shift=pf.zero_shift, displacement=pf.displacement)
    inside = (tt >= lo) & (tt <= hi)
    inten = st.absolute[inside]
    top = float(inten.max()) if inten.size else 0.0
    return {"line_two_theta": tt[inside], "line_intensity": inten * (100.0 / top) if top > 0 else inten}


def _unexplained(ctx: _Context, peaks: PeakList, fit: RefinementResult | None) -> PeakList:
    """Residual peaks above the noise, strongest first, at most :data:`MAX_UNEXPLAINED`.

    See :meth:`_Context.residual_peaks`: a residual peak must exceed
    :data:`UNEXPLAINED_SIGMA` σ·√GoF (a poor fit raises the bar; 5σ rather than the 3σ used
    to seed the search rounds, so that noise is not reported as a missing phase) and, where it sits on a line of an identified phase, 10 % of that line's
    calculated height — a smaller excess there is a misfit of the line's intensity or shape,
    not evidence of another phase (common practice, no source). A minor phase hidden under a
    major line is therefore missed.
    """
    left = ctx.residual_peaks(peaks, fit, k_sigma=UNEXPLAINED_SIGMA)
    order = np.sort(np.argsort(-left.height)[:MAX_UNEXPLAINED])
    return _take(left, order)


def _take(peaks: PeakList, idx: np.ndarray, height_fraction: np.ndarray | None = None) -> PeakList:
    """Subset of a peak list; heights and areas optionally multiplied by ``height_fraction``."""
    f = np.ones(len(idx)) if height_fraction is None else np.asarray(height_fraction, float)
    arrays = {k: getattr(peaks, k)[idx] for k in (
        "two_theta", "d", "fwhm", "eta", "u_two_theta", "u_height", "u_area", "u_fwhm")}
    return PeakList(
        **arrays, height=peaks.height[idx] * f, area=peaks.area[idx] * f, significance=peaks.significance[idx] * f,
        radiation=peaks.radiation, two_theta_range=peaks.two_theta_range, source=peaks.source,
    )


def _num(x: float) -> float | None:
    return float(x) if x is not None and np.isfinite(x) else None


def mixture_as_dict(result: MixtureResult) -> dict[str, Any]:
    """JSON-ready form of a :class:`MixtureResult` (stable keys; NaN becomes null)."""
    q = result.quantification
    return {
        "scan": result.scan_source,
        "radiation": result.radiation,
        "library_stamp": result.library_stamp,
        "basis": q.basis if q else None,
        "method": q.method if q else None,
        "phases": [
            {
                "entry_id": p.entry_id,
                "source_id": p.source_id,
                "name": p.name,
                "formula": p.formula,
                "weight_fraction": _num(p.weight_fraction),
                "u_weight_fraction": _num(p.u_weight_fraction),
                "scale": _num(p.scale),
                "u_scale": _num(p.u_scale),
                "zero_shift": _num(p.zero_shift),
                "displacement": _num(p.displacement),
                "d_scale": _num(p.d_scale),
                "u_d_scale": _num(p.u_d_scale),
                "width_scale": _num(p.width_scale),
                "internal_standard": p.is_standard,
                "evidence": {
                    "delta_chi2": _num(p.evidence.delta_chi2),
                    "threshold": _num(p.evidence.threshold),
                    "lines_present": p.evidence.lines_present,
                    "lines_checked": p.evidence.lines_checked,
                    "search_score": _num(p.evidence.search_score),
                    "round": p.evidence.round,
                    "text": p.evidence.text,
                },
            }
            for p in result.phases
        ],
        "amorphous_or_unidentified": (
            {"weight_fraction": _num(q.rest), "u_weight_fraction": _num(q.u_rest)} if q and q.basis == "absolute" else None
        ),
        "fit": {"rwp": _num(result.rwp), "gof": _num(result.gof),
                "rexp": _num(result.fit.rexp) if result.fit else None},
        "unexplained_peaks": [
            {"two_theta": float(t), "d": float(d), "height": float(h), "significance": _num(s)}
            for t, d, h, s in zip(result.unexplained.two_theta, result.unexplained.d, result.unexplained.height,
                                  result.unexplained.significance, strict=True)
        ],
        "detection_limits": [
            {"entry_id": dl.entry_id, "name": dl.name, "formula": dl.formula, "weight_fraction": _num(dl.weight_fraction),
             "two_theta": _num(dl.two_theta), "basis": dl.basis}
            for dl in result.detection_limits
        ],
        "rejected": [{"entry_id": r.entry_id, "name": r.name, "reason": r.reason} for r in result.rejected],
        "parameters": result.parameters,
        "notes": list(result.notes),
        "caution": result.caution,
    }
