"""columns_csv_text against the csv module (Python's standard library) as the reference: the
fast path for float channels must write exactly the text csv.writer writes."""

from __future__ import annotations

import csv
import io

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from lapbalance.outputs import columns_csv_text


def _reference(columns, float_fmt="{:.6g}", nan="nan"):
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    names = list(columns)
    w.writerow(names)
    n = len(columns[names[0]]) if names else 0
    for i in range(n):
        row = []
        for name in names:
            v = columns[name][i]
            if isinstance(v, float | np.floating):
                f = float(v)
                row.append(float_fmt.format(f) if f == f else nan)
            else:
                row.append(str(v))
        w.writerow(row)
    return buf.getvalue()


_floats = st.floats(allow_nan=True, allow_infinity=True, width=64)
_text = st.text(alphabet=st.sampled_from(list('ab ,"\n\r-1')), max_size=5)


@settings(max_examples=200, deadline=None)
@given(st.integers(0, 6), st.integers(1, 4), st.data())
def test_same_text_as_csv_writer(n, ncols, data):
    columns = {}
    for c in range(ncols):
        kind = data.draw(st.sampled_from(["floats", "ints", "text"]))
        name = data.draw(st.sampled_from([f"c{c}", f"c,{c}", f'c"{c}']))
        name = name if name not in columns else f"{name}_{c}"
        if kind == "floats":
            columns[name] = np.array(data.draw(st.lists(_floats, min_size=n, max_size=n)))
        elif kind == "ints":
            columns[name] = np.arange(n)
        else:
            columns[name] = data.draw(st.lists(_text, min_size=n, max_size=n))
    fmt = data.draw(st.sampled_from(["{:.6g}", "{:.3f}", "{:,.1f}"]))
    nan = data.draw(st.sampled_from(["nan", "", "n,a"]))
    assert columns_csv_text(columns, fmt, nan) == _reference(columns, fmt, nan)


def test_a_single_empty_cell_is_quoted_as_csv_does():
    assert columns_csv_text({"x": np.array([np.nan])}, nan="") == _reference(
        {"x": np.array([np.nan])}, nan="")
