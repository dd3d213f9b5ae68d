"""Stick patterns and drawn profiles of reference lines for a given radiation.

Integrated intensity of a powder line (Bragg–Brentano, infinitely thick flat sample):

    I(hkl) ∝ m · |F|² · LP(2θ) · P(hkl),

with LP from :func:`refdb.geometry.lorentz_polarisation` and P the March–Dollase
preferred-orientation factor averaged over the symmetry-equivalent reflections
(Dollase 1986, J. Appl. Cryst. 19, 267; March 1932, Z. Kristallogr. 81, 285):

    P(α) = (r² cos²α + sin²α / r)^(−3/2),

α being the angle between the scattering vector and the preferred-orientation axis (a
reciprocal-lattice direction, i.e. the normal of plane (hkl)); r < 1 for platelets lying flat.
"""

from __future__ import annotations

from dataclasses import dataclass

import gemmi
import numpy as np

from refdb.errors import InputError
from refdb.geometry import lorentz_polarisation
from refdb.profiles import (
    caglioti_fwhm,
    gaussian,
    gaussian_with_derivatives,
    lorentzian,
    lorentzian_with_derivatives,
    scherrer_fwhm,
)
from refdb.radiation import Radiation, two_theta_from_d
from refdb.records import PatternLines, ReferenceData
from refdb.structure import _symmetry
from refdb.structure.crystal import reciprocal_metric

#: Default Caglioti U, V, W (deg²): FWHM ≈ 0.05° at 30° and 0.08° at 90° 2θ, a laboratory
#: Bragg–Brentano instrument with a strip detector (common practice, no source).
DEFAULT_UVW = (0.005, -0.002, 0.003)
#: Profiles are evaluated within ± this many FWHM of each line; the Lorentzian tail beyond
#: ±40 FWHM holds 1 − (2/π)·atan(80) ≈ 0.8 % of its area.
PROFILE_HALF_WINDOW = 40.0
#: Half-width in FWHM within which the Gaussian part of a profile is drawn.
GAUSSIAN_HALF_WINDOW = 4.0


@dataclass(frozen=True)
class MarchDollase:
    """March–Dollase preferred orientation: ratio ``r`` and axis (reciprocal-lattice indices)."""

    ratio: float
    axis: tuple[int, int, int] = (0, 0, 1)

    def __post_init__(self) -> None:
        if not np.isfinite(self.ratio) or self.ratio <= 0:
            raise InputError(f"March–Dollase ratio {self.ratio} must be positive", "1 means random orientation")
        if not any(self.axis):
            raise InputError("the preferred-orientation axis cannot be 0 0 0")


@dataclass(frozen=True, eq=False)
class Sticks:
    """Lines of one reference for one radiation, sorted by 2θ.

    Attributes
    ----------
    two_theta : ndarray, shape (n,)
        Positions in degrees 2θ for each emission line.
    d : ndarray, shape (n,)
        d-spacings in Å.
    hkl : ndarray, shape (n, 3), int, or None
    multiplicity : ndarray, shape (n,), int, or None
    intensity : ndarray, shape (n,)
        Relative integrated intensity, strongest stick = 100.
    absolute : ndarray, shape (n,)
        m·|F|²·LP·P·(line weight) in electrons² per cell (computed lines), or the rescaled
        measured intensity (measured lines).
    line_name : tuple of str, length n
        Emission line of each stick (``Ka1``, ``Ka2``, ``Kb`` or ``single``).
    line_index : ndarray, shape (n,), int
        Row of the source :class:`~refdb.records.PatternLines` of each stick.
    radiation : Radiation
    """

    two_theta: np.ndarray
    d: np.ndarray
    hkl: np.ndarray | None
    multiplicity: np.ndarray | None
    intensity: np.ndarray
    absolute: np.ndarray
    line_name: tuple[str, ...]
    line_index: np.ndarray
    radiation: Radiation

    def __len__(self) -> int:
        return int(self.two_theta.shape[0])


