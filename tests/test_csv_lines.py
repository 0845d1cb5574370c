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


def _writer(table: pa.Table) -> bytes:
    """pyarrow's CSV writer (the reference): the rows of ``table``, no header."""
    sink = pa.BufferOutputStream()
    pa_csv.write_csv(table, sink, write_options=pa_csv.WriteOptions(quoting_style="needed", include_header=False))
    return sink.getvalue().to_pybytes()


def _mixed(n: int, seed: int) -> pd.DataFrame:
    """A loan frame's kinds of columns in a loan frame's order, blanks in each."""
    rng = np.random.default_rng(seed)
    cents = _cents(rng, n - 19)
    money = cents / 100.0
    blanked = money.copy()
    blanked[::7] = np.nan
    rates = rng.random(n) * 10.0 ** rng.integers(-9, 3, n)
    rates[::11] = np.nan
    labels = np.array(["plain", "", 'say "hi"', "a,b", "two\nlines", "é ü 日本", None, "'=x"], dtype=object)
    return pd.DataFrame({
        "loan_id": pd.array([f"L-{i}" for i in range(n)], dtype="str"),
        "segment": pd.array(labels[rng.integers(0, len(labels), n)], dtype="str"),
        "days": rng.integers(-5, 400, n), "stage": rng.integers(1, 4, n).astype(np.int8),
        "poci": rng.random(n) < 0.2, "balance": money, "pd": rates, "ecl": blanked,
        "zeros": np.where(rng.random(n) < 0.5, 0.0, money),  # whole cents, many zeros
        "beyond": np.where(np.arange(n) == 3, 1e12, money),  # one amount written in exponent form
        "negative_zero": np.where(np.arange(n) == 5, -0.0, money),  # Arrow writes '-0'
        "count": pd.array([i if i % 5 else None for i in range(n)], dtype="Int64"),
    })


@pytest.mark.parametrize("seed", [1, 2])
def test_a_table_is_written_as_arrow_writes_it(seed):
    """Text quoted, whole-cent columns from their cents, the rest as Arrow casts them, blanks
    empty: byte for byte the writer's rows, whole and sliced."""
    from allowance.report.csv_lines import table_lines

    table = pa.Table.from_pandas(_mixed(3000, seed), preserve_index=False).replace_schema_metadata(None)
    assert bytes(table_lines(table)) == _writer(table)
    part = table.slice(1234, 500)
    assert bytes(table_lines(part)) == _writer(part)
    assert bytes(table_lines(table.slice(0, 0))) == _writer(table.slice(0, 0))
    assert table_lines(pa.table({"when": pa.array([0, 1], pa.timestamp("s"))})) is None  # left to Arrow


def test_a_large_loan_file_gives_the_bytes_of_arrow(tmp_path, monkeypatch):
    """loans.csv from a table past the compiled threshold: the bytes of Arrow's writer (the
    threshold lowered so a small frame takes that path, slices of 1,000 rows)."""
    frame = _mixed(4000, 3)
    files._csv(frame, tmp_path / "arrow.csv")
    monkeypatch.setattr(files, "_COMPILED_FROM_ROWS", 100)
    monkeypatch.setattr(files, "_CSV_SLICE_ROWS", 1000)
    files._csv(frame, tmp_path / "compiled.csv")
    assert (tmp_path / "compiled.csv").read_bytes() == (tmp_path / "arrow.csv").read_bytes()
