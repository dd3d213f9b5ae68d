"""Atomic scattering factors, anomalous terms and atomic masses, from xraydb.

* f0(s), s = sinθ/λ = 1/(2d) in Å⁻¹: Waasmaier & Kirfel (1995), Acta Cryst. A51, 416–431,
  five-Gaussian fits to International Tables Vol. C Tables 6.1.1.1 (atoms) and 6.1.1.3 (ions),
  as shipped by xraydb. Coefficients are read once per species (cached for the process) and
  evaluated with numpy.
* f′, f″: Chantler (1995), J. Phys. Chem. Ref. Data 24, 71 (NIST FFAST), via
  ``xraydb.f1_chantler`` / ``xraydb.f2_chantler`` (which return the anomalous parts only).
* Atomic masses: xraydb's element table (IUPAC standard atomic weights).
"""

from __future__ import annotations

import functools
import json

import numpy as np
import xraydb

from refdb.errors import InputError

#: h·c/e in eV·Å from the exact SI values of h, c and e (2019 SI).
HC_EV_ANGSTROM = 6.62607015e-34 * 299792458.0 / 1.602176634e-19 * 1e10

#: Hydrogen isotopes written as their own element symbols in CIFs.
_ISOTOPES = {"D": ("H", 2.01410178), "T": ("H", 3.01604928)}


def chemical_element(symbol: str) -> str:
    """Element symbol for scattering and chemistry: D and T are hydrogen."""
    return _ISOTOPES.get(symbol, (symbol, 0.0))[0]


@functools.lru_cache(maxsize=None)
def known_element(symbol: str) -> bool:
    """True when xraydb has scattering factors and a mass for the symbol (H … Cf, D, T)."""
    try:
        xraydb.atomic_number(chemical_element(symbol))
        return bool(_coefficients(chemical_element(symbol)))
    except (ValueError, KeyError, TypeError, IndexError):
        return False


@functools.lru_cache(maxsize=None)
def atomic_mass(symbol: str) -> float:
    """Atomic mass in g/mol (u); the isotope mass for D and T (Wapstra et al. 2003, from memory)."""
    if symbol in _ISOTOPES:
        return _ISOTOPES[symbol][1]
    return float(xraydb.atomic_mass(symbol))


@functools.lru_cache(maxsize=None)
def species_name(element: str, charge: int) -> str:
    """The xraydb name of the ion with this charge (``Fe3+``, ``O2-``), else the neutral atom.

    Waasmaier–Kirfel tabulate common ions only; a charge they lack falls back to the neutral
    atom, the usual choice of structure-factor programs (common practice, no source).
    """
    el = chemical_element(element)
    if charge:
        ion = f"{el}{abs(charge)}{'+' if charge > 0 else '-'}"
        if ion in xraydb.f0_ions(el):
            return ion
    return el


@functools.lru_cache(maxsize=None)
def _coefficients(species: str) -> tuple[float, np.ndarray, np.ndarray]:
    rows = [r for r in xraydb.get_xraydb().get_cache("Waasmaier") if r.ion == species]
    if not rows:
        raise KeyError(species)
    row = rows[0]
    return float(row.offset), np.array(json.loads(row.scale)), np.array(json.loads(row.exponents))


def f0(species: str, s: np.ndarray | float) -> np.ndarray:
    """Non-dispersive scattering factor f0 in electrons.

    Parameters
    ----------
    species : str
        Element (``"Si"``) or ion (``"O2-"``) as named by :func:`species_name`.
    s : array_like
        sinθ/λ in Å⁻¹ (= 1/(2d)), any shape.

    Returns
    -------
    ndarray, shape of ``s``
    """
    c, a, b = _coefficients(species)
    s = np.asarray(s, dtype=float)
    return c + np.exp(-np.multiply.outer(s * s, b)) @ a


@functools.lru_cache(maxsize=None)
def _six_terms(species: str) -> tuple[float, ...]:
    """a1…a5, c, b1…b5, 0: the fit as six Gaussians, the constant c being one with b = 0."""
    c, a, b = _coefficients(species)
    return (*a.tolist(), c, *b.tolist(), 0.0)


def f0_table(species: tuple[str, ...], s: np.ndarray) -> np.ndarray:
    """f0 of several species at the same s values, shape (len(s), len(species)).

    All species are evaluated together as f0 = Σ_t a_t·exp(−b_t s²) over six terms (the
    constant c is the sixth, with b = 0); their coefficients come from the per-species cache.
    """
    table = np.array([_six_terms(sp) for sp in species]).reshape(-1, 12)  # a handful of rows
    s = np.asarray(s, dtype=float)
    terms = np.exp(np.multiply.outer(-(s * s), table[:, 6:])) * table[:, :6]  # (n, species, 6)
    # The sum over six terms as a product with ones (numpy's reduction is slow on short axes).
    return (terms.reshape(-1, 6) @ np.ones(6)).reshape(s.shape[0], len(species))


@functools.lru_cache(maxsize=None)
def anomalous_terms(element: str, energy_ev: float) -> tuple[float, float]:
    """(f′, f″) in electrons of a neutral atom at a photon energy in eV (Chantler tables).

    Raises
    ------
    InputError
        The element is beyond the tables (xraydb's Chantler data stop at U, Z = 92).
    """
    el = chemical_element(element)
    try:
        return float(xraydb.f1_chantler(el, energy_ev)), float(xraydb.f2_chantler(el, energy_ev))
    except (IndexError, KeyError, ValueError):
        raise InputError(f"no anomalous scattering data for {el} (the Chantler tables in xraydb stop at U)",
                         "compute the pattern without anomalous terms") from None


def energy_ev(wavelength: float) -> float:
    """Photon energy in eV of a wavelength in Å."""
    return HC_EV_ANGSTROM / wavelength
