"""The shared caution text says what the project rules require of every report."""

from refdb.report.caution import CAUTION, CAUTION_SHORT, caution_text


def test_caution_names_screening_and_regulated_determinations():
    for text in (CAUTION, CAUTION_SHORT):
        low = text.lower()
        assert "screening" in low
        for needle in ("respirable crystalline silica", "asbestos", "pharmaceutical release",
                       "accredited methods", "local codes", "licensed practice"):
            assert needle in low, needle
        assert "\n" not in text
    assert caution_text() == CAUTION and caution_text(short=True) == CAUTION_SHORT
