"""No data loss and no partial files: runs killed with SIGKILL, output folders, inputs.

A run writes each output to ``.NAME.PID.RANDOM.part`` in ``--out`` and renames
it over ``NAME`` (``driftloop.io.writers.atomic_open``).  Killed at any
moment, it must leave every output either as the previous run wrote it or
as this run writes it, complete; a later run removes the temporary files of
killed writers.  The kills here use real timing on a real subprocess: the
input is large enough for the run to take a few seconds, and some kills wait
until the run's own temporary file appears, so that they land while it writes.
"""

from __future__ import annotations

import hashlib
import json
import os
import random
import shutil
import signal
import stat
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import strategies

from driftloop.io.writers import atomic_open, remove_stale_parts

OUTPUTS = strategies.OUTPUTS
RUN_CLOCK = strategies.RUN_CLOCK


def _track_csv(path: Path, n: int, drifters: int = 3, lon0: float = -30.0) -> Path:
    per = n // drifters
    k = np.arange(per)
    stamps = (1772323200 + 600 * k).astype("datetime64[s]").astype(str)
    with open(path, "w", encoding="utf-8") as handle:
        handle.write("drifter,time,lat,lon\n")
        for d in range(drifters):
            lat = 40.0 + d + 1e-4 * k
            lon = lon0 + 1e-4 * k
            handle.write("".join(
                f"D{d},{s}Z,{a:.6f},{b:.6f}\n"
                for s, a, b in zip(stamps.tolist(), lat.tolist(), lon.tolist(), strict=True)))
    return path


def _command(src: Path, out: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "driftloop", "qc", str(src), "--out", str(out),
            "--no-land-test", "--quiet", *extra]


def _run(src: Path, out: Path, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run(_command(src, out, *extra), capture_output=True, text=True,
                          check=False)


def _contents(folder: Path) -> dict[str, bytes]:
    return {name: (folder / name).read_bytes() for name in OUTPUTS}


def _same_run(name: str, data: bytes, reference: bytes) -> bool:
    """Whether an output is the reference's (provenance: all but the time stamp)."""
    if name != "provenance.json":
        return data == reference
    try:
        mine = json.loads(data)
    except ValueError:
        return False
    theirs = json.loads(reference)
    for key in RUN_CLOCK:
        mine.pop(key, None)
        theirs.pop(key, None)
    return mine == theirs


def _check_folder(folder: Path, previous: dict[str, bytes], new: dict[str, bytes]) -> list[str]:
    """Every output is complete: the previous run's or the new run's, byte for byte."""
    problems = []
    for entry in os.listdir(folder):
        if entry in OUTPUTS:
            data = (folder / entry).read_bytes()
            if not (_same_run(entry, data, previous[entry]) or _same_run(entry, data, new[entry])):
                problems.append(f"{entry} is neither the previous nor the new run's "
                                f"({len(data)} bytes)")
        elif not (entry.startswith(tuple(f".{n}." for n in OUTPUTS)) and entry.endswith(".part")):
            problems.append(f"unexpected entry {entry!r}")
    return problems


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """A big input (new run), a small one (previous run), and their complete outputs."""
    root = tmp_path_factory.mktemp("atomic")
    big = _track_csv(root / "big.csv", 100_000)
    small = _track_csv(root / "small.csv", 60, lon0=-20.0)
    config = root / "previous.toml"
    config.write_text("[qc]\ngap_h = 5.0\n")  # so that every output of the two runs differs
    started = time.monotonic()
    done = _run(big, root / "ref_big")
    duration = time.monotonic() - started
    assert done.returncode == 0, done.stderr
    done = _run(small, root / "ref_small", "--config", str(config))
    assert done.returncode == 0, done.stderr
    return {
        "root": root, "big": big, "small": small, "duration": duration,
        "new": _contents(root / "ref_big"), "previous": _contents(root / "ref_small"),
    }


def _wait_for(predicate, proc: subprocess.Popen, timeout: float) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end and proc.poll() is None:
        if predicate():
            return True
        time.sleep(0.002)
    return False


def _parts(folder: Path, name: str) -> list[str]:
    return [e for e in os.listdir(folder) if e.startswith(f".{name}.") and e.endswith(".part")]


def test_killed_runs_leave_previous_or_new_complete_outputs(runs):
    root, previous, new = runs["root"], runs["previous"], runs["new"]
    for name in OUTPUTS:
        assert not _same_run(name, previous[name], new[name]), name  # the check can tell them apart
    rng = random.Random(20260301)
    schedule = ["random", "writing fixes.csv", "after fixes.csv", "writing summary.json",
                "random", "random"]
    landed = []
    for k, when in enumerate(schedule):
        folder = root / f"killed{k}"
        shutil.copytree(root / "ref_small", folder)
        first_inode = (folder / "fixes.csv").stat().st_ino
        proc = subprocess.Popen(_command(runs["big"], folder), stdout=subprocess.DEVNULL,
                                stderr=subprocess.DEVNULL)
        try:
            if when == "random":
                time.sleep(rng.uniform(0.0, runs["duration"]))
            elif when == "writing fixes.csv":
                assert _wait_for(lambda f=folder: _parts(f, "fixes.csv"), proc, 120)
                time.sleep(rng.uniform(0.0, 0.02))
            elif when == "after fixes.csv":
                # a run may finish before the poll sees the moment: the kill then
                # finds it done, and the folder check below still applies
                _wait_for(lambda f=folder, i=first_inode:
                          (f / "fixes.csv").stat().st_ino != i, proc, 120)
            else:
                _wait_for(lambda f=folder: _parts(f, "summary.json"), proc, 120)
            parts_at_kill = [e for e in os.listdir(folder) if e.endswith(".part")]
            proc.send_signal(signal.SIGKILL)
        finally:
            proc.wait(timeout=60)
        landed.append((when, proc.returncode, parts_at_kill))
        problems = _check_folder(folder, previous, new)
        assert not problems, (when, problems)
    # the kill that waited for the temporary fixes.csv landed while the run was writing it
    # (writing 100,000 rows takes longer than the wait); the later kills may find the
    # run already finished, which the folder check covers too
    when, code, parts = landed[1]
    assert code == -signal.SIGKILL and any(p.startswith(".fixes.csv.") for p in parts), landed

    # a later run over a killed one completes and removes the temporary files
    folder = root / "killed1"
    done = _run(runs["big"], folder)
    assert done.returncode == 0, done.stderr
    assert not [e for e in os.listdir(folder) if e.endswith(".part")]
    for name in OUTPUTS:
        assert _same_run(name, (folder / name).read_bytes(), new[name])


def test_a_first_run_killed_part_way_can_be_run_again(runs, tmp_path):
    """The state a first run leaves when killed between its first and last rename."""
    folder = tmp_path / "first"
    folder.mkdir()
    shutil.copy(runs["root"] / "ref_big" / "fixes.csv", folder / "fixes.csv")
    (folder / ".summary.json.999999999.x1y2.part").write_text("{")
    done = _run(runs["small"], folder, "--config", str(runs["root"] / "previous.toml"))
    assert done.returncode == 0, done.stderr
    assert _contents(folder)["fixes.csv"] == runs["previous"]["fixes.csv"]


def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_stale_temporary_files_are_removed_and_live_ones_kept(tmp_path):
    target = tmp_path / "fixes.csv"
    target.write_text("old\n")
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        dead = tmp_path / f".fixes.csv.{_dead_pid()}.a1b2.part"
        legacy = tmp_path / ".fixes.csv.q9w8e7.part"
        live = tmp_path / f".fixes.csv.{sleeper.pid}.c3d4.part"
        other = tmp_path / f".summary.json.{_dead_pid()}.e5f6.part"
        for p in (dead, legacy, live, other):
            p.write_text("partial")
        with atomic_open(target) as handle:
            handle.write("new\n")
        assert target.read_text() == "new\n"
        assert not dead.exists() and not legacy.exists()
        assert live.exists(), "the temporary file of a running writer was removed"
        assert other.exists(), "only the temporary files of the file written are touched"
        assert remove_stale_parts(tmp_path / "summary.json") == [other]
    finally:
        sleeper.kill()
        sleeper.wait()


def test_a_failed_write_keeps_the_previous_file_and_no_temporary(tmp_path):
    target = tmp_path / "summary.json"
    target.write_text('{"previous": true}\n')
    with pytest.raises(RuntimeError), atomic_open(target) as handle:
        handle.write('{"half":')
        raise RuntimeError("disk full")
    assert target.read_text() == '{"previous": true}\n'
    assert os.listdir(tmp_path) == ["summary.json"]


def test_outputs_get_the_permissions_of_a_new_file(tmp_path):
    old = os.umask(0o027)
    try:
        with atomic_open(tmp_path / "a.txt") as handle:
            handle.write("x")
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "a.txt").stat().st_mode) == 0o640


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _qc(*args) -> tuple[int, str]:
    code, _, err, _ = strategies.run_cli(["qc", *map(str, args), "--no-land-test", "--quiet"])
    return code, err


