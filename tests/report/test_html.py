"""The HTML report is one self-contained file that carries the caution."""

from __future__ import annotations

import html
import re
from dataclasses import replace

import pytest

from refdb.errors import InputError
from refdb.report.caution import CAUTION
from refdb.report.html import mixture_html, write_mixture_html


def test_report_is_self_contained(mixture_results, tmp_path):
    result, _ = mixture_results
    path = write_mixture_html(result, tmp_path / "r.html")
    text = path.read_text(encoding="utf-8")
    assert not re.search(r"https?://", text)  # nothing fetched from a network
    assert not re.search(r"<(script|link|iframe)\b", text)
    assert re.search(r'src="data:image/png;base64,[A-Za-z0-9+/=]{1000,}"', text)
    assert text.count(html.escape(CAUTION)) == 2  # at the top and at the bottom
    for needle in ("Quartz", "Rutile", result.library_stamp, "Unexplained peaks", "Detection limits",
                   "Processing", "Rwp"):
        assert needle in text, needle


def test_unexplained_peaks_of_absent_phase_are_listed(mixture_results):
    result, _ = mixture_results
    text = mixture_html(result, include_plot=False)
    rows = text.split("<h2>Unexplained peaks</h2>")[1].split("<h2>")[0]
    assert rows.count("<tr>") - 1 == len(result.unexplained) >= 3


def test_names_are_escaped(mixture_results):
    result, _ = mixture_results
    bad = replace(result, phases=(replace(result.phases[0], name="<script>x</script>"),) + result.phases[1:])
    text = mixture_html(bad, include_plot=False)
    assert "<script>" not in text and "&lt;script&gt;" in text


def test_no_phase_report_has_no_plot_but_the_caution(mixture_results):
    _, empty = mixture_results
    assert empty.phases == () and empty.fit is None
    text = mixture_html(empty)
    assert "data:image" not in text and html.escape(CAUTION) in text and "None." in text


def test_unwritable_path(mixture_results, tmp_path):
    result, _ = mixture_results
    with pytest.raises(InputError):
        write_mixture_html(result, tmp_path / "missing" / "r.html")
