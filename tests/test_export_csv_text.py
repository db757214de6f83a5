"""CSV text of the output tables, formatted column-wise in Arrow.

References: :meth:`pandas.DataFrame.to_csv` (``index=False``, which quotes
through Python's :mod:`csv` module, QUOTE_MINIMAL as in RFC 4180 §2, and
CRLF line ends turned into LF afterwards, so that fields holding a CR are
quoted as RFC 4180 quotes line breaks) on the table with its times already
written as ISO 8601 ``Z`` strings; float texts against Python's own
``repr`` (the shortest decimal that reads back as the same double).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from driftloop.io import writers
from driftloop.io.writers import csv_text, float_reprs, format_time, write_csv


def _random_floats(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    bits = rng.integers(0, 2**63, n, dtype=np.int64) * rng.choice([-1, 1], n)
    return np.concatenate([
        bits.view(np.float64),  # every magnitude, subnormals, NaN and infinities
        rng.normal(0.0, 1.0, n),
        10.0 ** rng.uniform(-8.0, 20.0, n) * rng.choice([-1.0, 1.0], n),
        *[np.round(rng.uniform(-1e6, 1e6, n // 8), d) for d in range(8)],
        rng.integers(-10**17, 10**17, n).astype(float),
        np.array([0.0, -0.0, 1e-4, -1e-4, 9.999999999999999e-05, 1e16, -1e16,
                  9999999999999998.0, 1e15, 0.1, 1 / 3, 5e-324, 2.0**53, 2.0**63, 1e300,
                  np.inf, -np.inf, np.nan, 123456789012345.6, 0.000123, 1.5e-07]),
    ])


@pytest.mark.parametrize("seed", [0, 1])
def test_float_texts_are_pythons_repr(seed):
    values = _random_floats(30_000, seed)
    assert float_reprs(values).to_pylist() == [repr(x) for x in values.tolist()]


def _reference_csv(table: pd.DataFrame, float_digits=None) -> str:
    out = table.copy()
    for name in out.columns:
        if pd.api.types.is_datetime64_any_dtype(out[name].dtype):
            out[name] = format_time(out[name])
    for name, digits in (float_digits or {}).items():
        out[name] = out[name].round(digits)
    # with CRLF line ends the csv module quotes fields holding a CR as well as an
    # LF (RFC 4180 §2, rule 6); no text of these tables holds CRLF, so every CRLF
    # is a line end
    assert not any("\r\n" in str(v) for v in out.to_numpy().ravel().tolist())
    return out.to_csv(None, index=False, lineterminator="\r\n").replace("\r\n", "\n")


def _mixed_table(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    words = ["", "plain", "a,b", 'say "hi"', "two\nlines", "cr\rhere", " lead", "é ü ∞",
             "tab\there", ",", '"', "x;y"]
    text = [words[k] for k in rng.integers(0, len(words), n)]
    missing = rng.random(n) < 0.15
    times = pd.Timestamp("1969-12-31T23:00:00Z") + pd.to_timedelta(
        rng.integers(0, 10**12, n) * rng.choice([1, 1000, 10**9], n), unit="ns")
    return pd.DataFrame({
        "id": pd.array([None if m else t for t, m in zip(text, missing, strict=True)],
                       dtype="string"),
        "name, quoted": pd.array(text, dtype="string[python]"),
        "f": _random_floats(n, seed)[:n],
        "g": np.where(missing, np.nan, rng.normal(0, 100, n)),
        "i8": rng.integers(-128, 127, n).astype(np.int8),
        "i64": rng.integers(-2**62, 2**62, n),
        "u32": rng.integers(0, 2**32, n).astype(np.uint32),
        "ok": rng.random(n) < 0.5,
        "obj": np.array([None if m else t for t, m in zip(text, missing, strict=True)],
                        dtype=object),
        "time": pd.Series(times).where(~missing),
        "naive": pd.Series(times.tz_localize(None)),
    })


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_csv_text_is_what_pandas_to_csv_writes(seed):
    table = _mixed_table(3_000, seed)
    assert csv_text(table) == _reference_csv(table)


def test_csv_text_rounds_float_columns_like_pandas():
    table = _mixed_table(500, 3)
    digits = {"g": 3, "f": 0}
    assert csv_text(table, digits) == _reference_csv(table, digits)


def test_csv_text_of_an_empty_table_is_its_header():
    table = _mixed_table(10, 4).iloc[:0]
    assert csv_text(table) == _reference_csv(table)


def test_csv_text_of_other_tables_is_what_pandas_writes():
    tables = [
        pd.DataFrame({"only": pd.array(["", "x", None], dtype="string")}),
        pd.DataFrame({"a": pd.Categorical(["x", "y"]), "b": [1.5, 2.0]}),
        pd.DataFrame({"a": pd.array([1, None], dtype="Int64"), "b": [1.5, 2.0]}),
        pd.DataFrame({"a": np.array([1.25, 2.5], dtype=np.float32), "b": [1, 2]}),
        pd.DataFrame({"a": [1, 2], "b": [3.5, "x,y"]}),
        pd.DataFrame({1: [1, 2], "b": [0.5, 2.0]}),
    ]
    for table in tables:
        assert csv_text(table) == _reference_csv(table)


def test_write_csv_writes_the_csv_text(tmp_path, monkeypatch):
    monkeypatch.setattr(writers, "CSV_CHUNK_ROWS", 700)
    table = _mixed_table(2_000, 5)
    path = tmp_path / "t.csv"
    write_csv(path, table)
    assert path.read_bytes() == _reference_csv(table).encode("utf-8")


def test_format_time_writes_iso_8601_with_z():
    times = pd.Series(pd.to_datetime(["2026-03-01T12:00:00Z", None, "1969-07-20T20:17:40.5Z",
                                      "2026-03-01T12:00:00.000001999Z"], format="ISO8601"))
    assert format_time(times).tolist() == [
        "2026-03-01T12:00:00Z", "", "1969-07-20T20:17:40.500000Z", "2026-03-01T12:00:00.000001Z"
    ]


def test_fields_with_a_carriage_return_are_quoted_and_read_back_whole():
    # RFC 4180 §2, rule 6: fields with line breaks are quoted; pandas' C reader
    # (like many others) ends a line at a bare CR outside quotes
    import io

    values = ["plain", "cr\rhere", "lf\nhere", 'both\r\n"q"', "end\r"]
    tables = [
        pd.DataFrame({"text": pd.array(values, dtype="string"), "k": range(5)}),
        pd.DataFrame({"text": pd.Categorical(values), "k": range(5)}),  # the pandas path
    ]
    for table in tables:
        text = csv_text(table)
        assert '"cr\rhere"' in text and '"end\r"' in text
        back = pd.read_csv(io.StringIO(text), dtype={"text": str}, keep_default_na=False)
        assert back["text"].tolist() == values
        assert back["k"].tolist() == list(range(5))
