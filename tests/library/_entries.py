"""Synthetic reference entries for library tests (invented numbers: storage, not physics)."""

from __future__ import annotations

import numpy as np

from refdb.records import PatternLines, ReferenceData


def computed_entry(seed: int, n_lines: int = 40, **kw) -> ReferenceData:
    rng = np.random.default_rng(seed)
    d = np.sort(rng.uniform(0.8, 6.0, n_lines))[::-1]
    cell = tuple(float(x) for x in rng.uniform(3, 12, 3)) + (90.0, 90.0, 90.0)
    fields = dict(
        kind="computed",
        name=f"synthetic phase {seed}",
        formula="Fe2 O3",
        formula_reduced="Fe2O3",
        elements=("Fe", "O"),
        lines=PatternLines(
            d=d,
            hkl=rng.integers(-6, 7, size=(n_lines, 3)),
            multiplicity=rng.integers(1, 49, size=n_lines),
            f2=rng.uniform(0, 1e5, n_lines),
        ),
        space_group="R -3 c",
        sg_number=167,
        cell=cell,
        volume=float(np.prod(cell[:3])),
        z=6.0,
        density=5.27,
        cell_mass=958.2,
        rir=3.1,
        source="COD",
        source_id=str(9000000 + seed),
        licence="public domain",
        file_name=f"{9000000 + seed}.cif",
        structure_text=f"data_{seed}\n_cell_length_a {cell[0]!r}\n# synthetic {seed}\n",
    )
    fields.update(kw)
    return ReferenceData(**fields)


def measured_entry(seed: int, n_lines: int = 25, **kw) -> ReferenceData:
    rng = np.random.default_rng(1000 + seed)
    d = np.sort(rng.uniform(1.0, 5.0, n_lines))[::-1]
    inten = rng.uniform(1, 100, n_lines)
    inten[rng.integers(n_lines)] = 100.0
    fields = dict(
        kind="measured",
        name=f"lab standard {seed}",
        formula="Ca C O3",
        formula_reduced="CCaO3",
        elements=("C", "Ca", "O"),
        lines=PatternLines(d=d, intensity=inten),
        wavelength=1.5405929,
        source="in-house",
        source_id=f"std-{seed}",
    )
    fields.update(kw)
    return ReferenceData(**fields)
