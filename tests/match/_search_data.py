"""Synthetic libraries and peak lists for the search tests (invented data, test use only).

Line positions come from invented orthorhombic cells (d from the reciprocal metric with
small hkl), intensities from a random |F|² with a Debye–Waller-like fall-off. Peak lists are
written here with their own few lines of numpy (Bragg's law, the Bragg–Brentano
Lorentz–polarisation factor), without importing the search code, so that a mistake in the
index or the score cannot hide itself.
"""

from __future__ import annotations

import numpy as np

from refdb.radiation import radiation_for
from refdb.records import LibraryArrays
from refdb.scan.types import PeakList

CU = radiation_for("Cu")
LAMBDA = 1.54059292  # Cu Kα1, Å (ITC Vol. C 2006, Table 4.2.2.6)

ELEMENT_POOL = ("O", "Si", "Al", "Fe", "Ca", "Mg", "Na", "K", "Ti", "Zn", "Cu", "C", "H", "S", "Cl", "Pb", "U", "Og")


def cell_lines(a: float, b: float, c: float, d_min: float = 0.9) -> tuple[np.ndarray, np.ndarray]:
    """Distinct d-spacings (descending) and multiplicities of an orthorhombic P cell."""
    h = np.arange(0, 13)
    hh, kk, ll = np.meshgrid(h, h, h, indexing="ij")
    hkl = np.stack([hh.ravel(), kk.ravel(), ll.ravel()], axis=1)[1:]
    q = (hkl[:, 0] / a) ** 2 + (hkl[:, 1] / b) ** 2 + (hkl[:, 2] / c) ** 2
    d = 1.0 / np.sqrt(q)
    keep = d >= d_min
    d = d[keep]
    mult = 2 ** (hkl[keep] != 0).sum(axis=1)
    order = np.argsort(-d)
    return d[order], mult[order]


def synthetic_arrays(n_entries: int, seed: int = 0, *, max_lines: int = 120, stamp: str = "s0",
                     tags_every: int = 3) -> LibraryArrays:
    """A library of invented computed entries (LibraryArrays) with elements, tags and cells."""
    rng = np.random.default_rng(seed)
    ds, ms, f2s, starts, metas = [], [], [], [0], []
    for i in range(n_entries):
        a, b, c = rng.uniform(3.0, 12.0, 3)
        d, m = cell_lines(a, b, c)
        d, m = d[:max_lines], m[:max_lines]
        f2 = rng.exponential(1.0, d.size) * np.exp(-0.5 / d**2) * 1000.0
        ds.append(d)
        ms.append(m)
        f2s.append(f2)
        starts.append(starts[-1] + d.size)
        els = tuple(sorted(set(rng.choice(ELEMENT_POOL, size=rng.integers(1, 5), replace=False).tolist())))
        tags = ("mineral",) if i % tags_every == 0 else ()
        if i % 7 == 0:
            tags = tags + ("pigment",)
        metas.append({
            "name": f"invented phase {i}", "formula": "".join(els), "formula_reduced": "".join(els),
            "source_id": f"syn-{i}", "space_group": "P m m m", "sg_number": 47, "elements": els,
            "tags": tags, "volume": float(a * b * c), "cell": (float(a), float(b), float(c), 90.0, 90.0, 90.0),
        })
    d = np.concatenate(ds)
    return LibraryArrays(
        entry_id=np.arange(1, n_entries + 1, dtype=np.int64) * 10,
        kind=np.zeros(n_entries, dtype=np.int8),
        wavelength=np.full(n_entries, np.nan),
        line_start=np.array(starts, dtype=np.int64),
        line_entry=np.repeat(np.arange(n_entries, dtype=np.int32), np.diff(starts)),
        d=d,
        multiplicity=np.concatenate(ms).astype(np.int32),
        f2=np.concatenate(f2s),
        intensity=np.full(d.size, np.nan),
        meta=tuple(metas),
        stamp=stamp,
    )


def lp(two_theta: np.ndarray) -> np.ndarray:
    """Bragg–Brentano LP without monochromator: (1 + cos²2θ)/(sin²θ cos θ)."""
    t = np.radians(two_theta)
    return (1 + np.cos(t) ** 2) / (np.sin(t / 2) ** 2 * np.cos(t / 2))


def entry_peaks(arrays: LibraryArrays, row: int, *, two_theta_range=(10.0, 80.0), zero_shift: float = 0.0,
                d_scale: float = 0.0, fwhm: float = 0.1, drop: tuple[int, ...] = (), rel_floor: float = 0.5,
                scale_intensity: np.ndarray | None = None, seed: int = 1, jitter: float = 0.0) -> PeakList:
    """The peak list one would observe for one entry: lines above ``rel_floor`` % of the
    strongest inside the range, with a zero shift, a d-scale, dropped lines (indices into the
    visible lines, strongest first) and optional position jitter (degrees)."""
    a, b = arrays.line_start[row], arrays.line_start[row + 1]
    d = arrays.d[a:b] * (1.0 + d_scale)
    inten = arrays.f2[a:b] * np.maximum(arrays.multiplicity[a:b], 1)
    tt = 2 * np.degrees(np.arcsin(np.clip(LAMBDA / (2 * d), 0, 1)))
    inten = inten * lp(tt)
    if scale_intensity is not None:
        inten = inten * scale_intensity
    tt = tt + zero_shift
    ok = (tt > two_theta_range[0]) & (tt < two_theta_range[1])
    tt, inten = tt[ok], inten[ok]
    # Merge lines closer than half a width, as a peak search would see them.
    order = np.argsort(tt)
    tt, inten = tt[order], inten[order]
    group = np.concatenate([[0], np.cumsum(np.diff(tt) > fwhm / 2)])
    w = np.bincount(group, weights=inten)
    tt = np.bincount(group, weights=tt * inten) / w
    inten = w
    keep = inten >= rel_floor / 100 * inten.max()
    tt, inten = tt[keep], inten[keep]
    if drop:
        strongest = np.argsort(-inten)
        mask = np.ones(tt.size, dtype=bool)
        mask[strongest[list(drop)]] = False
        tt, inten = tt[mask], inten[mask]
    if jitter:
        tt = tt + np.random.default_rng(seed).normal(0, jitter, tt.size)
        o = np.argsort(tt)
        tt, inten = tt[o], inten[o]
    return make_peaks(tt, inten, fwhm=fwhm, two_theta_range=two_theta_range)


def make_peaks(two_theta, intensity, *, fwhm: float = 0.1, two_theta_range=(10.0, 80.0), radiation=CU) -> PeakList:
    tt = np.asarray(two_theta, dtype=float)
    inten = np.asarray(intensity, dtype=float)
    n = tt.size
    nan = np.full(n, np.nan)
    d = radiation.wavelength / (2 * np.sin(np.radians(tt) / 2))
    return PeakList(
        two_theta=tt, d=d, height=inten / fwhm, area=inten, fwhm=np.full(n, fwhm), eta=np.full(n, 0.5),
        u_two_theta=nan, u_height=nan, u_area=nan, u_fwhm=nan, significance=np.full(n, 50.0),
        radiation=radiation, two_theta_range=tuple(float(x) for x in two_theta_range), source="invented",
    )
