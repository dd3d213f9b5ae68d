"""Scan readers: text columns, CSV, powder CIF, stdin, radiation statements, validation rules.

Files are written in the tests (invented data). The powder CIF items follow the IUCr pdCIF
dictionary (Toby 2006, International Tables Vol. G §4.7): _pd_meas_2theta_scan,
_pd_meas_2theta_range_{min,max,inc}, _pd_meas_counts_total, _pd_meas_intensity_total,
_diffrn_radiation_wavelength(_wt), _diffrn_radiation_type.
"""

from __future__ import annotations

import io
import sys

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from refdb.errors import InputError
from refdb.radiation import ANODES, radiation_for
from refdb.scan import SCAN_FORMATS, load_measurement, load_scan
from refdb.scan.readers import cif_numbers, format_help
from refdb.scan.types import PeakList, Scan

CU = radiation_for("Cu")


def _columns(n=30, start=10.0, step=0.02):
    x = start + step * np.arange(n)
    y = 100 + 10 * np.arange(n) % 37
    return x, y.astype(float)


def _write_xy(path, x, y, sep=" ", header=""):
    lines = [header] if header else []
    lines += [f"{a:.4f}{sep}{b:.0f}" for a, b in zip(x, y, strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_formats_table_and_help():
    assert set(SCAN_FORMATS) == {"xy", "csv", "pdcif"}
    for name in SCAN_FORMATS:
        assert name in format_help()


@pytest.mark.parametrize("sep", [" ", "\t", ",", ";", "  "])
def test_separators(tmp_path, sep):
    x, y = _columns()
    scan = load_scan(_write_xy(tmp_path / "a.xy", x, y, sep, "# anode: Cu"))
    np.testing.assert_allclose(scan.two_theta, x, atol=5e-5)  # written with 4 decimals
    np.testing.assert_array_equal(scan.counts, y)
    np.testing.assert_allclose(scan.sigma, np.sqrt(y))  # Poisson default, exact
    assert scan.radiation.anode == "Cu" and scan.source == "a.xy"


def test_decimal_comma_with_semicolons(tmp_path):
    x, y = _columns()
    lines = ["! wavelength = 1.5406"] + [f"{a:.2f};{b:.0f}".replace(".", ",") for a, b in zip(x, y, strict=True)]
    (tmp_path / "b.txt").write_text("\n".join(lines), encoding="utf-8")
    scan = load_scan(tmp_path / "b.txt")
    np.testing.assert_allclose(scan.two_theta, x, atol=5e-3)  # two decimals written
    assert scan.radiation.wavelength == pytest.approx(1.5406)
    assert len(scan.radiation.wavelengths) == 1  # a single wavelength: no Kα2


def test_third_column_is_uncertainty(tmp_path):
    x, y = _columns()
    text = "# anode: Mo\n" + "\n".join(f"{a} {b} {0.5 * np.sqrt(b)}" for a, b in zip(x, y, strict=True))
    (tmp_path / "c.xye").write_text(text, encoding="utf-8")
    scan = load_scan(tmp_path / "c.xye")
    np.testing.assert_allclose(scan.sigma, 0.5 * np.sqrt(y))
    assert scan.radiation.anode == "Mo"


def test_radiation_argument_and_file_statement(tmp_path):
    x, y = _columns()
    plain = _write_xy(tmp_path / "p.xy", x, y)
    with pytest.raises(InputError, match="--anode Cu or --wavelength 1.5406"):
        load_scan(plain)
    assert load_scan(plain, radiation=CU).radiation.anode == "Cu"
    stated = _write_xy(tmp_path / "s.xy", x, y, header="# anode: Co")
    scan = load_scan(stated, radiation=CU)
    assert scan.radiation.anode == "Co"
    assert any("was not used" in w for w in scan.warnings)


def test_unsorted_is_sorted_with_warning(tmp_path):
    x, y = _columns()
    order = np.random.default_rng(3).permutation(x.size)
    scan = load_scan(_write_xy(tmp_path / "u.xy", x[order], y[order], header="# anode: Cu"))
    np.testing.assert_allclose(scan.two_theta, x, atol=5e-5)
    np.testing.assert_array_equal(scan.counts, y)
    assert any("sorted" in w for w in scan.warnings)


def test_uneven_steps_are_kept(tmp_path):
    x = np.cumsum(np.r_[10.0, np.full(15, 0.02), np.full(15, 0.05)])
    y = np.full(x.size, 50.0)
    scan = load_scan(_write_xy(tmp_path / "v.xy", x, y, header="# anode: Cu"))
    assert len(scan) == x.size
    assert any("uneven" in w for w in scan.warnings)


def test_csv_header_columns_in_any_order(tmp_path):
    x, y = _columns()
    text = "# anode: Cu\nesd,Intensity (counts),2Theta (deg)\n" + "\n".join(
        f"{np.sqrt(b)},{b},{a}" for a, b in zip(x, y, strict=True))
    (tmp_path / "d.csv").write_text(text, encoding="utf-8")
    scan = load_scan(tmp_path / "d.csv")
    np.testing.assert_allclose(scan.two_theta, x)
    np.testing.assert_array_equal(scan.counts, y)


def test_stdin(monkeypatch):
    x, y = _columns()
    text = "# anode: Fe\n" + "\n".join(f"{a} {b}" for a, b in zip(x, y, strict=True))
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(text.encode())))
    scan = load_scan("-")
    assert scan.source == "<stdin>" and scan.radiation.anode == "Fe" and len(scan) == x.size