def stick_pattern(
    lines: PatternLines | ReferenceData,
    radiation: Radiation,
    *,
    two_theta_range: tuple[float, float] = (5.0, 90.0),
    measured_wavelength: float | None = None,
    march_dollase: MarchDollase | tuple[float, tuple[int, int, int]] | None = None,
) -> Sticks:
    """Line positions and intensities of a reference for a radiation.

    Parameters
    ----------
    lines : PatternLines or ReferenceData
        Computed lines (``f2`` and ``multiplicity`` given) or measured lines (``intensity``).
    radiation : Radiation
        Every emission line of the radiation gives its own sticks, weighted by
        ``radiation.weights``; the polarisation factor uses its monochromator angle.
    two_theta_range : (float, float)
        Degrees 2θ; sticks outside are left out.
    measured_wavelength : float, optional
        Wavelength (Å) of measured intensities; taken from a ReferenceData when not given.
        Measured intensities move to the new radiation by LP(2θ_new) / LP(2θ_measured).
    march_dollase : MarchDollase or (ratio, (h, k, l)), optional
        Preferred orientation. Needs a ReferenceData with a cell and a structure or space
        group (for the equivalent reflections).

    Returns
    -------
    Sticks

    Raises
    ------
    InputError
        Empty range, measured lines without a wavelength, texture without symmetry.
    """
    ref = lines if isinstance(lines, ReferenceData) else None
    pl = ref.lines if ref is not None else lines
    lo, hi = float(two_theta_range[0]), float(two_theta_range[1])
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 <= lo < hi <= 180):
        raise InputError(f"2θ range {lo}–{hi}° is empty or outside 0–180°")
    base = _line_strength(pl, radiation, measured_wavelength if measured_wavelength else (ref.wavelength if ref else None))
    if march_dollase is not None:
        md = march_dollase if isinstance(march_dollase, MarchDollase) else MarchDollase(*march_dollase)
        if ref is None or pl.hkl is None:
            raise InputError("preferred orientation needs the reference's hkl, cell and symmetry")
        base = base * orientation_factor(pl.hkl, ref, md)

    n = len(pl)
    # (emission line, reflection) pairs, line-major: pair p is line p // n, reflection p % n.
    tt = two_theta_from_d(pl.d, radiation.wavelengths[:, None]).ravel()
    pair = np.flatnonzero((tt >= lo) & (tt <= hi))  # d < λ/2 gives NaN: never inside
    which, index = np.divmod(pair, n)
    tt = tt[pair]
    lp = lorentz_polarisation(tt, monochromator_two_theta=radiation.monochromator_two_theta)
    absolute = base[index] * lp * radiation.weights[which]
    order = np.argsort(tt, kind="stable")
    absolute = absolute[order]
    top = float(absolute.max()) if absolute.size else 0.0
    index = index[order]
    return Sticks(
        two_theta=tt[order],
        d=pl.d[index],
        hkl=None if pl.hkl is None else pl.hkl[index],
        multiplicity=None if pl.multiplicity is None else pl.multiplicity[index],
        intensity=absolute * (100.0 / top) if top > 0 else np.zeros_like(absolute),
        absolute=absolute,
        line_name=tuple(np.array(radiation.line_names, dtype=object)[which[order]].tolist()),
        line_index=index,
        radiation=radiation,
    )


def _line_strength(pl: PatternLines, radiation: Radiation, measured_wavelength: float | None) -> np.ndarray:
    """m·|F|² for computed lines; intensity / LP(measured) for measured lines, shape (n,)."""
    if pl.f2 is not None:
        mult = pl.multiplicity if pl.multiplicity is not None else np.ones(len(pl))
        return pl.f2 * mult
    if pl.intensity is None:
        raise InputError("the reference has neither structure factors nor intensities")
    if measured_wavelength is None:
        raise InputError("measured lines need the wavelength they were measured with")
    tt_meas = two_theta_from_d(pl.d, measured_wavelength)
    lp = lorentz_polarisation(tt_meas, monochromator_two_theta=radiation.monochromator_two_theta)
    return np.where(np.isfinite(lp) & (lp > 0), pl.intensity / lp, 0.0)


def orientation_factor(hkl: np.ndarray, ref: ReferenceData, md: MarchDollase) -> np.ndarray:
    """March–Dollase factor of each line, averaged over its symmetry-equivalent reflections.

    Averaging over every image h·R of the Laue group (repeats included) equals the average
    over the distinct equivalents, because each appears equally often.

    Parameters
    ----------
    hkl : ndarray, shape (n, 3)
    ref : ReferenceData
        Supplies the cell and the symmetry (its CIF, else its space-group symbol).
    md : MarchDollase

    Returns
    -------
    ndarray, shape (n,)
    """
    return march_dollase_average(orientation_cos2(hkl, ref, md.axis), md.ratio)