def test_out_refuses_a_foreign_folder_unless_overwrite(tmp_path):
    src = _track_csv(tmp_path / "t.csv", 30)
    foreign = tmp_path / "notes"
    foreign.mkdir()
    (foreign / "todo.txt").write_text("keep me")
    code, err = _qc(src, "--out", foreign)
    assert code == 1 and "--overwrite" in err and str(foreign) in err
    assert os.listdir(foreign) == ["todo.txt"]
    code, err = _qc(src, "--out", foreign, "--overwrite")
    assert code == 0, err
    assert (foreign / "todo.txt").read_text() == "keep me"
    assert sorted(os.listdir(foreign)) == sorted([*OUTPUTS, "todo.txt"])


def test_inputs_are_never_modified_whatever_out_points_at(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    track = _track_csv(data / "track.csv", 30)
    gpx = data / "g.gpx"
    gpx.write_text('<gpx version="1.1"><wpt lat="1.0" lon="2.0">'
                   "<time>2026-03-01T00:00:00Z</time></wpt></gpx>\n")
    other = tmp_path / "other"
    other.mkdir()
    named_like_output = _track_csv(other / "fixes.csv", 30)
    before = {p: _sha(p) for p in (track, gpx, named_like_output)}

    # --out is the input folder: outputs go beside the inputs
    code, err = _qc(track, gpx, "--out", data, "--overwrite")
    assert code == 0, err
    assert sorted(os.listdir(data)) == sorted([*OUTPUTS, "track.csv", "g.gpx"])
    # an input that has an output's name is never written over
    code, err = _qc(named_like_output, "--out", other, "--overwrite")
    assert code == 1 and "refusing to overwrite an input file" in err
    # the folder as input and as output: its fixes.csv is now an input too
    code, err = _qc(data, "--out", data, "--overwrite")
    assert code == 1 and "refusing to overwrite an input file" in err
    # an output that is a symbolic link to an input
    run = tmp_path / "run"
    assert _qc(track, "--out", run)[0] == 0
    (run / "fixes.csv").unlink()
    (run / "fixes.csv").symlink_to(track)
    code, err = _qc(track, "--out", run)
    assert code == 1 and "refusing to overwrite an input file" in err
    assert {p: _sha(p) for p in before} == before