def test_unknown_format_and_missing_file(tmp_path):
    with pytest.raises(InputError, match="unknown scan format"):
        load_scan(tmp_path / "x.xy", fmt="raw")
    with pytest.raises(InputError, match="no such file"):
        load_scan(tmp_path / "missing.xy")


# --- powder CIF (invented data, written here) ---------------------------------------------

PDCIF_SCAN = """\
# Invented powder CIF for refdb's tests (not a measurement).
data_test_scan
_pd_block_id   'invented|scan|1'
_diffrn_radiation_type 'Cu K\\a'
_diffrn_radiation_wavelength 1.5418
loop_
_pd_meas_2theta_scan
_pd_meas_counts_total
{rows}
"""


def test_pdcif_scan_loop_with_su(tmp_path):
    x, y = _columns(25)
    rows = "\n".join(f"{a:.3f} {b:.0f}({int(round(np.sqrt(b)))})" for a, b in zip(x, y, strict=True))
    (tmp_path / "s.cif").write_text(PDCIF_SCAN.format(rows=rows), encoding="utf-8")
    scan = load_scan(tmp_path / "s.cif")
    np.testing.assert_allclose(scan.two_theta, x, atol=5e-4)
    np.testing.assert_array_equal(scan.counts, y)
    np.testing.assert_array_equal(scan.sigma, np.round(np.sqrt(y)))
    # 'Cu K\a' with the Kα mean wavelength means the Cu doublet.
    assert scan.radiation.anode == "Cu" and len(scan.radiation.wavelengths) == 2


def test_pdcif_range_and_two_wavelengths(tmp_path):
    counts = "\n".join(str(200 + i) for i in range(26))
    text = f"""# Invented powder CIF for refdb's tests.
data_r
_pd_meas_2theta_range_min 20.00
_pd_meas_2theta_range_max 20.50
_pd_meas_2theta_range_inc 0.02
loop_
_diffrn_radiation_wavelength_id
_diffrn_radiation_wavelength
_diffrn_radiation_wavelength_wt
1 1.5406 1.0
2 1.5444 0.5
loop_
_pd_meas_intensity_total
{counts}
"""
    (tmp_path / "r.pcif").write_text(text, encoding="utf-8")
    scan = load_scan(tmp_path / "r.pcif")
    np.testing.assert_allclose(scan.two_theta, 20.0 + 0.02 * np.arange(26), atol=1e-12)
    np.testing.assert_allclose(scan.radiation.wavelengths, [1.5406, 1.5444])
    np.testing.assert_allclose(scan.radiation.weights, [1.0, 0.5])


