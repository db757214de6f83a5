"""Parallel runs on Dask give the bytes of a serial run.

The reference is the serial, in-process run of the same command: every
output but the run clock in ``provenance.json`` must be byte-identical
(docs/scaling.md).  The cluster is a ``dask.distributed.LocalCluster`` on
127.0.0.1 with two single-thread worker processes.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from driftloop import streaming
from driftloop.cli import main
from driftloop.config import Config

pytest.importorskip("dask.distributed")

CLOCK = ("written_utc", "run_seconds", "stage_seconds")


def _same_outputs(a: Path, b: Path) -> list[str]:
    names = sorted(p.name for p in a.iterdir())
    assert names == sorted(p.name for p in b.iterdir())
    for name in names:
        x, y = (a / name).read_bytes(), (b / name).read_bytes()
        if name == "report.html":  # its run-clock paragraph states the run's times
            x, y = (re.sub(rb"<p id='run-clock'>.*?</p>", b"", v) for v in (x, y))
        if name == "provenance.json":
            x, y = json.loads(x), json.loads(y)
            for key in CLOCK:
                x.pop(key, None)
                y.pop(key, None)
        assert x == y, name
    return names


@pytest.fixture(scope="module")
def release(tmp_path_factory) -> Path:
    from driftloop.synth import simulate_many

    folder = tmp_path_factory.mktemp("release")
    fixes = simulate_many(4, 9, 5, truth=False).fixes.copy()
    fixes["time"] = fixes["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    fixes = fixes.sort_values("time", kind="stable")  # drifters mixed in both files
    half = len(fixes) // 2
    fixes.iloc[:half].to_csv(folder / "a.csv", index=False)
    fixes.iloc[half:].to_csv(folder / "b.csv", index=False)
    return folder


@pytest.mark.slow
def test_a_local_cluster_gives_the_bytes_of_a_serial_run(release, tmp_path, monkeypatch):
    from dask.distributed import LocalCluster

    monkeypatch.setattr(streaming, "BATCH_DRIFTERS", 1)  # one task per drifter
    paths = sorted(release.iterdir())
    config = Config().replace("qc", land_test=False)
    formats = ["geojson", "parquet"]
    streaming.run(paths, tmp_path / "serial", config, formats=formats)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None,
                      scheduler_kwargs={"dashboard_address": "127.0.0.1:0"}) as cluster:
        run = streaming.run(paths, tmp_path / "cluster", config, formats=formats,
                            scheduler=cluster.scheduler_address)
    assert run.drifters == 4
    names = _same_outputs(tmp_path / "serial", tmp_path / "cluster")
    assert {"loops.geojson", "fixes.csv", "summary.json", "resampled.nc"} <= set(names)


@pytest.mark.slow
def test_workers_option_gives_the_bytes_of_a_serial_run(release, tmp_path, monkeypatch):
    monkeypatch.setattr(streaming, "BATCH_DRIFTERS", 2)
    common = [str(release), "--no-land-test", "--quiet"]
    # same folder name: the report's title names it
    assert main(["analyse", *common, "--out", str(tmp_path / "serial" / "run")]) == 0
    assert main(["analyse", *common, "--out", str(tmp_path / "two" / "run"),
                 "--workers", "2"]) == 0
    assert "report.html" in _same_outputs(tmp_path / "serial" / "run", tmp_path / "two" / "run")


def test_workers_below_one_are_refused_in_one_line(release, tmp_path, capsys):
    code = main(["qc", str(release), "--out", str(tmp_path / "out"), "--workers", "0"])
    assert code == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--workers" in err
    assert not (tmp_path / "out").exists()


_FACTS = """
import os, sys
from driftloop.parallel import executor

def facts(item):
    return item, os.environ.get("MALLOC_TRIM_THRESHOLD_"), "colorsys" in sys.modules

if __name__ == "__main__":
    assert "colorsys" not in sys.modules
    with executor(2, preload=("colorsys",)) as ex:
        print(list(ex.map(facts, range(4))))
"""


@pytest.mark.slow
def test_local_workers_start_with_the_preloaded_modules_and_glibc_malloc_defaults(tmp_path):
    # colorsys: a standard module that neither driftloop nor Dask imports.
    # MALLOC_TRIM_THRESHOLD_, when set, turns off glibc's adaptive mmap threshold
    # (mallopt(3), M_TRIM_THRESHOLD and M_MMAP_THRESHOLD, Linux man-pages); Dask
    # sets it for the workers it spawns and leaves it in the environment
    script = tmp_path / "facts.py"
    script.write_text(_FACTS)
    env = {**os.environ, "MALLOC_TRIM_THRESHOLD_": "65536"}
    done = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                          env=env, timeout=300, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip() == str([(k, None, True) for k in range(4)])
