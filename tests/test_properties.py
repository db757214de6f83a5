"""Property-based tests: generated inputs of every format and what every run must keep.

The inputs come from ``tests/strategies.py`` (also used by
``scripts/fuzz_campaign.py``): CSV/TSV/semicolon text with known and unknown
column names, three encodings, quoting, blank lines, ragged and unclosed
rows, missing and unreadable values, duplicated and shuffled rows, extreme
coordinates, time jumps and repeated time stamps; GPX with tracks, segments
and waypoints; CF NetCDF in the four layouts; Parquet with typed columns.
Each record's fate is known independently of driftloop, and
``strategies.check_case`` checks the run against it:

* no traceback, exit status 0 or 1, no warning reaching the user;
* exit 1: one line ``driftloop: error: ...`` naming an input file, and no
  output written;
* exit 0: every output parses, ``fixes.csv`` has one row per generated
  record (counted with the csv module and pandas), the accounting and the
  per-file row counts agree, every ``(source_file, source_row)`` is the
  record's own, and each record came out as generated (readable values
  unchanged, missing ones flag 9, unreadable ones flag 4 with the raw text);
* inputs are byte-for-byte unchanged.
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import pandas as pd
import pytest
import strategies
from _hypothesis_profiles import profile
from hypothesis import given
from hypothesis import strategies as st

import driftloop.io.delimited as delimited
from driftloop.config import ReadConfig
from driftloop.errors import DriftloopError


def _check(case: strategies.Case, *, in_process: bool = True) -> None:
    with tempfile.TemporaryDirectory(prefix="driftloop-prop-") as folder:
        problems = strategies.check_case(case, Path(folder), in_process=in_process)
    assert not problems, case.describe() + "\n" + "\n".join(problems)


@profile(30)
@given(strategies.cases())
def test_mixed_runs_keep_every_invariant(case):
    _check(case)


@profile(30)
@given(strategies.cases(kinds=("csv",)))
def test_delimited_runs_keep_every_invariant(case):
    _check(case)


@profile(15)
@given(strategies.cases(kinds=("gpx",), max_files=2))
def test_gpx_runs_keep_every_invariant(case):
    _check(case)


@profile(15)
@given(strategies.cases(kinds=("netcdf",), max_files=2))
def test_netcdf_runs_keep_every_invariant(case):
    _check(case)


@profile(12)
@given(strategies.cases(kinds=("parquet",), max_files=2))
def test_parquet_runs_keep_every_invariant(case):
    _check(case)


@profile(4)
@given(strategies.cases(land_test_every=1, max_files=2, max_records=20))
def test_runs_with_the_land_test_keep_every_invariant(case):
    assert "--no-land-test" not in case.options
    _check(case)


@profile(3)
@given(strategies.cases(max_files=2, max_records=15))
def test_real_command_exit_status_and_stderr(case):
    """``python -m driftloop`` as a user runs it: status 0/1, never a traceback."""
    _check(case, in_process=False)


def test_analyse_keeps_every_invariant(tmp_path):
    """Every stage on a few drifters: all outputs parse, every record is accounted for."""
    files = [strategies.long_csv("slow.csv", days=3, step_s=1800),
             strategies.long_csv("fast.csv", days=2, step_s=600)]
    problems = strategies.check_case(strategies.Case(files, ["--no-land-test"], "analyse"),
                                     tmp_path)
    assert not problems, problems
    assert (tmp_path / "out" / "report.html").is_file()


def test_analyse_with_ids_the_font_cannot_draw_prints_no_warning(tmp_path):
    text = "id,time,lat,lon\n" + "".join(
        f"\u6f02\u6d41-3,2026-03-01T{h:02d}:00:00Z,45.0,{-30 + 0.001 * h:.4f}\n"
        for h in range(24))
    path = tmp_path / "cjk.csv"
    path.write_text(text, encoding="utf-8")
    code, _, err, caught = strategies.run_cli(
        ["analyse", str(path), "--out", str(tmp_path / "out"), "--no-land-test", "--quiet"])
    assert code == 0, err
    assert not caught, caught


class _Blocks:
    """Set the delimited reader's block size for a ``with`` block."""

    def __init__(self, size: int) -> None:
        self.size = size

    def __enter__(self) -> None:
        self.saved = delimited.BLOCK_BYTES
        delimited.BLOCK_BYTES = self.size

    def __exit__(self, *exc) -> None:
        delimited.BLOCK_BYTES = self.saved


def _read_or_error(path: Path, size: int):
    with _Blocks(size):
        try:
            return delimited.read_delimited(path, ReadConfig())
        except DriftloopError as exc:
            return str(exc)


