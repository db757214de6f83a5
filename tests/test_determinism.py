"""Determinism: the same input gives the same bytes, whatever the order of files and rows.

What must be invariant, and what may not be:

* Two runs on the same input: ``fixes.csv``, ``summary.json`` and
  ``fixes.csv-metadata.json`` are byte-identical; ``provenance.json`` differs
  only in ``written_utc``, ``run_seconds`` and ``stage_seconds`` (the clock
  of the run).
* The order of the files on the command line: every output is
  byte-identical (the pipeline reads files sorted by path).
* The order of the rows in a file: ``fixes.csv`` keeps file order, so the
  row order and ``source_row`` change; and ``out_of_order`` is by definition
  about file order.  Everything else is a property of the fixes: keyed by
  content (drifter, time, lat, lon), the multiset of (flag, reasons other
  than ``out_of_order``, segment) is the same, and so is ``summary.json``
  once the ``out_of_order`` counts are left out.  Of exact copies of a fix,
  which one is kept and which are ``duplicate`` depends on row order, but
  copies have the same content, so the multiset does not change.  (Fixes
  less than ``same_time_s`` apart at one position are duplicates too; if
  their times differ, which time is kept can change with row order.)
"""

from __future__ import annotations

import itertools
import json
import random
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import strategies
from _hypothesis_profiles import profile
from hypothesis import assume, given
from hypothesis import strategies as st

SAMPLE = Path(__file__).resolve().parent.parent / "sample_tracks" / "orravane_a.csv"
STABLE = ("fixes.csv", "summary.json", "fixes.csv-metadata.json")


def _qc(inputs, out: Path, *options: str) -> dict[str, bytes]:
    code, _, err, caught = strategies.run_cli(
        ["qc", *map(str, inputs), "--out", str(out), "--quiet", *options])
    assert code == 0, err
    assert not caught
    return {name: (out / name).read_bytes() for name in strategies.OUTPUTS}


def _provenance_without_time(data: bytes) -> dict:
    doc = json.loads(data)
    for key in strategies.RUN_CLOCK:
        assert key in doc, key
        doc.pop(key)
    return doc


def test_two_runs_give_the_same_bytes_with_the_land_test(tmp_path):
    first = _qc([SAMPLE], tmp_path / "a")
    second = _qc([SAMPLE], tmp_path / "b")
    for name in STABLE:
        assert first[name] == second[name], name
    assert (_provenance_without_time(first["provenance.json"])
            == _provenance_without_time(second["provenance.json"]))
    assert b"written_utc" not in first["summary.json"] + first["fixes.csv-metadata.json"]


@profile(5)
@given(strategies.cases(max_files=3, max_records=20), st.randoms(use_true_random=False))
def test_file_order_on_the_command_line_does_not_matter(case, rnd):
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        (folder / "in").mkdir()
        paths = [f.write(folder / "in") for f in case.files]
        options = [o for o in case.options if o != "--strict"]
        code, _, _, _ = strategies.run_cli(["qc", *map(str, paths), "--out",
                                            str(folder / "probe"), *options])
        assume(code == 0)  # refused inputs: their messages are tested elsewhere
        orders = list(itertools.permutations(paths))
        rnd.shuffle(orders)
        results = [_qc(order, folder / f"out{k}", *options) for k, order in enumerate(orders[:3])]
    for result in results[1:]:
        for name in STABLE:
            assert result[name] == results[0][name], name
        assert (_provenance_without_time(result["provenance.json"])
                == _provenance_without_time(results[0]["provenance.json"]))


def _without_out_of_order(summary: dict) -> dict:
    summary = json.loads(json.dumps(summary))
    for part in [summary["release"], *summary["drifters"].values()]:
        part["by_reason"].pop("out_of_order", None)
    return summary


def _content_multiset(fixes: pd.DataFrame) -> list[tuple]:
    reasons = fixes["qc_reasons"].map(
        lambda r: "|".join(c for c in r.split("|") if c and c != "out_of_order"))
    table = pd.DataFrame({
        "drifter_id": fixes["drifter_id"], "time": fixes["time"], "lat": fixes["lat"],
        "lon": fixes["lon"], "qc_flag": fixes["qc_flag"], "reasons": reasons,
        "segment": fixes["segment"],
    })
    return sorted(map(tuple, table.to_numpy().tolist()))


def _shuffled_copy(src: Path, dst: Path, seed: int) -> Path:
    header, *rows = src.read_text(encoding="utf-8").splitlines()
    random.Random(seed).shuffle(rows)
    dst.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")
    return dst