def test_pdcif_target_kalpha1_is_single_line(tmp_path):
    x, y = _columns(25)
    rows = "\n".join(f"{a:.3f} {b:.0f}" for a, b in zip(x, y, strict=True))
    text = PDCIF_SCAN.format(rows=rows).replace("'Cu K\\a'", "'Cu K\\a~1~'").replace("1.5418", "1.540593")
    (tmp_path / "k.cif").write_text(text, encoding="utf-8")
    rad = load_scan(tmp_path / "k.cif").radiation
    assert len(rad.wavelengths) == 1 and rad.wavelength == pytest.approx(1.540593)


def test_cif_numbers_su_convention():
    # IUCr convention: the digits in parentheses count in the last decimal place.
    values, su = cif_numbers(["12.3(11)", "150(12)", "0.5", "1.25e2(3)"], "x", "t")
    np.testing.assert_allclose(values, [12.3, 150.0, 0.5, 125.0])
    np.testing.assert_allclose(su, [1.1, 12.0, np.nan, 3.0])


# --- load_measurement ----------------------------------------------------------------------

def test_load_measurement_switches_on_peak_table(tmp_path):
    x, y = _columns()
    scan_file = _write_xy(tmp_path / "m.xy", x, y, header="# anode: Cu")
    assert isinstance(load_measurement(scan_file), Scan)
    table = tmp_path / "t.txt"
    table.write_text("# anode: Cu\nd intensity\n3.1357 100\n1.9202 55\n", encoding="utf-8")
    assert isinstance(load_measurement(table, peak_table=True), PeakList)


# --- property tests: write random valid files, read them back ------------------------------

@st.composite
def scans(draw):
    n = draw(st.integers(min_value=20, max_value=120))
    # From above π°: a scan lying wholly below π is refused as one in radians.
    start = draw(st.floats(min_value=3.2, max_value=100.0))
    steps = draw(st.lists(st.floats(min_value=0.001, max_value=0.5), min_size=n - 1, max_size=n - 1))
    x = np.round(start + np.r_[0.0, np.cumsum(steps)], 6)
    x = x[x < 179.0]
    if x.size < 20 or np.any(np.diff(x) <= 0):
        x = np.round(start + 0.01 * np.arange(n), 6)
    counts = np.array(draw(st.lists(st.integers(min_value=101, max_value=10**7), min_size=x.size,
                                    max_size=x.size)), dtype=float)
    return x, counts


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=scans(), sep=st.sampled_from([" ", "\t", ",", ";"]), anode=st.sampled_from(list(ANODES)),
       fmt=st.sampled_from(["xy", "csv"]))
def test_random_files_read_back_equal(tmp_path, data, sep, anode, fmt):
    x, counts = data
    header = f"# anode: {anode}\n" + (f"2theta{sep}counts\n" if fmt == "csv" else "")
    body = "\n".join(f"{float(a)!r}{sep}{int(b)}" for a, b in zip(x, counts, strict=True))
    path = tmp_path / f"r.{fmt}"
    path.write_text(header + body + "\n", encoding="utf-8")
    scan = load_scan(path)
    np.testing.assert_array_equal(scan.two_theta, x)  # repr() round-trips floats exactly
    np.testing.assert_array_equal(scan.counts, counts)
    assert scan.radiation.anode == anode


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=scans())
def test_random_pdcif_reads_back_equal(tmp_path, data):
    x, counts = data
    rows = "\n".join(f"{float(a)!r} {int(b)}" for a, b in zip(x, counts, strict=True))
    path = tmp_path / "r.cif"
    path.write_text(PDCIF_SCAN.format(rows=rows), encoding="utf-8")
    scan = load_scan(path)
    np.testing.assert_array_equal(scan.two_theta, x)
    np.testing.assert_array_equal(scan.counts, counts)
