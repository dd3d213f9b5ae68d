"""Write the demo scans of the seed library (invented data for the demonstration).

The scenario is made up: rust and deposits from a corroded steel pipe flange at a coastal site.
Each scan is simulated with refdb itself from the seed structures in ``structures/`` and saved as
two-column text (2θ in degrees, counts) whose header says that it is invented, which anode it
stands for, and which phases and weight fractions made it (the ``# demo-answer:`` line). The
artefacts of a real measurement are put in on purpose: the Kα2 line, a sloping background with
a small amorphous hump, Poisson counting noise, a zero shift, a sample displacement, size
broadening of the nanocrystalline rust phases and preferred orientation of platy crystals.

The output is deterministic (fixed noise seed), so running the script again reproduces the files
byte for byte. Run it from anywhere::

    python seeds/make_demo_scans.py            # rewrites seeds/scans/*.xy
    python seeds/make_demo_scans.py OUT_DIR    # writes them to OUT_DIR instead
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
STRUCTURES = HERE / "structures"
SCANS = HERE / "scans"

#: Seed of the noise generator; part of the file contents, so changing it changes every scan.
NOISE_SEED = 20261201

CAUTION = (
    "Identification from this scan is a screening exercise. Regulated determinations "
    "(respirable crystalline silica, asbestos, pharmaceutical release) need accredited methods, "
    "local codes and licensed practice."
)


@dataclass(frozen=True)
class DemoScan:
    """Recipe of one demo scan. Per-phase settings are keyed by seed id (the CIF's stem)."""

    name: str
    title: str
    anode: str
    phases: dict[str, float]
    two_theta: tuple[float, float, float]  # start, stop, step (degrees)
    counts: float
    background: tuple[float, ...]
    amorphous: tuple[float, float, float] | None
    zero_shift: float
    displacement: float
    sizes_nm: dict[str, float] = field(default_factory=dict)
    texture: dict[str, tuple[float, tuple[int, int, int]]] = field(default_factory=dict)
    story: str = ""


DEMOS: tuple[DemoScan, ...] = (
    DemoScan(
        name="flange-rust",
        title="rust scraped from the flange face",
        # Iron-rich samples are usually measured with Co radiation: Cu Kα excites Fe K
        # fluorescence and buries the pattern in background (common practice, no source).
        anode="Co",
        phases={"magnetite": 0.48, "lepidocrocite": 0.25, "goethite": 0.20, "akaganeite": 0.07},
        two_theta=(8.0, 100.0, 0.02),
        counts=6000.0,
        background=(260.0, -3.2, 0.018),
        amorphous=(40.0, 12.0, 45.0),
        zero_shift=0.03,
        displacement=-0.05,
        sizes_nm={"magnetite": 80.0, "lepidocrocite": 30.0, "goethite": 25.0, "akaganeite": 40.0},
        # Lepidocrocite scales lie flat on the holder: texture along b (the layer normal).
        texture={"lepidocrocite": (0.75, (0, 1, 0))},
        story=(
            "Outer rust layer: black magnetite under orange lepidocrocite and brown goethite, "
            "with a few per cent akaganeite from chloride attack (sea spray)."
        ),
    ),
    DemoScan(
        name="hematite-si-check",
        title="hematite pigment check sample with a silicon internal standard",
        anode="Cu",
        phases={"hematite": 0.80, "silicon": 0.20},
        two_theta=(10.0, 90.0, 0.02),
        counts=12000.0,
        background=(120.0, -1.1, 0.006),
        amorphous=None,
        zero_shift=0.04,
        displacement=0.06,
        sizes_nm={"hematite": 150.0},
        story=(
            "Single-phase check: the red primer pigment with 20 % silicon (NIST SRM 640f type, "
            "a = 5.431144 Å) mixed in to correct the line positions."
        ),
    ),
    DemoScan(
        name="coastal-deposit",
        title="white crust from the flange's outer rim",
        anode="Cu",
        phases={"calcite": 0.45, "halite": 0.25, "quartz": 0.22, "goethite": 0.08},
        two_theta=(5.0, 80.0, 0.02),
        counts=9000.0,
        background=(150.0, -1.6, 0.010),
        amorphous=(22.0, 9.0, 60.0),
        zero_shift=-0.02,
        displacement=0.04,
        sizes_nm={"goethite": 45.0},
        # Calcite rhombs lie on their {104} cleavage faces.
        texture={"calcite": (0.85, (1, 0, 4))},
        story=(
            "Deposit of sea salt, calcareous scale and windblown sand, stained by a little "
            "goethite from the rust underneath."
        ),
    ),
)


def _reference(stem: str):
    from refdb.structure.reference import reference_from_cif

    return reference_from_cif(STRUCTURES / f"{stem}.cif")


def simulate(demo: DemoScan, seed: int = NOISE_SEED):
    """The :class:`refdb.scan.types.Scan` of one demo recipe."""
    from refdb.radiation import radiation_for
    from refdb.structure.simulate import simulate_scan

    start, stop, step = demo.two_theta
    grid = np.round(np.arange(start, stop + step / 2, step), 6)
    stems = list(demo.phases)
    return simulate_scan(
        [(_reference(s), demo.phases[s]) for s in stems],
        radiation_for(demo.anode),
        grid,
        zero_shift=demo.zero_shift,
        displacement=demo.displacement,
        crystallite_size_nm=[demo.sizes_nm.get(s) for s in stems],
        march_dollase=[demo.texture.get(s) for s in stems],
        background=demo.background,
        amorphous=demo.amorphous,
        counts=demo.counts,
        noise=True,
        seed=seed,
    )


def header(demo: DemoScan, seed: int = NOISE_SEED) -> list[str]:
    """The comment lines that open a demo scan file."""
    answer = ", ".join(f"{k}={v:.2f}" for k, v in demo.phases.items())
    sizes = ", ".join(f"{k} {v:g} nm" for k, v in demo.sizes_nm.items()) or "none"
    texture = ", ".join(
        f"{k} r={r:g} along {''.join(str(i) for i in hkl)}" for k, (r, hkl) in demo.texture.items()
    ) or "none"
    hump = "none" if demo.amorphous is None else (
        f"centre {demo.amorphous[0]:g} deg, FWHM {demo.amorphous[1]:g} deg, height {demo.amorphous[2]:g} counts"
    )
    return [
        f"# refdb demo scan '{demo.name}': {demo.title}",
        "# INVENTED FOR THE DEMONSTRATION - simulated with refdb from the seed structures, not a measurement.",
        "# Scenario (made up): corroded steel pipe flange from a coastal site.",
        f"# {demo.story}",
        f"# anode: {demo.anode}",
        f"# demo-answer: {answer}",
        "# demo-answer gives weight fractions of the crystalline phases used to simulate the scan.",
        f"# artefacts: Ka2 included; background polynomial {demo.background} in 2theta; amorphous hump {hump};",
        f"#   Poisson noise (seed {seed}); zero shift {demo.zero_shift:+.3f} deg; sample displacement "
        f"{demo.displacement:+.3f} deg (amplitude of cos(theta));",
        f"#   crystallite sizes: {sizes}; preferred orientation (March-Dollase): {texture}.",
        "# Made by seeds/make_demo_scans.py; licence CC0 1.0.",
        f"# Caution: {CAUTION}",
        "# columns: two_theta_deg counts",
    ]


def render(demo: DemoScan, seed: int = NOISE_SEED) -> str:
    """The full text of one demo scan file."""
    scan = simulate(demo, seed)
    rows = [f"{t:.3f} {int(round(c))}" for t, c in zip(scan.two_theta, scan.counts, strict=True)]
    return "\n".join(header(demo, seed) + rows) + "\n"


def make_demo_scans(out_dir: Path = SCANS, seed: int = NOISE_SEED) -> list[Path]:
    """Write every demo scan to ``out_dir`` (created if needed); return the paths written."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    written = []
    for demo in DEMOS:
        path = out_dir / f"{demo.name}.xy"
        path.write_text(render(demo, seed), encoding="utf-8", newline="\n")
        written.append(path)
    return written


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    out = Path(args[0]) if args else SCANS
    for path in make_demo_scans(out):
        print(path.name)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