def orientation_cos2(hkl: np.ndarray, ref: ReferenceData, axis: tuple[int, int, int]) -> np.ndarray:
    """cos² of the angle between every Laue-group image of each hkl and the texture axis,
    shape (n, k): what :func:`orientation_factor` needs besides the ratio (a refinement of the
    ratio computes it once)."""
    if ref.cell is None:
        raise InputError(f"{ref.name}: preferred orientation needs the cell")
    laue = _symmetry.laue_rotations(_rotations_of(ref))
    gstar = reciprocal_metric(ref.cell)
    images = np.einsum("ni,kij->nkj", hkl.astype(float), laue)  # (n, k, 3)
    ax = np.asarray(axis, dtype=float)
    dot = images @ gstar @ ax
    norm_h = np.sqrt(np.einsum("nki,ij,nkj->nk", images, gstar, images))
    norm_a = np.sqrt(ax @ gstar @ ax)
    return np.clip((dot / (norm_h * norm_a)) ** 2, 0.0, 1.0)


def march_dollase_average(cos2: np.ndarray, ratio: float) -> np.ndarray:
    """Mean over the images (axis 1) of the March–Dollase factor (r² cos²α + sin²α / r)^(−3/2)."""
    r = float(ratio)
    return np.mean((r * r * cos2 + (1.0 - cos2) / r) ** -1.5, axis=1)


def _rotations_of(ref: ReferenceData) -> np.ndarray:
    if ref.structure_text:
        from refdb.structure.crystal import read_crystal

        return read_crystal(ref.structure_text).rotations
    sg = gemmi.find_spacegroup_by_name(ref.space_group) if ref.space_group else None
    if sg is None:
        raise InputError(f"{ref.name}: preferred orientation needs the space group", "the entry has none refdb knows")
    return np.array([np.rint(np.array(op.seitz())[:3, :3]) for op in sg.operations()], dtype=np.int64)


def line_widths(
    two_theta: np.ndarray,
    radiation: Radiation,
    *,
    fwhm: float | None = None,
    uvw: tuple[float, float, float] = DEFAULT_UVW,
    crystallite_size_nm: float | None = None,
) -> np.ndarray:
    """FWHM (degrees) of lines at ``two_theta``: a constant, or Caglioti U, V, W, with optional
    Scherrer size broadening added in quadrature (exact for Gaussian shapes, an approximation
    for the Lorentzian-like size term)."""
    tt = np.asarray(two_theta, dtype=float)
    width = np.full(tt.shape, float(fwhm)) if fwhm is not None else caglioti_fwhm(tt, *uvw)
    if crystallite_size_nm is not None:
        if not np.isfinite(crystallite_size_nm) or crystallite_size_nm <= 0:
            raise InputError(f"crystallite size {crystallite_size_nm} nm must be positive")
        width = np.sqrt(width**2 + scherrer_fwhm(tt, radiation.wavelength, crystallite_size_nm) ** 2)
    if np.any(~np.isfinite(width)) or np.any(width <= 0):
        raise InputError("line widths must be positive", "check --fwhm or the Caglioti U, V, W")
    return width


def draw_profile(
    sticks_or_lines: Sticks | PatternLines | ReferenceData,
    radiation: Radiation,
    two_theta: np.ndarray,
    *,
    fwhm: float | None = None,
    uvw: tuple[float, float, float] = DEFAULT_UVW,
    eta: float = 0.5,
    crystallite_size_nm: float | None = None,
    march_dollase: MarchDollase | tuple[float, tuple[int, int, int]] | None = None,
) -> np.ndarray:
    """A continuous pattern: every stick drawn as an area-normalised pseudo-Voigt.

    Parameters
    ----------
    sticks_or_lines : Sticks, PatternLines or ReferenceData
        Lines are first turned into sticks for ``radiation`` over the grid's range (±1°).
    radiation : Radiation
    two_theta : ndarray, shape (m,)
        Grid in degrees 2θ, increasing.
    fwhm : float, optional
        A constant FWHM in degrees instead of the Caglioti function.
    uvw : (float, float, float)
        Caglioti U, V, W in deg² (Caglioti, Paoletti & Ricci 1958, Nucl. Instrum. 3, 223).
    eta : float
        Lorentzian fraction of the pseudo-Voigt, 0–1.
    crystallite_size_nm : float, optional
        Adds Scherrer size broadening (K = 0.9).
    march_dollase : optional
        Passed to :func:`stick_pattern` when lines are given.

    Returns
    -------
    ndarray, shape (m,)
        Σ intensity_i · profile_i(2θ): relative intensity (strongest stick = 100) per degree.
    """
    grid = checked_grid(two_theta)
    if not (0.0 <= eta <= 1.0):
        raise InputError(f"eta = {eta} must lie between 0 (Gaussian) and 1 (Lorentzian)")
    if isinstance(sticks_or_lines, Sticks):
        sticks = sticks_or_lines
    else:
        lo, hi = max(0.0, grid[0] - 1.0), min(180.0, grid[-1] + 1.0)
        sticks = stick_pattern(sticks_or_lines, radiation, two_theta_range=(lo, hi), march_dollase=march_dollase)
    width = line_widths(sticks.two_theta, radiation, fwhm=fwhm, uvw=uvw, crystallite_size_nm=crystallite_size_nm)
    return sum_profiles(grid, sticks.two_theta, sticks.intensity, width, eta)