@profile(50)
@given(strategies.csv_files(), st.sampled_from([1, 7, 64, 300, 4096]))
def test_reading_in_blocks_gives_the_same_table(file, size):
    """A file read a few bytes at a time is read exactly as in one go."""
    with tempfile.TemporaryDirectory() as folder:
        path = file.write(Path(folder))
        whole = _read_or_error(path, 1 << 24)
        blocks = _read_or_error(path, size)
    if isinstance(whole, str) or isinstance(blocks, str):
        assert whole == blocks
    else:
        pd.testing.assert_frame_equal(whole, blocks)
        assert whole.attrs == blocks.attrs
        assert len(whole) == file.records
        assert sorted(whole["source_row"]) == sorted(file.rows)


def test_months_at_one_minute_are_read_and_accounted_for():
    """One long record: 120 days of 1-minute fixes (172,800 rows).

    Longer records (years) are run by ``scripts/fuzz_campaign.py --long-days``.
    """
    case = strategies.Case([strategies.long_csv("year.csv", days=120)], ["--no-land-test"])
    assert case.records == 172_800
    with tempfile.TemporaryDirectory(prefix="driftloop-long-") as folder:
        problems = strategies.check_case(case, Path(folder))
        summary = json.loads((Path(folder) / "out" / "summary.json").read_text())
    assert not problems, problems
    drifter = summary["drifters"]["year"]
    assert drifter["by_flag"]["pass"] == 172_800
    assert drifter["sampling_interval"]["median_s"] == 60.0
    assert drifter["duration_days"] == pytest.approx(120 - 1 / 1440)


# ------------------------------------------------------------------ found by the generators


def _run_text(tmp_path: Path, name: str, text: str, *options: str):
    path = tmp_path / name
    path.write_bytes(text.encode("utf-8"))
    code, out, err, caught = strategies.run_cli(
        ["qc", str(path), "--out", str(tmp_path / "out"), "--no-land-test", *options])
    assert not caught
    return path, code, err


def test_quote_in_an_unquoted_field_after_a_multiline_field(tmp_path):
    """A quoted line break, then an unquoted field holding a quote: one record.

    The record grouping once tracked quote parity over whole lines, so the
    inch mark of 45°30'10"N on the continuation line kept the quoted field
    open and the record was cut in two (one row too many).
    """
    text = ('id,note,pos,time,lat,lon\n'
            'A,"two\nlines",45\u00b030\'10"N,2026-03-01T00:00:00Z,45.0,-30.0\n'
            'A,ok,x,2026-03-01T01:00:00Z,45.0,-30.001\n')
    path, code, err = _run_text(tmp_path, "q.csv", text)
    assert code == 0, err
    fixes = strategies.read_fixes_csv(tmp_path / "out" / "fixes.csv")
    # a record over two lines counts once, as a spreadsheet row
    assert fixes["source_row"].tolist() == ["2", "3"]
    assert fixes["qc_flag"].tolist() == ["1", "1"]


def test_a_file_whose_only_record_never_closes_its_quote(tmp_path):
    path, code, err = _run_text(tmp_path, "open.csv", 'time,lat,lon\n"2026-03-01,45,-30\n')
    assert code == 1
    assert err.count("\n") == 1
    assert f"{path}, row 2: no data row can be read" in err
    assert "never ends" in err
    assert "Empty CSV file" not in err


def test_an_unclosed_quote_under_strict_names_no_bogus_column(tmp_path):
    text = "time,lat,lon\n2026-03-01T00:00:00Z,45,-30\n2026-03-01T01:00:00Z,45,\"-30\n"
    path, code, err = _run_text(tmp_path, "open.csv", text, "--strict")
    assert code == 1
    assert err.strip() == (f"driftloop: error: {path}, row 3: quotes are not balanced "
                           "(a quoted field never ends)")


