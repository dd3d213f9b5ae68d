"""The mixture figure: written in the formats offered, labelled for a reader."""

from __future__ import annotations

import pytest

from refdb.errors import InputError
from refdb.report.mixture_plot import mixture_figure, save_mixture_plot


def test_png_and_svg(mixture_results, tmp_path):
    result, _ = mixture_results
    png = save_mixture_plot(result, tmp_path / "m.png")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    svg = save_mixture_plot(result, tmp_path / "m.SVG")
    assert b"<svg" in svg.read_bytes()[:2000]


def test_labels_legend_and_one_row_per_phase(mixture_results):
    result, _ = mixture_results
    fig = mixture_figure(result)
    main, diff, sticks = fig.axes
    assert "counts" in main.get_ylabel() and "2θ" in sticks.get_xlabel() and "degrees" in sticks.get_xlabel()
    labels = [t.get_text() for t in main.get_legend().get_texts()]
    assert labels[:3] == ["observed", "calculated", "background"] and "unexplained peak" in labels
    row_labels = [t.get_text() for t in sticks.texts]
    assert len(row_labels) == len(result.phases)
    assert all("wt %" in t for t in row_labels)


def test_bad_suffix_and_empty_result(mixture_results, tmp_path):
    result, empty = mixture_results
    with pytest.raises(InputError):
        save_mixture_plot(result, tmp_path / "m.bmp")
    with pytest.raises(InputError):
        save_mixture_plot(empty, tmp_path / "m.png")
