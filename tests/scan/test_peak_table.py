"""Peak tables: d or 2θ columns with intensities; conversions checked against the Si values of
../shared/check-values.md section 7 (SRM 640f, Cu Kα1 1.54059292 Å)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from refdb.errors import InputError
from refdb.radiation import radiation_for
from refdb.scan import load_peak_table

SI_D = [3.135672, 1.920199, 1.637552]
SI_2T = [28.4412, 47.3007, 56.1199]


def test_d_table_with_header(tmp_path):
    path = tmp_path / "si.txt"
    path.write_text("# anode: Cu\nd (Å)  I\n" + "\n".join(f"{d} {i}" for d, i in zip(SI_D, [100, 55, 30], strict=True)),
                    encoding="utf-8")
    peaks = load_peak_table(path)
    np.testing.assert_allclose(peaks.two_theta, SI_2T, atol=6e-5)  # published to 4 decimals
    np.testing.assert_allclose(peaks.d, SI_D)
    np.testing.assert_array_equal(peaks.relative_intensity, [100, 55, 30])
    assert np.all(np.isnan(peaks.u_two_theta)) and np.all(np.isnan(peaks.fwhm))
    assert peaks.two_theta_range == (peaks.two_theta[0], peaks.two_theta[-1])


def test_two_theta_table_by_option_and_range(tmp_path):
    path = tmp_path / "p.csv"
    path.write_text("# two_theta_range: 5 90\n" + "\n".join(f"{t},{i}" for t, i in zip(SI_2T[::-1], [30, 55, 100],
                    strict=True)), encoding="utf-8")
    peaks = load_peak_table(path, radiation=radiation_for("Cu"), positions="two_theta")
    np.testing.assert_allclose(peaks.d, SI_D, atol=2e-5)  # 2θ to 4 decimals ↔ d to ~1e-5 Å
    assert peaks.two_theta_range == (5.0, 90.0)


def test_refusals(tmp_path):
    path = tmp_path / "bare.txt"
    path.write_text("3.1357 100\n1.9202 55\n", encoding="utf-8")
    with pytest.raises(InputError, match="d-spacings or 2θ"):
        load_peak_table(path, radiation=radiation_for("Cu"))
    with pytest.raises(InputError, match="--anode Cu"):
        load_peak_table(path, positions="d")
    short = tmp_path / "short.txt"
    short.write_text("d I\n0.5 100\n", encoding="utf-8")
    with pytest.raises(InputError, match="cannot diffract"):
        load_peak_table(short, radiation=radiation_for("Cu"))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(st.floats(min_value=0.8, max_value=15.0), st.floats(min_value=0.1, max_value=100.0)),
                min_size=1, max_size=30, unique_by=lambda t: t[0]))
def test_random_d_tables_read_back(tmp_path, rows):
    path = tmp_path / "r.txt"
    path.write_text("# anode: Cu\nd intensity\n" + "\n".join(f"{d!r} {i!r}" for d, i in rows), encoding="utf-8")
    peaks = load_peak_table(path)
    # The same (d, intensity) pairs come back, ordered by increasing 2θ (d values a rounding
    # error apart may share one 2θ, so pairs are compared as sorted lists).
    assert sorted(zip(peaks.d.tolist(), peaks.height.tolist(), strict=True)) == sorted(rows)
    assert np.all(np.diff(peaks.two_theta) >= 0)
