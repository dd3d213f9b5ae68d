"""Line strengths of a reference phase in the form the whole-profile model needs.

A computed entry stores radiation-free lines (d, multiplicity, |F|²); a measured entry stores
relative intensities observed with its own wavelength. Profile refinement wants, per line,
a strength that only needs the Lorentz–polarisation factor of the scan's geometry on top:

* computed: ``m · |F|²`` (electrons² per unit cell), so that a refined scale factor S obeys
  the Hill & Howard (1987) relation w ∝ S · (Z M V) (see :mod:`refdb.match.quant`);
* measured: ``I_rel / LP(2θ_ref)``, the observed intensity with the Lorentz–polarisation
  factor of the reference's own wavelength divided out (no monochromator assumed), so that
  multiplying by the scan's LP converts it to the scan's wavelength.

March–Dollase preferred orientation (Dollase 1986, J. Appl. Cryst. 19, 267; March 1932,
Z. Kristallogr. 81, 285) is averaged over the symmetry-equivalent reflections generated with
gemmi from the entry's space group.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from refdb.errors import InputError
from refdb.geometry import lorentz_polarisation
from refdb.radiation import two_theta_from_d
from refdb.records import ReferenceData


@dataclass(frozen=True, eq=False)
class PhaseLines:
    """Lines of one phase prepared for profile calculation.

    Attributes
    ----------
    d : ndarray, shape (n,)
        d-spacings in Å.
    strength : ndarray, shape (n,)
        Radiation-free line strength (see module docstring); non-negative.
    hkl : ndarray, shape (n, 3) or None
        Representative Miller indices, if known.
    mass_factor : float
        ``cell_mass × volume`` (g/mol · Å³) for computed entries with both known, else NaN.
    rir : float
        I/Ic of the entry, NaN when unknown.
    """

    d: np.ndarray
    strength: np.ndarray
    hkl: np.ndarray | None
    mass_factor: float
    rir: float


def phase_lines(ref: ReferenceData, *, assumed_wavelength: float | None = None) -> PhaseLines:
    """Turn a reference's stored lines into radiation-free line strengths.

    Parameters
    ----------
    ref : ReferenceData
        A computed entry (with ``lines.f2``) or a measured entry (with ``lines.intensity``).
    assumed_wavelength : float, optional
        Wavelength (Å) to assume for a measured entry that does not state one (normally the
        scan's); without it such an entry keeps its intensities unchanged.

    Raises
    ------
    InputError
        The entry has neither |F|² nor observed intensities, or no lines.
    """
    lines = ref.lines
    d = np.asarray(lines.d, dtype=float)
    if d.size == 0:
        raise InputError(f"reference {ref.name!r} has no lines", "re-import it from its CIF or data file")
    if lines.f2 is not None and np.any(np.isfinite(lines.f2)):
        m = np.ones_like(d) if lines.multiplicity is None else np.asarray(lines.multiplicity, float)
        strength = np.nan_to_num(m * np.asarray(lines.f2, float), nan=0.0)
    elif lines.intensity is not None:
        inten = np.nan_to_num(np.asarray(lines.intensity, float), nan=0.0)
        lam = ref.wavelength or assumed_wavelength
        if lam is None:
            strength = inten
        else:
            lp = lorentz_polarisation(two_theta_from_d(d, lam))
            strength = np.where(np.isfinite(lp) & (lp > 0), inten / lp, 0.0)
    else:
        raise InputError(
            f"reference {ref.name!r} has neither structure factors nor intensities",
            "re-import it from its CIF or data file",
        )
    strength = np.clip(strength, 0.0, None)
    mass = float(ref.cell_mass) * float(ref.volume) if ref.cell_mass and ref.volume else float("nan")
    rir = float(ref.rir) if ref.rir else float("nan")
    return PhaseLines(d=d, strength=strength, hkl=lines.hkl, mass_factor=mass, rir=rir)


def march_dollase_factor(
    hkl: np.ndarray,
    cell: tuple[float, float, float, float, float, float],
    axis: tuple[int, int, int],
    r: float,
    space_group: str | None = None,
) -> np.ndarray:
    """March–Dollase texture factor per line, averaged over symmetry-equivalent reflections.

    ``P(α) = (r² cos²α + sin²α / r)^(−3/2)`` where α is the angle between the reciprocal
    vector of the reflection and that of ``axis`` (Dollase 1986, J. Appl. Cryst. 19, 267).
    ``r < 1`` describes platelets lying flat with their normal along ``axis`` in a
    Bragg–Brentano specimen; ``r = 1`` gives 1 for every line.

    Parameters
    ----------
    hkl : ndarray, shape (n, 3)
        Representative Miller indices.
    cell : tuple of 6 floats
        a, b, c (Å) and α, β, γ (degrees).
    axis : tuple of 3 ints
        The preferred-orientation direction as reciprocal-lattice indices.
    r : float
        March–Dollase ratio, > 0.
    space_group : str, optional
        Hermann–Mauguin symbol; with it the factor is averaged over the reflections the
        point group makes equivalent (each equivalent appears equally often in the orbit, so
        the plain mean over all operations is the mean over distinct equivalents).

    Returns
    -------
    ndarray, shape (n,)
    """
    hkl = np.asarray(hkl, dtype=float)
    gstar = _reciprocal_metric(cell)
    rots = _rotations(space_group)  # (o, 3, 3)
    heq = np.einsum("nj,ojk->nok", hkl, rots)  # reciprocal vectors transform as row vectors
    ax = np.asarray(axis, dtype=float)
    dot = np.einsum("noj,jk,k->no", heq, gstar, ax)
    nh = np.sqrt(np.einsum("noj,jk,nok->no", heq, gstar, heq))
    na = float(np.sqrt(ax @ gstar @ ax))
    with np.errstate(invalid="ignore", divide="ignore"):
        c2 = np.clip(np.nan_to_num((dot / (nh * na)) ** 2, nan=1.0), 0.0, 1.0)
    p = (r * r * c2 + (1.0 - c2) / r) ** -1.5
    return p.mean(axis=1)


def _reciprocal_metric(cell: tuple[float, float, float, float, float, float]) -> np.ndarray:
    a, b, c, al, be, ga = cell
    ca, cb, cg = np.cos(np.radians([al, be, ga]))
    g = np.array(
        [[a * a, a * b * cg, a * c * cb], [a * b * cg, b * b, b * c * ca], [a * c * cb, b * c * ca, c * c]]
    )
    return np.linalg.inv(g)


def _rotations(space_group: str | None) -> np.ndarray:
    if not space_group:
        return np.eye(3)[None]
    import gemmi

    sg = gemmi.find_spacegroup_by_name(space_group)
    if sg is None:
        return np.eye(3)[None]
    rots = np.array([op.rot for op in sg.operations().sym_ops], dtype=float) / 24.0
    return np.unique(np.round(rots, 6), axis=0)
