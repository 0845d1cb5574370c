"""The compiled CSV formatting of text codes and cents gives Arrow's bytes.

Reference: pyarrow's own CSV writer (``pyarrow.csv.write_csv``, ``quoting_style="needed"``) on
the same table, the labels taken and the cents as ``cents / 100`` floats: the bytes the
writing of ``movement_loans.csv`` gave before the compiled formatting.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv
import pytest

from allowance.report import files
from allowance.report.csv_lines import FITS_CENTS, csv_lines


def _arrow(text, cents) -> bytes:
    columns = {f"t{j}": labels.take(pa.array(codes, mask=codes < 0)) for j, (labels, codes) in enumerate(text)}
    columns |= {f"m{j}": c / 100.0 for j, c in enumerate(cents)}
    sink = pa.BufferOutputStream()
    pa_csv.write_csv(pa.table(columns), sink, write_options=pa_csv.WriteOptions(quoting_style="needed",
                                                                                 include_header=False))
    return sink.getvalue().to_pybytes()


def _cents(rng, n):
    """Amounts over every magnitude up to the largest formatted, and the cents' edge cases."""
    digits = rng.integers(0, 13, n)
    values = (rng.random(n) * 10.0 ** digits).astype(np.int64) * rng.choice([-1, 1], n)
    edges = np.array([0, 1, -1, 5, 10, 50, 99, 100, 101, 110, 12345, -12340, 10**10 - 1, 10**10,
                      FITS_CENTS - 1, -(FITS_CENTS - 1), 999_999_999_990, 2**31 - 1, -(2**31)])
    return np.concatenate([edges, values])


def test_cents_and_text_are_written_as_arrow_writes_them():
    rng = np.random.default_rng(7)
    cents = [_cents(rng, 5000) for _ in range(3)]
    n = len(cents[0])
    labels = pa.array(["plain", "", 'say "hi"', "a,b", "two\nlines", "é ü 日本", None, "'=x"], pa.large_string())
    ids = pa.array([f"L-{i:06d}" for i in range(n)], pa.large_string())
    text = [(labels, rng.integers(-1, len(labels), n)), (ids, np.arange(n)),
            (pa.array(["ifrs9"], pa.string()), np.zeros(n, dtype=np.int64))]
    made = csv_lines(text, [c.astype(np.int32) if j == 1 else c for j, c in enumerate(cents)][:1] + cents[1:])
    assert bytes(made) == _arrow(text, cents)
    # money alone, and text alone
    assert bytes(csv_lines([], cents)) == _arrow([], cents)
    assert bytes(csv_lines(text, [])) == _arrow(text, [])


def test_a_sliced_label_array_is_read_from_its_own_offset():
    labels = pa.array(["skip", "me", "a", 'b"', "c"], pa.large_string()).slice(2)
    codes = np.array([2, 0, 1, -1])
    cents = [np.array([1, -2, 300, 0])]
    assert bytes(csv_lines([(labels, codes)], cents)) == _arrow([(labels, codes)], cents)


@pytest.mark.parametrize("amount", [FITS_CENTS, -FITS_CENTS, 10**15])
def test_an_amount_beyond_the_formatted_range_is_left_to_the_caller(amount):
    # Arrow writes 1e10 and above in exponent form (1e+10): not formatted here
    assert csv_lines([], [np.array([0, amount])]) is None


def _movements(n: int, huge_at: int | None = None):
    from allowance.reconcile import compare_runs

    ids = [f"=L{i}" if i % 7 == 0 else f'L"{i}' if i % 11 == 0 else f"L{i}" for i in range(n)]
    prior = pd.DataFrame({"loan_id": ids, "segment": ["auto", "cards"] * (n // 2), "stage": [1, 2] * (n // 2),
                          "balance": np.arange(n) * 10.25, "ecl_ifrs9": np.arange(n) * 0.37,
                          "ecl_cecl": np.arange(n) * 0.41})
    current = prior.iloc[2:].assign(ecl_ifrs9=lambda f: f["ecl_ifrs9"] * 1.5, stage=1)
    current = pd.concat([current, prior.iloc[:1].assign(loan_id="new-1", segment="+mortgage")], ignore_index=True)
    if huge_at is not None:
        current.loc[huge_at, "balance"] = 2e10  # in cents beyond what csv_lines formats
    return list(compare_runs(prior, current).values())


@pytest.mark.parametrize("huge_at", [None, 5])
def test_movement_loans_compiled_gives_the_bytes_of_arrow(tmp_path, monkeypatch, huge_at):
    # a slice with an amount beyond the compiled range goes through Arrow; the file is the same
    moves = _movements(40, huge_at)
    monkeypatch.setattr(files, "_CSV_SLICE_ROWS", 6)
    files._movement_loans_csv(moves, tmp_path / "arrow.csv")
    monkeypatch.setattr(files, "_COMPILED_FROM_ROWS", 0)
    files._movement_loans_csv(moves, tmp_path / "compiled.csv")
    arrow = (tmp_path / "arrow.csv").read_bytes()
    assert (tmp_path / "compiled.csv").read_bytes() == arrow
    assert b"\"'=L0\"" in arrow and b"\"'+mortgage\"" in arrow and b'"L""11"' in arrow
    assert (b"2e+10" in arrow) == (huge_at is not None)
