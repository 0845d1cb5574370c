"""Formula neutralisation of text written to CSV and XLSX (OWASP, "CSV Injection")."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from allowance.text import FORMULA_PREFIXES, neutralise_frame, neutralise_text


@pytest.mark.parametrize("prefix", ["=", "+", "-", "@", "\t", "\r"])  # the OWASP list of trigger characters
def test_each_trigger_is_neutralised(prefix):
    assert neutralise_text(prefix + "SUM(A1)") == "'" + prefix + "SUM(A1)"


@pytest.mark.parametrize("value", ["L-001", "auto", "", " =x", "'=already", "1e5"])
def test_other_text_is_untouched(value):
    assert neutralise_text(value) == value


@given(st.text(max_size=12))
def test_idempotent_and_only_prefixes(value):
    once = neutralise_text(value)
    assert neutralise_text(once) == once
    assert once == value or (once == "'" + value and value.startswith(FORMULA_PREFIXES))


def test_series_keeps_numbers_and_missing_values():
    s = pd.Series(["=HYPERLINK(\"x\")", None, -3.5, "ok", np.nan], dtype=object)
    out = neutralise_text(s)
    assert out.tolist()[0] == "'=HYPERLINK(\"x\")"
    assert out.iloc[1] is None and out.iloc[2] == -3.5 and out.iloc[3] == "ok" and pd.isna(out.iloc[4])
    assert s.iloc[0] == "=HYPERLINK(\"x\")"  # a new object: the input is unchanged


def test_frame_text_columns_and_headers():
    frame = pd.DataFrame({"loan_id": pd.Series(["@x", "y"], dtype="str"), "balance": [-1.0, 2.0],
                          "-note": ["a", "+b"]})
    out = neutralise_frame(frame)
    assert out["loan_id"].tolist() == ["'@x", "y"]
    assert out["balance"].tolist() == [-1.0, 2.0]
    assert list(out.columns) == ["loan_id", "balance", "'-note"]
    assert out.iloc[:, 2].tolist() == ["a", "'+b"]


@given(st.lists(st.text(alphabet=st.sampled_from("aZ0 -=+@&<>\"'\t\r\n\x00\x1f\ufffe\uffffé€"), max_size=12),
                max_size=30, unique=True))
def test_bulk_sheet_text_is_what_each_cell_would_get(values):
    # the loan sheet mends only the values that need it (found by an RE2 pattern in Arrow);
    # the result must equal cleaning and escaping every value one by one
    from xml.sax.saxutils import escape

    from allowance.report.bulk import _xml_texts
    from allowance.report.cells import clean_text

    assert _xml_texts(pd.array(values, dtype="string[pyarrow]")).to_pylist() == [escape(clean_text(v)) for v in values]