def checked_grid(two_theta: np.ndarray) -> np.ndarray:
    """The 2θ grid as a float array; InputError unless finite, strictly increasing, inside 0–180°."""
    grid = np.asarray(two_theta, dtype=float)
    if grid.ndim != 1 or grid.size < 2 or np.any(~np.isfinite(grid)) or np.any(np.diff(grid) <= 0):
        raise InputError("the 2θ grid must be finite and strictly increasing")
    if grid[0] <= 0 or grid[-1] >= 180:
        raise InputError(f"the 2θ grid {grid[0]}–{grid[-1]}° must lie inside 0–180°")
    return grid


def sum_profiles(grid: np.ndarray, centers: np.ndarray, areas: np.ndarray, widths: np.ndarray, eta: float) -> np.ndarray:
    """Σ areas_i · pV(grid; centers_i, widths_i, eta), shape of ``grid``.

    The Lorentzian part is drawn within ±:data:`PROFILE_HALF_WINDOW` FWHM of each centre, the
    Gaussian part within ±:data:`GAUSSIAN_HALF_WINDOW` FWHM (beyond it the Gaussian is below
    1e-19 of its height, and its exponential was most of the cost). Peaks are evaluated on
    windows gathered into (peaks × window) arrays, in blocks that keep each array near a
    million elements, and accumulated with ``np.bincount``.
    """
    out = np.zeros(grid.shape[0])
    if centers.size == 0:
        return out
    if eta > 0.0:
        _accumulate(out, grid, centers, eta * areas, widths, PROFILE_HALF_WINDOW, lorentzian)
    if eta < 1.0:
        _accumulate(out, grid, centers, (1.0 - eta) * areas, widths, GAUSSIAN_HALF_WINDOW, gaussian)
    return out


@dataclass(frozen=True, eq=False)
class ProfileDerivatives:
    """A drawn profile and its derivatives, from :func:`sum_profiles_with_derivatives`.

    Attributes
    ----------
    profile : ndarray, shape (m,)
        Σ a_i · pV_i on the grid, the same as :func:`sum_profiles`.
    eta : ndarray, shape (m,)
        ∂profile/∂η = Σ a_i (L_i − G_i), each part within its own window.
    columns : ndarray, shape (k, m)
        Row k: Σ a_i (v_ki · pV_i + c_ki · ∂pV_i/∂c_i + w_ki · ∂pV_i/∂w_i) for the weights
        ``value``, ``center`` and ``width`` given (a weight set not given counts as zero).
    """

    profile: np.ndarray
    eta: np.ndarray
    columns: np.ndarray


