"""Weight fractions from refined scale factors.

Two published routes, picked per mixture by name (:data:`METHODS`):

* ``"cell"`` — Hill & Howard (1987), J. Appl. Cryst. 20, 467: for phases whose pattern is
  computed from a structure, ``w_p = S_p (ZMV)_p / Σ_k S_k (ZMV)_k``. Here Z·M is the mass of
  the unit cell (``cell_mass``, g/mol) and V its volume (Å³), because the profile's line
  strengths are m·|F|² per unit cell (see :mod:`refdb.structure.pattern`).
* ``"rir"`` — Chung (1974), J. Appl. Cryst. 7, 519 and 7, 526 (reference intensity ratios,
  "matrix flushing"): ``X_i = (I_i / k_i) / Σ_j (I_j / k_j)`` with ``k = I/Ic`` and I_i the
  integrated intensity of the strongest line of phase i in this scan (scale × strongest
  unit-scale line; integrated rather than peak intensities as Hubbard & Snyder 1988,
  Powder Diffr. 3, 74 recommend).

Both reduce to ``w_p = a_p S_p / Σ a_k S_k`` with a per-phase "mass weight" ``a_p``, so one
propagation of the scale covariance serves both. With an internal standard k of known weight
fraction f_k in the whole specimen, ``W_p = f_k · a_p S_p / (a_k S_k)`` and the rest
``1 − Σ W_p`` is the amorphous or unidentified part (Chung 1974, 7, 526; the "internal
standard" form).

``"auto"`` uses ``cell`` when every phase has a cell mass and volume, otherwise ``rir`` when
every phase has an I/Ic, otherwise ``cell`` for the phases that allow it and no fraction for
the others (said in the notes).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from refdb.errors import InputError
from refdb.radiation import Radiation
from refdb.records import ReferenceData
from refdb.structure.pattern import stick_pattern

METHODS: tuple[str, ...] = ("auto", "cell", "rir")


@dataclass(frozen=True, eq=False)
class Quantification:
    """Weight fractions of the phases of one refinement.

    Attributes
    ----------
    method : str
        ``"cell"`` or ``"rir"`` (the route actually used).
    basis : str
        ``"crystalline"`` (fractions of the quantified crystalline phases, summing to 1) or
        ``"absolute"`` (fractions of the whole specimen, from an internal standard).
    weight_fraction, u_weight_fraction : ndarray, shape (p,)
        Fractions 0–1 and their standard uncertainties; NaN for a phase that cannot be
        quantified.
    mass_weight : ndarray, shape (p,)
        The factor a_p with w_p ∝ a_p S_p (NaN where unknown).
    rest, u_rest : float
        Absolute basis: amorphous or unidentified weight fraction ``1 − Σ W_p`` and its
        uncertainty; NaN on the crystalline basis.
    standard_index : int or None
        Index of the internal standard phase.
    notes : tuple of str
    """

    method: str
    basis: str
    weight_fraction: np.ndarray
    u_weight_fraction: np.ndarray
    mass_weight: np.ndarray
    rest: float
    u_rest: float
    standard_index: int | None
    notes: tuple[str, ...] = ()


def strongest_line_intensity(ref: ReferenceData, radiation: Radiation) -> float:
    """Integrated intensity per unit scale of the phase's strongest primary-line (Kα1) stick.

    From :func:`refdb.structure.pattern.stick_pattern` (``Sticks.absolute``) over 0.5–179.5°;
    a measured entry without a wavelength is taken as measured with ``radiation``'s.
    """
    st = stick_pattern(ref, radiation, two_theta_range=(0.5, 179.5), measured_wavelength=ref.wavelength or radiation.wavelength)
    primary = np.array([n == radiation.line_names[0] for n in st.line_name], dtype=bool)
    inten = st.absolute[primary & np.isfinite(st.absolute)]
    return float(inten.max()) if inten.size else float("nan")


def mass_weights(
    phases: Sequence[ReferenceData], radiation: Radiation, method: str = "auto"
) -> tuple[np.ndarray, str, tuple[str, ...]]:
    """The factor a_p of each phase (w_p ∝ a_p S_p), the method used and notes.

    Raises
    ------
    InputError
        Unknown method name.
    """
    key = method.strip().lower()
    if key not in METHODS:
        raise InputError(f"unknown quantification method {method!r}", f"choose one of {', '.join(METHODS)}")
    cell = np.array([_cell_factor(r) for r in phases])
    rir = np.array([float(r.rir) if r.rir and r.rir > 0 else np.nan for r in phases])
    if key == "auto":
        key = "cell" if np.all(np.isfinite(cell)) else ("rir" if np.all(np.isfinite(rir)) else "cell")
    if key == "cell":
        a = cell
    else:
        imax = np.array([strongest_line_intensity(r, radiation) for r in phases])
        a = imax / rir
    notes = tuple(
        f"{r.name}: no {'cell mass and volume' if key == 'cell' else 'I/Ic'}, so no weight fraction"
        for r, v in zip(phases, a, strict=True)
        if not np.isfinite(v)
    )
    return a, key, notes


def _cell_factor(ref: ReferenceData) -> float:
    if ref.cell_mass and ref.volume and ref.cell_mass > 0 and ref.volume > 0:
        return float(ref.cell_mass) * float(ref.volume)
    return float("nan")


def weight_fractions(
    scales: np.ndarray,
    scale_covariance: np.ndarray,
    mass_weight: np.ndarray,
    *,
    standard_index: int | None = None,
    standard_fraction: float | None = None,
) -> tuple[np.ndarray, np.ndarray, float, float]:
    """Weight fractions and standard uncertainties from scales, their covariance and a_p.

    Parameters
    ----------
    scales : ndarray, shape (p,)
        Refined scale factors S_p ≥ 0.
    scale_covariance : ndarray, shape (p, p)
    mass_weight : ndarray, shape (p,)
        a_p; phases with NaN are left out (fraction NaN).
    standard_index, standard_fraction : int and float, optional
        An internal standard and its weight fraction in the whole specimen (0 < f < 1).

    Returns
    -------
    w, u_w : ndarray, shape (p,)
    rest, u_rest : float
        Amorphous/unidentified fraction with an internal standard, else NaN.

    Raises
    ------
    InputError
        The standard's fraction is outside (0, 1), or the standard was not found in the scan.
    """
    s = np.asarray(scales, float)
    a = np.asarray(mass_weight, float)
    cov = np.asarray(scale_covariance, float)
    ok = np.isfinite(a) & (a > 0)
    m = np.where(ok, a * s, 0.0)
    p = s.size
    jac = np.zeros((p, p))
    w = np.full(p, np.nan)
    if standard_index is None:
        total = m.sum()
        if total <= 0:
            return w, np.full(p, np.nan), float("nan"), float("nan")
        w[ok] = m[ok] / total
        # ∂w_i/∂S_j = a_i δ_ij / T − a_i S_i a_j / T²
        aj = np.where(ok, a, 0.0)
        jac[ok] = -np.outer(m[ok], aj) / total**2
        jac[ok, np.flatnonzero(ok)] += aj[ok] / total
        rest, u_rest = float("nan"), float("nan")
    else:
        f = float(standard_fraction) if standard_fraction is not None else float("nan")
        if not 0.0 < f < 1.0:
            raise InputError(f"internal standard fraction {standard_fraction} is outside 0–1", "e.g. --standard 12:0.2")
        k = int(standard_index)
        if not ok[k] or s[k] <= 0:
            raise InputError(
                "the internal standard was not found in the scan (zero scale) or cannot be quantified",
                "check the standard's entry id and that the scan contains it",
            )
        ref_mass = m[k]
        w[ok] = f * m[ok] / ref_mass
        idx = np.flatnonzero(ok)
        # ∂W_i/∂S_i = f a_i / (a_k S_k);  ∂W_i/∂S_k = −f a_i S_i / (a_k S_k²)
        jac[idx, idx] = f * a[idx] / ref_mass
        jac[idx, k] -= f * m[idx] / (ref_mass * s[k])
        jac[k] = 0.0  # the standard's fraction is given, not measured
        w[k] = f
        rest = float(1.0 - np.nansum(w))
    cov_w = jac @ cov @ jac.T
    u = np.where(ok, np.sqrt(np.clip(np.diag(cov_w), 0.0, None)), np.nan)
    if standard_index is not None:
        ones = ok.astype(float)
        u_rest = float(np.sqrt(max(ones @ cov_w @ ones, 0.0)))
    return w, u, rest, u_rest


def quantify(
    scales: np.ndarray,
    scale_covariance: np.ndarray,
    phases: Sequence[ReferenceData],
    radiation: Radiation,
    *,
    method: str = "auto",
    standard: tuple[int, float] | None = None,
) -> Quantification:
    """Weight fractions of refined phases, on the crystalline or (with a standard) absolute basis.

    Parameters
    ----------
    scales, scale_covariance : ndarray, shapes (p,) and (p, p)
        From :class:`refdb.match.refine.RefinementResult`.
    phases : sequence of ReferenceData
        The refined phases, in the same order.
    radiation : Radiation
        The scan's radiation (for strongest-line intensities on the ``rir`` route).
    method : str
        ``auto``, ``cell`` or ``rir`` (case-insensitive).
    standard : (index, weight_fraction), optional
        The internal standard among ``phases`` and its weight fraction in the specimen.

    Raises
    ------
    InputError
        Unknown method, bad standard index or fraction.
    """
    a, used, notes = mass_weights(phases, radiation, method)
    idx, frac = (None, None) if standard is None else standard
    if idx is not None and not 0 <= idx < len(phases):
        raise InputError(f"internal standard index {idx} is not one of the refined phases")
    w, u, rest, u_rest = weight_fractions(scales, scale_covariance, a, standard_index=idx, standard_fraction=frac)
    return Quantification(
        method=used,
        basis="crystalline" if idx is None else "absolute",
        weight_fraction=w,
        u_weight_fraction=u,
        mass_weight=a,
        rest=rest,
        u_rest=u_rest,
        standard_index=idx,
        notes=notes,
    )
