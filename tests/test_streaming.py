"""Streaming runs: same bytes as the whole-table path, bounded memory, rows in = rows out.

The reference for the outputs is the whole-table path
(:func:`driftloop.pipeline.analyse` then :meth:`Analysis.write`), which reads
the release into one table; the streaming run must write the same bytes
(the project's guarantee, docs/guarantees.md and docs/scaling.md).
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from driftloop import streaming
from driftloop.config import Config
from driftloop.drift import grid_step_from_counts
from driftloop.export.geojson import BboxAccumulator, geojson_bbox
from driftloop.pipeline import analyse

SAMPLE = Path(__file__).resolve().parent.parent / "sample_tracks" / "orravane_a.csv"
CLOCK = ("written_utc", "run_seconds", "stage_seconds")


def _compare(whole: Path, stream: Path) -> None:
    names = sorted(p.name for p in whole.iterdir())
    assert names == sorted(p.name for p in stream.iterdir())
    for name in names:
        a, b = (whole / name).read_bytes(), (stream / name).read_bytes()
        if name == "provenance.json":
            a, b = json.loads(a), json.loads(b)
            for key in CLOCK:
                a.pop(key, None)
                b.pop(key, None)
        assert a == b, name


def _synthetic_csv(folder: Path, n: int, days: float, *, interleaved: bool) -> int:
    from driftloop.synth import simulate_many

    folder.mkdir(parents=True, exist_ok=True)
    fixes = simulate_many(n, days, 11, truth=False).fixes.copy()
    fixes["time"] = fixes["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    if interleaved:  # two files, drifters mixed in time order
        fixes = fixes.sort_values("time", kind="stable")
        half = len(fixes) // 2
        fixes.iloc[:half].to_csv(folder / "a.csv", index=False)
        fixes.iloc[half:].to_csv(folder / "b.csv", index=False)
    else:
        for drifter, group in fixes.groupby("drifter_id"):
            group.to_csv(folder / f"{drifter}.csv", index=False)
    return len(fixes)


@pytest.mark.slow
def test_sample_streamed_in_small_chunks_gives_the_bytes_of_the_whole_table_path(
        tmp_path, monkeypatch):
    # several read chunks and several drifter batches, every output format
    monkeypatch.setattr(streaming, "CHUNK_ROWS", 2000)
    monkeypatch.setattr(streaming, "BATCH_DRIFTERS", 3)
    formats = ["geojson", "gpkg", "parquet"]
    analyse([SAMPLE]).write(tmp_path / "whole", formats=formats)
    run = streaming.run([SAMPLE], tmp_path / "stream", formats=formats)
    _compare(tmp_path / "whole", tmp_path / "stream")
    assert run.summary["accounting"]["balanced"]


@pytest.mark.slow
def test_drifters_spread_over_files_give_the_bytes_of_the_whole_table_path(tmp_path,
                                                                           monkeypatch):
    monkeypatch.setattr(streaming, "CHUNK_ROWS", 700)
    monkeypatch.setattr(streaming, "BATCH_DRIFTERS", 2)
    _synthetic_csv(tmp_path / "in", 5, 12, interleaved=True)
    paths = sorted((tmp_path / "in").iterdir())
    config = Config().replace("qc", land_test=False)
    analyse(paths, config).write(tmp_path / "whole")
    streaming.run(paths, tmp_path / "stream", config)
    _compare(tmp_path / "whole", tmp_path / "stream")
    # and the qc stage alone
    analyse(paths, config, stages="qc").write(tmp_path / "whole_qc")
    streaming.run(paths, tmp_path / "stream_qc", config, stages="qc")
    _compare(tmp_path / "whole_qc", tmp_path / "stream_qc")


@pytest.mark.slow
def test_drifters_grouped_in_the_input_are_formatted_in_runs_with_the_same_bytes(
        tmp_path, monkeypatch):
    # one file, each drifter's rows together but the drifters in reverse order,
    # so that drifter order and input order differ; drifters span read chunks
    from driftloop.synth import simulate_many

    monkeypatch.setattr(streaming, "CHUNK_ROWS", 500)
    monkeypatch.setattr(streaming, "BATCH_DRIFTERS", 2)
    fixes = simulate_many(4, 8, 5, truth=False).fixes.copy()
    fixes["time"] = fixes["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    order = sorted(fixes["drifter_id"].astype(str).unique(), reverse=True)
    grouped = pd.concat([fixes[fixes["drifter_id"].astype(str) == d] for d in order])
    (tmp_path / "in").mkdir()
    grouped.to_csv(tmp_path / "in" / "release.csv", index=False)
    paths = [tmp_path / "in" / "release.csv"]
    calls = []
    original = streaming._write_runs

    def recording(*args, **kwargs):
        calls.append(len(args[1]))
        return original(*args, **kwargs)

    monkeypatch.setattr(streaming, "_write_runs", recording)
    config = Config().replace("qc", land_test=False)
    for stages in ("all", "qc"):
        analyse(paths, config, stages=stages).write(tmp_path / f"whole_{stages}")
        streaming.run(paths, tmp_path / f"stream_{stages}", config, stages=stages)
        _compare(tmp_path / f"whole_{stages}", tmp_path / f"stream_{stages}")
    # the runs were formatted with the drifters: one run per drifter
    assert calls == [4, 4]


def test_read_pass_counts_runs_of_consecutive_rows_of_a_drifter(tmp_path, monkeypatch):
    # worked by hand: rows A A B B A | B -> runs A(0-1) B(2-3) A(4) B(5) = 4
    monkeypatch.setattr(streaming, "CHUNK_ROWS", 5)
    path = tmp_path / "mixed.csv"
    times = pd.date_range("2024-03-01", periods=6, freq="h").strftime("%Y-%m-%dT%H:%M:%SZ")
    pd.DataFrame({"id": list("AABBAB"), "time": times, "lat": 40.0 + np.arange(6) * 0.01,
                  "lon": -30.0}).to_csv(path, index=False)
    spool = streaming._Spool(tmp_path)
    try:
        index, chunks, info, rows, attrs, runs = streaming._read_pass([path], Config(), spool)
    finally:
        spool.close()
    assert (rows, runs, sorted(index)) == (6, 4, ["A", "B"])
    assert chunks == [(0, 5), (5, 1)]


def _smallest_arc(west: np.ndarray, east: np.ndarray) -> tuple[float, float, float]:
    """Brute force: the widest uncovered arc between intervals on the circle (common practice).

    Returns (widest gap, west, east) of the complement of the widest gap;
    every interval endpoint is tried as the start of a gap.
    """
    best = (-1.0, 0.0, 0.0)
    for start in np.unique(east):
        # the gap starting at `start` runs to the nearest western edge after it
        # that is not covered
        covered = (west <= start) & (east > start)
        if covered.any():
            continue
        ahead = (west - start) % 360.0
        ahead[ahead == 0] = 360.0
        k = int(np.argmin(ahead))
        gap = float(ahead[k]) if np.isfinite(ahead[k]) else 360.0
        if gap > best[0]:
            best = (gap, float(west[k]), float(start))
    return best


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("keep", [10**9, 0])
def test_bbox_accumulated_in_chunks_is_the_bbox_of_all_geometries(seed, keep, monkeypatch):
    import shapely

    monkeypatch.setattr(BboxAccumulator, "KEEP", keep)  # 0: every box goes to the bins
    rng = np.random.default_rng(seed)
    centre = rng.uniform(-180, 180)
    lon = (centre + rng.normal(0, rng.choice([0.5, 20, 90]), 300) + 180) % 360 - 180
    lat = rng.uniform(-60, 60, 300)
    geoms = list(shapely.points(np.round(lon, 6), np.round(lat, 6)))
    lines = [shapely.LineString([(lon[i], lat[i]), (min(lon[i] + 2, 180), lat[i])])
             for i in range(0, 300, 37)]
    geoms = geoms + lines + [None]
    acc = BboxAccumulator()
    for k in range(0, len(geoms), 41):
        acc.add(geoms[k:k + 41])
    box = geojson_bbox(geoms)
    assert acc.bbox() == box
    # the box leaves out the widest uncovered arc of longitude (RFC 7946 section 5.2)
    bounds = shapely.bounds(np.array([g for g in geoms if g is not None]))
    gap, east_end, west_start = _smallest_arc(bounds[:, 0], bounds[:, 2])
    if gap < 1e-3:
        assert box[0] == -180.0 and box[2] == 180.0
    else:
        assert (box[0], box[2]) == (east_end, west_start)


def test_bbox_of_longitudes_covering_the_circle_is_the_whole_circle():
    import shapely

    lon = np.linspace(-180, 180, 400_001)[:-1]  # 0.0009 degrees apart
    points = list(shapely.points(lon, np.zeros_like(lon)))
    acc = BboxAccumulator()
    acc.add(points)
    assert acc.bbox() == geojson_bbox(points) == [-180.0, 0.0, 180.0, 0.0]


@pytest.mark.parametrize("steps", [[3600], [3600, 3600, 1800], [1800, 3600], [5, 7, 7, 9, 11]])
def test_grid_step_from_counts_is_the_numpy_median(steps):
    values, counts = np.unique(np.array(steps, dtype=np.int64) * 10**9, return_counts=True)
    expected = float(np.median(np.array(steps, dtype=np.int64) * 10**9)) / 1e9
    assert grid_step_from_counts(dict(zip(values.tolist(), counts.tolist(), strict=True))) \
        == expected


def test_partitioned_parquet_dataset_is_read_with_its_partition_ids(tmp_path):
    import pyarrow as pa
    import pyarrow.dataset as ds

    # pyarrow writes the Hive layout (drifter_id=.../part-0.parquet)
    times = pd.date_range("2024-04-02", periods=30, freq="h", tz="UTC")
    table = pa.table({
        "drifter_id": ["P1"] * 30 + ["P2"] * 30,
        "time": list(times) * 2,
        "lat": np.r_[np.linspace(40, 40.2, 30), np.linspace(41, 41.2, 30)],
        "lon": np.r_[np.linspace(-40, -40.2, 30), np.linspace(-41, -41.2, 30)],
    })
    ds.write_dataset(table, tmp_path / "release", format="parquet", partitioning=["drifter_id"],
                     partitioning_flavor="hive")
    from driftloop.io import expand_inputs

    paths = expand_inputs([tmp_path / "release"])
    assert [p.parent.name for p in paths] == ["drifter_id=P1", "drifter_id=P2"]
    run = streaming.run(paths, tmp_path / "out", Config().replace("qc", land_test=False),
                        stages="qc")
    assert sorted(run.summary["drifters"]) == ["P1", "P2"]
    with open(tmp_path / "out" / "fixes.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == 60
    assert {r["drifter_id"] for r in rows} == {"P1", "P2"}


# the streaming run of `driftloop analyse` (everything but the HTML report)
_MEASURE = textwrap.dedent("""
    import resource, sys
    from driftloop.config import Config
    from driftloop.io import expand_inputs
    from driftloop.streaming import run
    result = run(expand_inputs([sys.argv[1]]), sys.argv[2],
                 Config().replace("qc", land_test=False))
    print(0 if result.summary["accounting"]["balanced"] else 1,
          resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
""")


def _peak_rss_kib(folder: Path, out: Path) -> int:
    done = subprocess.run([sys.executable, "-c", _MEASURE, str(folder), str(out)],
                          capture_output=True, text=True, timeout=600, check=False)
    assert done.returncode == 0, done.stderr
    code, rss = done.stdout.split()[-2:]
    assert code == "0", done.stderr
    return int(rss)


@pytest.mark.slow
def test_memory_of_a_streamed_release_does_not_grow_with_its_drifters(tmp_path):
    # 200 short tracks (one file each) against 20: peak RSS (Linux ru_maxrss, KiB) of a
    # streaming analyse run in a fresh process.  Stated bound: the 200-drifter run
    # stays within 60 MiB of the 20-drifter run, and under 1.5 GiB.
    small = _synthetic_csv(tmp_path / "in20", 20, 3.5, interleaved=False)
    large = _synthetic_csv(tmp_path / "in200", 200, 3.5, interleaved=False)
    rss_small = _peak_rss_kib(tmp_path / "in20", tmp_path / "out20")
    rss_large = _peak_rss_kib(tmp_path / "in200", tmp_path / "out200")
    assert rss_large <= rss_small + 60 * 1024, (rss_small, rss_large)
    assert rss_large <= 1536 * 1024
    # rows in = rows out, counted with the csv module
    for n, out in ((small, "out20"), (large, "out200")):
        with open(tmp_path / out / "fixes.csv", newline="", encoding="utf-8") as handle:
            assert sum(1 for _ in csv.reader(handle)) - 1 == n
        summary = json.loads((tmp_path / out / "summary.json").read_text())
        assert summary["accounting"] == {"rows_in": n, "rows_out": n, "balanced": True}


def test_the_spool_gives_back_each_table_exactly(tmp_path):
    # reference: pandas.testing.assert_frame_equal with exact values, dtypes and index
    # types; slices and group takes of a larger table, nulls, an empty table, and
    # tables of other dtypes (written as an Arrow IPC stream instead)
    n = 500
    rng = np.random.default_rng(7)
    words = np.array(["", "a,b", "é", "x" * 40, "tab\t"], dtype=object)
    table = pd.DataFrame({
        "id": pd.array(np.where(rng.random(n) < 0.1, None, words[rng.integers(0, 5, n)]),
                       dtype=pd.StringDtype("pyarrow")),
        "time": pd.date_range("2024-01-01", periods=n, freq="37min", tz="UTC"),
        "lat": rng.normal(40, 1, n), "flag": rng.integers(-3, 4, n).astype(np.int8),
        "row": np.arange(n, dtype=np.int64), "ok": rng.random(n) < 0.5,
        "seg": rng.integers(0, 9, n).astype(np.int32),
    })
    table.attrs = {"encoding": "utf-8"}
    others = pd.DataFrame({"c": pd.Categorical(["x", "y", "x"]),
                           "o": pd.array([1, None, 3], dtype="Int64")})
    cases = [table, table.iloc[123:321], table.iloc[::3], table[table["flag"] > 0],
             table.iloc[:0], others]
    spool = streaming._Spool(tmp_path)
    try:
        for case in cases:
            back = spool.get(spool.put(case))
            pd.testing.assert_frame_equal(back, case, check_exact=True, check_index_type=True)
            assert type(back.index) is type(case.index) and back.attrs == case.attrs
            assert [repr(d) for d in back.dtypes] == [repr(d) for d in case.dtypes]
        arrays = [np.arange(5.0), np.array([1, 2], dtype=np.int32), np.zeros((2, 3)),
                  np.array([], dtype=np.int64)]
        back = spool.get_arrays(spool.put_arrays(arrays))
        assert all(a.dtype == b.dtype and np.array_equal(a, b)
                   for a, b in zip(arrays, back, strict=True))
    finally:
        spool.close()
