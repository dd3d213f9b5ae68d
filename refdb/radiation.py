"""X-ray radiation: laboratory anodes, wavelengths and Bragg conversions.

Wavelengths are on one scale (Å, not Bearden's Å*), so positions computed for different
anodes can be compared:

* Cu Kα1 1.54059292 Å and Mo Kα1 0.70931713 Å: International Tables for Crystallography
  Vol. C (2006), §4.2.2.14, Table 4.2.2.6 (Deslattes, Kessler, Indelicato & Lindroth).
* Kα2 of Cu, and Kα1/Kα2 of Co, Fe and Cr: Hölzer, Fritsch, Deutsch, Härtwig & Förster (1997),
  Phys. Rev. A 56, 4554.
* Mo Kα2 and Ag Kα1/Kα2: NIST SRD 128 (Deslattes et al. 2003, Rev. Mod. Phys. 75, 35).
* Cu Kβ 1.392246 Å: ITC Vol. C (2006), as tabulated in xrayutilities 1.8.0. The other Kβ
  values are from memory of the same tables (about 1e-5 Å) and only matter for scans taken
  without a Kβ filter or monochromator.

The Kα2/Kα1 intensity ratio defaults to 0.5 (the 2:1 multiplet ratio of the 2p3/2 and 2p1/2
levels; common practice, no source). The measured ratios are slightly larger (0.51 for Cu in
the Elam tables of xraydb) and can be given explicitly.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from refdb.errors import InputError

#: Kα1, Kα2, Kβ wavelengths in Å for each anode (see the module docstring for sources).
ANODES: dict[str, tuple[float, float, float]] = {
    "Cu": (1.54059292, 1.5444274, 1.392246),
    "Co": (1.7889960, 1.7928350, 1.620830),
    "Fe": (1.9360410, 1.9399730, 1.756604),
    "Cr": (2.2897260, 2.2936510, 2.084881),
    "Mo": (0.70931713, 0.713607, 0.632303),
    "Ag": (0.55942178, 0.5638131, 0.497082),
}

#: Default Kα2/Kα1 intensity ratio (common practice, no source; see module docstring).
KALPHA2_RATIO = 0.5
#: Kβ/Kα1 intensity ratio of an unfiltered tube (from memory, about 0.2 for Cu; only rough).
KBETA_RATIO = 0.2


@dataclass(frozen=True, eq=False)
class Radiation:
    """The wavelengths that illuminate the sample.

    Attributes
    ----------
    label : str
        ``"Cu"``, ``"Mo"``… for an anode, or ``"1.54060 Å"`` for a single wavelength.
    wavelengths : ndarray, shape (k,)
        Wavelengths in Å; the first is the primary line (Kα1) that positions refer to.
    weights : ndarray, shape (k,)
        Relative intensities of the lines; ``weights[0] == 1``.
    line_names : tuple of str
        ``("Ka1", "Ka2")`` and so on.
    monochromator_two_theta : float or None
        Diffraction angle 2θ_M in degrees of a diffracted-beam monochromator crystal (graphite
        002 for Cu Kα: about 26.6°), or None for no monochromator. Enters the polarisation factor.
    """

    label: str
    wavelengths: np.ndarray
    weights: np.ndarray
    line_names: tuple[str, ...]
    monochromator_two_theta: float | None = None
    anode: str | None = field(default=None)

    @property
    def wavelength(self) -> float:
        """The primary (Kα1) wavelength in Å."""
        return float(self.wavelengths[0])

    def two_theta(self, d: np.ndarray | float) -> np.ndarray:
        """2θ in degrees of d-spacings (Å) for the primary line; NaN where no reflection exists."""
        return two_theta_from_d(d, self.wavelength)

    def d_spacing(self, two_theta: np.ndarray | float) -> np.ndarray:
        """d-spacings (Å) of 2θ positions (degrees) for the primary line."""
        return d_from_two_theta(two_theta, self.wavelength)

    def describe(self) -> str:
        """A short human-readable description, e.g. ``Cu Kα1 1.540593 Å + Kα2``."""
        if self.anode:
            extra = " + ".join(n.replace("Ka2", "Kα2").replace("Kb", "Kβ") for n in self.line_names[1:])
            return f"{self.anode} Kα1 {self.wavelength:.6f} Å" + (f" + {extra}" if extra else "")
        return f"λ = {self.wavelength:.6f} Å"

    def to_dict(self) -> dict:
        """A JSON-ready description (used in reports and caches)."""
        return {
            "label": self.label,
            "anode": self.anode,
            "wavelengths": [float(w) for w in self.wavelengths],
            "weights": [float(w) for w in self.weights],
            "lines": list(self.line_names),
            "monochromator_two_theta": self.monochromator_two_theta,
        }


def anode_names() -> list[str]:
    """The anodes refdb knows, in the order of :data:`ANODES`."""
    return list(ANODES)


def radiation_for(
    anode: str | None = None,
    *,
    wavelength: float | None = None,
    alpha2: bool = True,
    kbeta: bool = False,
    alpha2_ratio: float = KALPHA2_RATIO,
    monochromator_two_theta: float | None = None,
) -> Radiation:
    """Build a :class:`Radiation` from an anode name or a single wavelength.

    Parameters
    ----------
    anode : str, optional
        One of ``Cu Co Fe Cr Mo Ag`` (case-insensitive).
    wavelength : float, optional
        A single wavelength in Å (synchrotron, or a monochromatised Kα1 beam). Exactly one of
        ``anode`` and ``wavelength`` must be given.
    alpha2 : bool
        Include the Kα2 line (anode only).
    kbeta : bool
        Include the Kβ line of an unfiltered tube (anode only).
    alpha2_ratio : float
        Kα2/Kα1 intensity ratio.
    monochromator_two_theta : float, optional
        2θ_M of a diffracted-beam monochromator in degrees.

    Raises
    ------
    InputError
        Unknown anode, both or neither of anode and wavelength, or a wavelength outside
        0.1–5 Å (a value in nm or pm is the usual mistake).
    """
    if (anode is None) == (wavelength is None):
        raise InputError(
            "give either an anode or a wavelength",
            f"e.g. --anode Cu, or --wavelength 1.5406 (Å); anodes: {', '.join(ANODES)}",
        )
    mono = None if monochromator_two_theta is None else float(monochromator_two_theta)
    if wavelength is not None:
        lam = float(wavelength)
        if not np.isfinite(lam) or not (0.1 <= lam <= 5.0):
            raise InputError(
                f"wavelength {wavelength} is outside 0.1–5 Å",
                "give it in ångström: Cu Kα1 is 1.5406, not 0.15406 (nm) or 154.06 (pm)",
            )
        return Radiation(
            label=f"{lam:.5f} Å",
            wavelengths=np.array([lam]),
            weights=np.array([1.0]),
            line_names=("single",),
            monochromator_two_theta=mono,
        )
    key = _anode_key(anode)
    ka1, ka2, kb = ANODES[key]
    lams, weights, names = [ka1], [1.0], ["Ka1"]
    if alpha2:
        if not (0.0 <= alpha2_ratio <= 1.0):
            raise InputError(f"Kα2/Kα1 ratio {alpha2_ratio} is outside 0–1")
        lams.append(ka2)
        weights.append(float(alpha2_ratio))
        names.append("Ka2")
    if kbeta:
        lams.append(kb)
        weights.append(KBETA_RATIO)
        names.append("Kb")
    return Radiation(
        label=key,
        wavelengths=np.array(lams),
        weights=np.array(weights),
        line_names=tuple(names),
        monochromator_two_theta=mono,
        anode=key,
    )


def _anode_key(anode: str) -> str:
    text = anode.strip()
    for suffix in ("kalpha1", "kalpha", "ka1", "ka"):
        if text.lower().endswith(suffix) and len(text) > len(suffix):
            text = text[: -len(suffix)]
            break
    for key in ANODES:
        if key.lower() == text.lower():
            return key
    raise InputError(f"unknown anode {anode!r}", f"choose one of {', '.join(ANODES)} or give --wavelength in Å")


def two_theta_from_d(d: np.ndarray | float, wavelength: float | np.ndarray) -> np.ndarray:
    """Bragg's law, first order: 2θ = 2·asin(λ / 2d), in degrees.

    d-spacings shorter than λ/2 cannot diffract; they give NaN. ``d`` and ``wavelength``
    broadcast (e.g. wavelengths of shape (k, 1) against d of shape (n,) give (k, n)).
    """
    d = np.asarray(d, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = wavelength / (2.0 * d)
        return np.where(s > 0, 2.0 * np.degrees(np.arcsin(s)), np.nan)  # arcsin(s > 1) is NaN


def d_from_two_theta(two_theta: np.ndarray | float, wavelength: float) -> np.ndarray:
    """Bragg's law inverted: d = λ / (2 sin θ), in Å, for 2θ in degrees."""
    tt = np.asarray(two_theta, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return wavelength / (2.0 * np.sin(np.radians(tt) / 2.0))


def q_from_d(d: np.ndarray | float) -> np.ndarray:
    """Scattering vector magnitude Q = 2π/d in Å⁻¹."""
    return 2.0 * np.pi / np.asarray(d, dtype=float)