def _assert_same_up_to_row_order(a: Path, b: Path, *options: str) -> tuple[dict, dict]:
    first = _qc([a], a.parent / "out_a", *options)
    second = _qc([b], b.parent / "out_b", *options)
    fa = strategies.read_fixes_csv(a.parent / "out_a" / "fixes.csv")
    fb = strategies.read_fixes_csv(b.parent / "out_b" / "fixes.csv")
    assert len(fa) == len(fb)
    assert _content_multiset(fa) == _content_multiset(fb)
    sa, sb = (json.loads(r["summary.json"]) for r in (first, second))
    for s in (sa, sb):  # the file name differs; the rest must not
        s["inputs"] = [{**i, "file": "x"} for i in s["inputs"]]
        for d in s["drifters"].values():
            d["source_files"] = ["x"]
    assert _without_out_of_order(sa) == _without_out_of_order(sb)
    return sa, sb


def test_row_order_does_not_matter_on_the_sample_release_with_the_land_test(tmp_path):
    for folder in ("a", "b"):
        (tmp_path / folder).mkdir()
    original = tmp_path / "a" / "orravane_a.csv"
    original.write_bytes(SAMPLE.read_bytes())
    shuffled = _shuffled_copy(SAMPLE, tmp_path / "b" / "orravane_a.csv", seed=7)
    sa, sb = _assert_same_up_to_row_order(original, shuffled)
    # the shuffle did change what depends on file order, so the comparison had work to do
    assert sb["release"]["by_reason"]["out_of_order"] > sa["release"]["by_reason"].get(
        "out_of_order", 0)
    assert sa["release"]["by_flag"]["fail"] > 0


@st.composite
def _tracks(draw):
    """Drifters with regular sampling, time jumps, exact copies and same-time conflicts."""
    lines = ["id,time,lat,lon"]
    for d in range(draw(st.integers(1, 3))):
        n = draw(st.integers(1, 40))
        t = 1772323200 + draw(st.integers(0, 10**6))
        lat, lon = draw(st.floats(-70, 70)), draw(st.floats(-170, 170))
        rows = []
        for _ in range(n):
            t += draw(st.sampled_from([600, 600, 3600, 1, 86400 * 3, 0]))
            step = draw(st.sampled_from([1e-4, 1e-3, 0.5, 0.0]))
            lat, lon = lat + step, lon + step
            stamp = str(np.datetime64(t, "s")) + "Z"
            rows.append(f"D{d},{stamp},{lat:.6f},{lon:.6f}")
            if draw(st.integers(0, 6)) == 0:
                rows.append(rows[-1])  # an exact copy
        lines += rows
    return "\n".join(lines) + "\n"


@profile(15)
@given(_tracks(), st.integers(0, 10**6))
def test_row_order_does_not_matter(text, seed):
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        for sub in ("a", "b"):
            (folder / sub).mkdir()
        original = folder / "a" / "t.csv"
        original.write_text(text, encoding="utf-8")
        shuffled = _shuffled_copy(original, folder / "b" / "t.csv", seed)
        _assert_same_up_to_row_order(original, shuffled, "--no-land-test")


def test_writing_in_chunks_gives_the_bytes_of_one_write(tmp_path, monkeypatch):
    import driftloop.io.writers as writers

    whole = _qc([SAMPLE], tmp_path / "whole", "--no-land-test")
    monkeypatch.setattr(writers, "CSV_CHUNK_ROWS", 1000)
    chunked = _qc([SAMPLE], tmp_path / "chunked", "--no-land-test")
    assert chunked["fixes.csv"] == whole["fixes.csv"]
    assert whole["fixes.csv"].count(b"\n") == 8448


def test_two_analyse_runs_write_the_same_bytes_in_every_output(tmp_path):
    """Every stage's outputs repeat byte for byte; only the run's clock may differ.

    The clock lives in ``provenance.json`` (``written_utc``, ``run_seconds``,
    ``stage_seconds``) and is shown by ``report.html`` in its ``run-clock``
    paragraph.
    """
    import re

    outputs = []
    for name in ("a", "b"):
        out = tmp_path / name / "run"  # same folder name: the report's title uses it
        code, _, err, caught = strategies.run_cli(
            ["analyse", str(SAMPLE), "--out", str(out), "--quiet", "--no-land-test",
             "--formats", "geojson,gpkg,parquet,csv"])
        assert code == 0, err
        assert not caught
        outputs.append({p.name: p.read_bytes() for p in sorted(out.iterdir())})
    first, second = outputs
    assert sorted(first) == sorted(second)
    assert {"loops.geojson", "driftloop.gpkg", "resampled.nc", "loops.parquet",
            "report.html", "spectra.csv"} <= set(first)
    clock = re.compile(rb"<p id='run-clock'>.*?</p>")
    for name in first:
        a, b = first[name], second[name]
        if name == "provenance.json":
            assert _provenance_without_time(a) == _provenance_without_time(b)
        elif name == "report.html":
            assert len(clock.findall(a)) == 1
            assert clock.sub(b"", a) == clock.sub(b"", b)
        else:
            assert a == b, name
