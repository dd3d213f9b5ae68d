"""refdb.scan._text: the one-call reader of plain columns agrees with the line-by-line one."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from refdb.scan._text import _plain_columns, _rows_by_line

_number = st.one_of(
    st.floats(allow_nan=False, allow_infinity=False, width=64).map(repr),
    st.integers(-10**6, 10**6).map(str),
    st.floats(0, 1e5).map(lambda v: f"{v:.3e}"),
)
_junk = st.sampled_from(["abc", "1.2.3", "--", "1e", "nan", "inf", "0x10"])


@st.composite
def _table(draw):
    width = draw(st.integers(1, 4))
    lines = []
    if draw(st.booleans()):
        lines.append(" ".join(draw(st.lists(st.sampled_from(["2theta", "counts", "esd", "x"]), min_size=width,
                                            max_size=width))))
    for _ in range(draw(st.integers(0, 12))):
        kind = draw(st.sampled_from(["row", "row", "row", "comment", "blank", "ragged", "junk"]))
        if kind == "row":
            lines.append(draw(st.sampled_from([" ", "  ", "\t"])).join(draw(st.lists(_number, min_size=width,
                                                                                    max_size=width))))
        elif kind == "comment":
            lines.append(draw(st.sampled_from(["# note", "! anode: Cu", "  # indented"])))
        elif kind == "blank":
            lines.append(draw(st.sampled_from(["", "   "])))
        elif kind == "ragged":
            lines.append(" ".join(draw(st.lists(_number, min_size=1, max_size=width + 2))))
        else:
            lines.append(" ".join([draw(_junk)] * width))
    return "\n".join(lines)


@settings(max_examples=300, deadline=None)
@given(text=_table(), allow_header=st.booleans(), min_columns=st.integers(1, 3))
def test_plain_columns_reader_agrees_with_line_reader(text, allow_header, min_columns):
    """Property (invariant, no outside source): wherever the fast reader answers, its numbers,
    line numbers and header equal the line-by-line reader's; where it declines, the other
    reader decides (and explains any error)."""
    fast = _plain_columns(text, allow_header=allow_header, min_columns=min_columns)
    if fast is None:
        return
    slow = _rows_by_line(text, "t", allow_header=allow_header, min_columns=min_columns)
    np.testing.assert_array_equal(fast.values, slow.values)
    np.testing.assert_array_equal(fast.line_numbers, slow.line_numbers)
    assert fast.header == slow.header


def test_a_plain_scan_takes_the_fast_reader():
    text = "# invented scan\n2theta counts\n10.00 120\n10.02 118.5\n\n10.04 1.2e2\n"
    fast = _plain_columns(text, allow_header=True, min_columns=2)
    assert fast is not None
    np.testing.assert_array_equal(fast.values, [[10.0, 120.0], [10.02, 118.5], [10.04, 120.0]])
    np.testing.assert_array_equal(fast.line_numbers, [3, 4, 6])
    assert fast.header == ("2theta", "counts")
    # commas, semicolons and extra fields go to the line-by-line reader
    for other in ("10,120\n10.02,118\n", "10;120\n", "10 120 7\n10.02 118\n"):
        assert _plain_columns(other, allow_header=True, min_columns=2) is None
