"""Simulated powder scans of one phase or a weighed mixture, with counting noise.

Each phase p contributes its lines with integrated intensities

    I_pj = C · w_p · m_j |F_j|² LP(2θ_j) P_j / (M_cell,p · V_p)

(intensity per unit mass fraction, see :mod:`refdb.structure.rir`), i.e. a Rietveld-type scale
factor S_p ∝ w_p / (M_cell V)_p, which inverts to the weight fractions of Hill & Howard (1987),
J. Appl. Cryst. 20, 467: w_p = S_p (Z M V)_p / Σ_k S_k (Z M V)_k. Measured references enter
through their I/Ic: their strongest line gets w_p · I/Ic times the corundum 113 intensity per
unit mass. Absorption is the same for all phases of a flat, thick sample and is absorbed into C;
microabsorption is ignored.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from refdb.errors import InputError
from refdb.geometry import peak_shift
from refdb.profiles import gaussian
from refdb.radiation import Radiation
from refdb.records import PatternLines, ReferenceData
from refdb.scan.types import Scan
from refdb.structure import rir as rir_mod
from refdb.structure.pattern import DEFAULT_UVW, MarchDollase, checked_grid, line_widths, stick_pattern, sum_profiles

Phases = ReferenceData | Sequence[tuple[ReferenceData, float]]


def simulate_scan(
    phases: Phases,
    radiation: Radiation,
    two_theta: np.ndarray,
    *,
    zero_shift: float = 0.0,
    displacement: float = 0.0,
    uvw: tuple[float, float, float] = DEFAULT_UVW,
    fwhm: float | None = None,
    eta: float = 0.5,
    crystallite_size_nm: float | Sequence[float | None] | None = None,
    march_dollase: MarchDollase | tuple | Sequence[MarchDollase | tuple | None] | None = None,
    cell_scale: float | Sequence[float] = 1.0,
    background: Sequence[float] = (100.0,),
    amorphous: tuple[float, float, float] | None = None,
    counts: float = 10_000.0,
    noise: bool = True,
    seed: int | None = None,
) -> Scan:
    """A simulated step scan.

    Parameters
    ----------
    phases : ReferenceData or sequence of (ReferenceData, weight fraction)
        One phase, or a mixture; weight fractions are relative (they are normalised).
    radiation : Radiation
        Every emission line (Kα1, Kα2, Kβ) is drawn with its weight.
    two_theta : ndarray, shape (n,)
        Strictly increasing grid in degrees 2θ.
    zero_shift, displacement : float
        Degrees 2θ, see :func:`refdb.geometry.peak_shift` (Δ2θ = zero + displacement·cos θ).
    uvw, fwhm, eta : optional
        Caglioti U, V, W (deg²) or a constant FWHM (degrees); pseudo-Voigt Lorentz fraction.
    crystallite_size_nm : float or sequence, optional
        Scherrer size broadening, one value for all phases or one per phase.
    march_dollase : MarchDollase or (ratio, (h, k, l)), or one per phase, optional
    cell_scale : float or sequence
        Isotropic lattice scaling (d → d·cell_scale), e.g. 1.002 for thermal expansion.
    background : sequence of float
        Polynomial coefficients (counts) in powers of 2θ in degrees: c0 + c1·2θ + c2·2θ² …
    amorphous : (center, fwhm, height), optional
        A Gaussian hump of an amorphous phase: degrees 2θ, degrees, counts.
    counts : float
        Expected counts at the top of the strongest peak above background.
    noise : bool
        Draw Poisson counts (else the expected values are returned).
    seed : int, optional
        Seed of the noise generator (``numpy.random.default_rng``).

    Returns
    -------
    Scan
        ``counts`` (Poisson draws), ``sigma`` = √max(counts, 1), source ``"simulated"``.

    Raises
    ------
    InputError
        Bad grid, negative weights, a measured phase without I/Ic in a mixture, per-phase
        settings of the wrong length, non-positive counts or cell scale.

    Notes
    -----
    The strongest point of the crystalline pattern is scaled to ``counts`` before background
    and noise, so weight fractions are relative: a 30:70 mixture gives the intensity ratio
    of the phases that 30 % and 70 % by weight give in a real flat sample. Lines are drawn
    from 2° below to 2° above the grid so that edge peaks have their tails.

    Examples
    --------
    >>> import numpy as np
    >>> from refdb.radiation import radiation_for
    >>> from refdb.structure import corundum_reference, simulate_scan
    >>> grid = np.arange(20.0, 80.0, 0.02)
    >>> scan = simulate_scan(corundum_reference(), radiation_for("Cu"), grid, seed=1)
    >>> len(scan) == grid.size
    True
    """
    grid = checked_grid(two_theta)
    if not np.isfinite(counts) or counts <= 0:
        raise InputError(f"counts = {counts} must be positive")
    pairs = [(phases, 1.0)] if isinstance(phases, ReferenceData) else list(phases)
    if not pairs:
        raise InputError("no phase to simulate")
    weights = np.array([float(w) for _, w in pairs])
    if np.any(~np.isfinite(weights)) or np.any(weights < 0) or weights.sum() <= 0:
        raise InputError("weight fractions must be non-negative and not all zero")
    weights = weights / weights.sum()
    n = len(pairs)
    sizes = _per_phase(crystallite_size_nm, n, "crystallite sizes")
    textures = _per_phase(march_dollase, n, "March–Dollase settings", scalar_types=(MarchDollase,))
    scales = _per_phase(cell_scale, n, "cell scales")

    lo, hi = max(0.01, grid[0] - 2.0), min(179.99, grid[-1] + 2.0)
    pattern = np.zeros_like(grid)
    for (ref, _), w, size, texture, scale in zip(pairs, weights, sizes, textures, scales, strict=True):
        if w == 0:
            continue
        sticks = stick_pattern(
            _scaled(ref, scale), radiation, two_theta_range=(lo, hi), march_dollase=texture
        )
        area = sticks.absolute * (w * _mass_scale(ref, sticks.absolute, multi=n > 1))
        centers = sticks.two_theta + peak_shift(sticks.two_theta, zero_shift=zero_shift, displacement=displacement)
        widths = line_widths(centers, radiation, fwhm=fwhm, uvw=uvw, crystallite_size_nm=size)
        pattern += sum_profiles(grid, centers, area, widths, eta)
    top = pattern.max()
    if top <= 0:
        raise InputError("no line of the phases falls inside the 2θ grid")
    expected = pattern * (counts / top) + np.polynomial.polynomial.polyval(grid, np.asarray(background, dtype=float))
    if amorphous is not None:
        center, width, height = (float(x) for x in amorphous)
        if width <= 0 or height < 0:
            raise InputError("the amorphous hump needs a positive width and a non-negative height")
        expected += height * gaussian(grid, center, width) / gaussian(center, center, width)
    if np.any(expected < 0):
        raise InputError("the background polynomial goes negative inside the grid")
    rng = np.random.default_rng(seed)
    observed = rng.poisson(expected).astype(float) if noise else expected
    names = "+".join(ref.name for ref, _ in pairs)
    return Scan(
        two_theta=grid.copy(),
        counts=observed,
        sigma=np.sqrt(np.maximum(observed, 1.0)),
        radiation=radiation,
        source=f"simulated: {names}",
    )


def _mass_scale(ref: ReferenceData, absolute: np.ndarray, *, multi: bool) -> float:
    """Factor turning a phase's stick intensities into intensity per unit mass fraction."""
    if ref.lines.f2 is not None and ref.cell_mass and ref.volume:
        return 1.0 / (ref.cell_mass * ref.volume)
    if not multi:
        return 1.0
    rir = rir_mod.validate_rir(ref.rir, ref.name)
    top = float(absolute.max()) if absolute.size else 0.0
    # The strongest line of a measured phase carries I/Ic × corundum 113 per unit mass.
    return rir * rir_mod.corundum_113_strength() / top if top > 0 else 0.0


def _scaled(ref: ReferenceData, scale: float) -> ReferenceData:
    if not np.isfinite(scale) or scale <= 0:
        raise InputError(f"cell scale {scale} must be positive")
    if scale == 1.0:
        return ref
    lines = ref.lines
    cell = None if ref.cell is None else (*(x * scale for x in ref.cell[:3]), *ref.cell[3:])
    return replace(
        ref,
        lines=PatternLines(d=lines.d * scale, hkl=lines.hkl, multiplicity=lines.multiplicity, f2=lines.f2, intensity=lines.intensity),
        cell=cell,
        volume=None if ref.volume is None else ref.volume * scale**3,
    )


def _per_phase(value, n: int, what: str, scalar_types: tuple = ()) -> list:
    """One setting per phase: a scalar (or tuple setting) is repeated; a list must have n items."""
    if value is None or isinstance(value, (int, float, *scalar_types)):
        return [value] * n
    items = list(value)
    if scalar_types and len(items) == 2 and isinstance(items[0], (int, float)):
        return [tuple(items)] * n  # a single (ratio, axis) texture setting
    if len(items) != n:
        raise InputError(f"{len(items)} {what} given for {n} phases")
    return items