def sum_profiles_with_derivatives(
    grid: np.ndarray,
    centers: np.ndarray,
    areas: np.ndarray,
    widths: np.ndarray,
    eta: float,
    *,
    value: np.ndarray | None = None,
    center: np.ndarray | None = None,
    width: np.ndarray | None = None,
) -> ProfileDerivatives:
    """:func:`sum_profiles` and, in the same pass over the windows, weighted sums of its
    per-line derivatives — the columns of a Jacobian by the chain rule.

    A parameter θ_k that moves line i's area, centre and FWHM by ∂a_i/∂θ_k = a_i·v_ki,
    ∂c_i/∂θ_k = c_ki and ∂w_i/∂θ_k = w_ki gives ∂profile/∂θ_k = ``columns[k]``. The profile
    is windowed exactly as in :func:`sum_profiles`, and the derivatives are those of the
    windowed sum (where a window edge crosses a grid point the windowed sum jumps by at most
    1/(1 + 4·40²) of a Lorentzian's height; that jump has no derivative and is left out).

    Parameters
    ----------
    grid : ndarray, shape (m,)
        Increasing, degrees 2θ.
    centers, areas, widths : ndarray, shape (n,)
        Line centres (degrees), areas, FWHM (degrees).
    eta : float
        Lorentzian fraction, 0–1.
    value, center, width : ndarray, shape (k, n), optional
        Per-line weights of the area (relative), centre and FWHM derivatives, one row per
        column wanted; those given must have the same k.

    Returns
    -------
    ProfileDerivatives
    """
    n = grid.shape[0]
    weights = [None if a is None else np.asarray(a, dtype=float) for a in (value, center, width)]
    k = next((a.shape[0] for a in weights if a is not None), 0)
    # The non-zero weight sets per column, so that a column pays only for the terms it uses.
    terms = [[(j, a[col]) for j, a in enumerate(weights) if a is not None and np.any(a[col])] for col in range(k)]
    parts = {}
    columns = np.zeros((k, n))
    for name, frac, half_window, shape in (
        ("lorentzian", eta, PROFILE_HALF_WINDOW, lorentzian_with_derivatives),
        ("gaussian", 1.0 - eta, GAUSSIAN_HALF_WINDOW, gaussian_with_derivatives),
    ):
        total = np.zeros(n)
        for rows, idx, valid in _windows(grid, centers, widths, half_window):
            # Padding past a window gets weight 0, so one flat index serves every bincount.
            # Work happens in place in a few block-sized buffers: for arrays of this size a
            # fresh allocation (page faults) costs more than the arithmetic.
            x = grid[idx]
            weight = areas[rows, None] * valid
            arrays = shape(x, centers[rows, None], widths[rows, None])
            for a in arrays:
                a *= weight
            flat = idx.ravel()
            total += np.bincount(flat, weights=arrays[0].ravel(), minlength=n)
            if frac == 0.0:
                continue
            vals, tmp = weight, x  # free now: reused as scratch
            for col, used in enumerate(terms):
                if used:
                    (j, wts), *rest = used
                    np.multiply(arrays[j], wts[rows, None], out=vals)
                    for j, wts in rest:
                        vals += np.multiply(arrays[j], wts[rows, None], out=tmp)
                    columns[col] += frac * np.bincount(flat, weights=vals.ravel(), minlength=n)
        parts[name] = total
    return ProfileDerivatives(
        profile=eta * parts["lorentzian"] + (1.0 - eta) * parts["gaussian"],
        eta=parts["lorentzian"] - parts["gaussian"],
        columns=columns,
    )


def _windows(grid: np.ndarray, centers: np.ndarray, widths: np.ndarray, half_window: float):
    """Blocks of line windows within ±half_window FWHM, as ``(rows, idx, valid)``.

    ``rows`` are line indices; ``idx`` (rows × window) grid indices from each line's first
    point, clipped to the grid; ``valid`` marks the points inside each line's window. Lines of
    similar window length share a block, and each block's array stays near a million elements.
    """
    lo = np.searchsorted(grid, centers - half_window * widths)
    hi = np.searchsorted(grid, centers + half_window * widths)
    span = hi - lo
    order = np.argsort(span)  # similar windows together keep the padded blocks small
    sorted_span = np.maximum(span[order], 1)
    start = 0
    while start < order.size:
        # The largest block whose padded array (rows × widest window) stays near 1e6 elements.
        cost = np.arange(1, order.size - start + 1) * sorted_span[start:]
        count = max(1, int(np.searchsorted(cost, 1_000_000, side="right")))
        rows = order[start : start + count]
        w = int(sorted_span[start + count - 1])
        idx = lo[rows, None] + np.arange(w)[None, :]
        valid = idx < hi[rows, None]
        yield rows, np.minimum(idx, grid.shape[0] - 1, out=idx), valid
        start += count


def _accumulate(out: np.ndarray, grid: np.ndarray, centers: np.ndarray, areas: np.ndarray, widths: np.ndarray,
                half_window: float, shape) -> None:
    """Add Σ areas_i · shape(grid; centers_i, widths_i) within ±half_window FWHM to ``out``."""
    for rows, idx, valid in _windows(grid, centers, widths, half_window):
        vals = areas[rows, None] * shape(grid[idx], centers[rows, None], widths[rows, None])
        out += np.bincount(idx[valid], weights=vals[valid], minlength=grid.shape[0])