def test_a_byte_order_mark_at_a_block_boundary(tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbftime,lat,lon\n2026-03-01T00:00:00Z,45,-30\n")
    for size in (1, 3, 4, 1 << 24):
        table = _read_or_error(path, size)
        assert not isinstance(table, str), (size, table)
        assert table.attrs["encoding"] == "utf-8-sig"
        assert table["source_row"].tolist() == [2]


def test_cr_lf_split_between_blocks_is_one_line_end(tmp_path):
    path = tmp_path / "crlf.csv"
    lines = ["time,lat,lon"] + [f"2026-03-01T{h:02d}:00:00Z,45.0,-30.{h:03d}" for h in range(20)]
    path.write_bytes(("\r\n".join(lines) + "\r\n").encode())
    for size in range(1, 40, 3):
        table = _read_or_error(path, size)
        assert table["source_row"].tolist() == list(range(2, 22)), size


def test_single_fix_two_fix_and_one_instant_drifters(tmp_path):
    text = ("id,time,lat,lon\n"
            "ONE,2026-03-01T00:00:00Z,10.0,20.0\n"
            "TWO,2026-03-01T00:00:00Z,11.0,21.0\n"
            "TWO,2026-03-01T01:00:00Z,11.0,21.001\n"
            "SAME,2026-03-01T00:00:00Z,12.0,22.0\n"
            "SAME,2026-03-01T00:00:00Z,12.0,22.0\n"
            "SAME,2026-03-01T00:00:00Z,12.5,22.5\n")
    path, code, err = _run_text(tmp_path, "few.csv", text)
    assert code == 0, err
    fixes = strategies.read_fixes_csv(tmp_path / "out" / "fixes.csv")
    assert fixes["qc_reasons"].tolist() == ["", "", "", "time_conflict", "duplicate",
                                            "time_conflict"]
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["drifters"]["ONE"]["duration_days"] == 0.0
    assert summary["drifters"]["TWO"]["sampling_interval"]["median_s"] == 3600.0
    assert summary["drifters"]["SAME"]["by_flag"]["fail"] == 3
    assert summary["accounting"]["balanced"] is True


def test_rows_without_a_drifter_id_take_no_longitude_convention(tmp_path):
    """Two id-less rows of different drifters once looked like one drifter mixing conventions."""
    text = ("id,time,lat,lon\n"
            "E,2026-03-01T00:00:00Z,10.0,350.0\n"
            ",2026-03-01T01:00:00Z,10.0,350.0\n"
            "W,2026-03-01T00:00:00Z,11.0,-10.0\n"
            ",2026-03-01T01:00:00Z,11.0,-10.0\n")
    path, code, err = _run_text(tmp_path, "ids.csv", text)
    assert code == 0, err
    fixes = strategies.read_fixes_csv(tmp_path / "out" / "fixes.csv")
    assert fixes["qc_flag"].tolist() == ["1", "4", "1", "4"]
    assert fixes["lon"].tolist()[::2] == ["-10.0", "-10.0"]


def test_parquet_rows_without_a_drifter_id_take_no_longitude_convention(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = tmp_path / "ids.parquet"
    pq.write_table(pa.table({"buoy": ["E", None, "W", None],
                             "time": [1772366400, 1772370000, 1772366400, 1772370000],
                             "lat": [10.0, 10.0, 11.0, 11.0],
                             "lon": [350.0, 350.0, -10.0, -10.0]}), path)
    code, _, err, _ = strategies.run_cli(["qc", str(path), "--out", str(tmp_path / "out"),
                                          "--no-land-test"])
    assert code == 0, err


def test_parquet_column_with_no_value_at_all_is_missing_not_refused(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = tmp_path / "nolat.parquet"
    pq.write_table(pa.table({"time": [1772366400], "lat": pa.nulls(1), "lon": [1.0]}), path)
    code, _, err, _ = strategies.run_cli(["qc", str(path), "--out", str(tmp_path / "out"),
                                          "--no-land-test"])
    assert code == 0, err
    fixes = strategies.read_fixes_csv(tmp_path / "out" / "fixes.csv")
    assert fixes["qc_flag"].tolist() == ["9"] and fixes["qc_reasons"].tolist() == ["missing_value"]


def test_indexed_ragged_netcdf_without_trajectory_variables(tmp_path):
    """xarray drops a dimension no variable uses; the trajectory dimension is still read."""
    import netCDF4

    path = tmp_path / "ix.nc"
    with netCDF4.Dataset(path, "w") as nc:
        nc.featureType = "trajectory"
        nc.createDimension("trajectory", 2)
        nc.createDimension("obs", 3)
        t = nc.createVariable("time", "f8", ("obs",))
        t.units = "seconds since 1970-01-01 00:00:00"
        t[:] = [1772366400, 1772366400, 1772370000]
        for name, units in (("lat", "degrees_north"), ("lon", "degrees_east")):
            v = nc.createVariable(name, "f8", ("obs",))
            v.units = units
            v[:] = [10.0, 20.0, 10.001]
        index = nc.createVariable("trajectoryIndex", "i4", ("obs",))
        index.instance_dimension = "trajectory"
        index[:] = [0, 1, 0]
    code, _, err, _ = strategies.run_cli(["qc", str(path), "--out", str(tmp_path / "out"),
                                          "--no-land-test"])
    assert code == 0, err
    fixes = strategies.read_fixes_csv(tmp_path / "out" / "fixes.csv")
    assert fixes["drifter_id"].tolist() == ["ix-1", "ix-2", "ix-1"]
