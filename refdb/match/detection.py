"""Detection limits: how little of a phase this scan could have shown.

For a phase q, draw its unit-scale profile Y_q with the refined instrument parameters of the
mixture and find the point where it stands highest above the scan's own noise,
``h_q = max_x Y_q(x) / σ(x)`` (σ is the counting uncertainty there, so a line under a strong
peak of another phase counts as harder to see). The line is taken as detectable when its
height reaches ``k·σ`` with k = 3 (the usual 3σ criterion of a detection limit; IUPAC,
Currie 1968, Anal. Chem. 40, 586), i.e. at a scale ``S_min = k / h_q``. That scale is
converted to a weight fraction with the same mass weights as the quantification
(:mod:`refdb.match.quant`):

* crystalline basis: ``w_min = a_q S_min / (Σ_k a_k S_k + a_q S_min)`` — the fraction the
  phase would have if it were added to the refined mixture at that scale;
* with an internal standard k: ``W_min = f_k · a_q S_min / (a_k S_k)``.

More noise (larger σ), a weaker pattern or a heavier cell all raise the limit.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from refdb.match.quant import Quantification, mass_weights
from refdb.match.refine import RefinementResult, phase_profile
from refdb.records import ReferenceData
from refdb.scan.types import Scan

#: Multiple of σ a line must reach to be detected.
DETECTION_SIGMA = 3.0


@dataclass(frozen=True)
class DetectionLimit:
    """Smallest weight fraction of a phase this scan would have shown.

    Attributes
    ----------
    name, formula, entry_id, source_id : identification.
    weight_fraction : float
        0–1 on the basis of the quantification (NaN when it cannot be computed).
    two_theta : float
        Degrees 2θ of the line that decides the limit.
    basis : str
        ``"crystalline"`` or ``"absolute"``.
    """

    name: str
    formula: str
    entry_id: int | None
    source_id: str | None
    weight_fraction: float
    two_theta: float
    basis: str


def detection_limits(
    scan: Scan,
    fit: RefinementResult,
    quant: Quantification,
    phases: Sequence[ReferenceData],
    *,
    k_sigma: float = DETECTION_SIGMA,
) -> tuple[DetectionLimit, ...]:
    """Detection limit of each of ``phases`` (in the mixture or not) in this scan.

    Parameters
    ----------
    scan : Scan
        The scan (its radiation is used for the profiles).
    fit : RefinementResult
        The refined mixture: gives σ, the instrument parameters and the scale factors.
    quant : Quantification
        The mixture's quantification (mass weights, basis, standard).
    phases : sequence of ReferenceData
        Phases to assess.
    k_sigma : float
        Multiple of σ that a line must reach. Default 3.

    Returns
    -------
    tuple of DetectionLimit, in the order of ``phases``.
    """
    if not phases:
        return ()
    a_q, _, _ = mass_weights(phases, scan.radiation, quant.method)
    scales = np.array([p.scale for p in fit.phases])
    a_mix = quant.mass_weight
    ok = np.isfinite(a_mix)
    mixture_mass = float(np.sum(a_mix[ok] * scales[ok]))
    shift = fit.phases[0] if fit.phases else None
    out = []
    for ref, a in zip(phases, a_q, strict=True):  # one profile per assessed phase
        prof = phase_profile(
            ref,
            fit.two_theta,
            scan.radiation,
            zero_shift=shift.zero_shift if shift else 0.0,
            displacement=shift.displacement if shift else 0.0,
            caglioti=fit.caglioti,
            eta=fit.eta,
        )
        ratio = prof / fit.sigma
        i = int(np.argmax(ratio)) if ratio.size else 0
        h = float(ratio[i]) if ratio.size else 0.0
        if h <= 0 or not np.isfinite(a):
            w_min = float("nan")
        else:
            s_min = k_sigma / h
            if quant.standard_index is not None:
                k = quant.standard_index
                f = float(quant.weight_fraction[k])
                w_min = f * a * s_min / (a_mix[k] * scales[k])
            else:
                w_min = a * s_min / (mixture_mass + a * s_min)
        out.append(
            DetectionLimit(
                name=ref.name,
                formula=ref.formula,
                entry_id=getattr(ref, "id", None),
                source_id=ref.source_id,
                weight_fraction=float(w_min),
                two_theta=float(fit.two_theta[i]) if ratio.size else float("nan"),
                basis=quant.basis,
            )
        )
    return tuple(out)
