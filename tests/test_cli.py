"""The command line as users meet it: exit codes, one-line errors, outputs."""

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from driftloop.cli import main


def _track_csv(path, n=48, lat0=45.0, lon0=-30.0, extra_rows=()):
    """Write a smooth hourly open-ocean track (about 0.1 m/s eastward)."""
    times = pd.date_range("2026-03-01T00:00:00Z", periods=n, freq="h")
    lon = lon0 + 0.0013 * np.arange(n)  # ~ 0.1 m/s at 45 N
    lines = ["drifter,time,lat,lon"]
    lines += [
        f"D1,{t.strftime('%Y-%m-%dT%H:%M:%SZ')},{lat0:.6f},{x:.6f}"
        for t, x in zip(times, lon, strict=True)
    ]
    lines += list(extra_rows)
    path.write_text("\n".join(lines) + "\n")
    return path


def _data_rows(path):
    return sum(1 for line in path.read_text().splitlines()[1:] if line.strip())


def run(args, capsys):
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def test_help_shows_examples_and_caution(capsys):
    with pytest.raises(SystemExit) as info:
        main(["analyse", "--help"])
    out = capsys.readouterr().out
    assert info.value.code == 0
    assert "examples:" in out and "driftloop analyse" in out
    assert "not an operational search-and-rescue" in " ".join(out.split())


def test_missing_out_is_bad_usage_exit_2(tmp_path, capsys):
    with pytest.raises(SystemExit) as info:
        main(["analyse", str(_track_csv(tmp_path / "t.csv"))])
    assert info.value.code == 2
    assert "--out" in capsys.readouterr().err


def test_good_run_accounts_for_every_row(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv")
    code, out, err = run(["analyse", src, "--out", tmp_path / "run", "--no-land-test"], capsys)
    assert code == 0, err
    fixes = pd.read_csv(tmp_path / "run" / "fixes.csv")
    assert len(fixes) == _data_rows(src)
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    assert summary["accounting"] == {"rows_in": 48, "rows_out": 48, "balanced": True}
    assert summary["release"]["by_flag"]["pass"] == 48
    assert "SAR" in out


def test_unparseable_time_is_kept_and_reported_once(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv", extra_rows=["D1,yesterday noon,45.0,-29.9"])
    code, _, err = run(["qc", src, "--out", tmp_path / "run", "--no-land-test"], capsys)
    assert code == 0
    fixes = pd.read_csv(tmp_path / "run" / "fixes.csv", keep_default_na=False)
    bad = fixes[fixes["source_row"] == 50]
    assert len(fixes) == 49
    assert bad["qc_flag"].item() == 4 and "unparseable" in bad["qc_reasons"].item()
    assert "yesterday noon" in bad["raw"].item()
    warning = [line for line in err.splitlines() if "warning" in line]
    assert len(warning) == 1
    assert "t.csv" in warning[0] and "row 50" in warning[0] and "time" in warning[0]


def test_strict_turns_a_bad_value_into_exit_1(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv", extra_rows=["D1,2026-03-03T00:00:00Z,95.0,-29.9"])
    code, _, err = run(["qc", src, "--out", tmp_path / "run", "--strict", "--no-land-test"],
                       capsys)
    assert code == 1
    assert len(err.strip().splitlines()) == 1
    assert "t.csv" in err and "row 50" in err and "'lat'" in err and "95" in err
    assert "Traceback" not in err
    assert not (tmp_path / "run" / "fixes.csv").exists()


def test_lat_95_without_strict_is_flagged_not_fatal(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv", extra_rows=["D1,2026-03-03T00:00:00Z,95.0,-29.9"])
    code, _, _ = run(["qc", src, "--out", tmp_path / "run", "--no-land-test"], capsys)
    assert code == 0
    fixes = pd.read_csv(tmp_path / "run" / "fixes.csv", keep_default_na=False)
    assert fixes.loc[fixes["lat"] == 95.0, "qc_reasons"].item() == "lat_out_of_range"


@pytest.mark.parametrize(
    ("content", "expected"),
    [
        ("", "empty"),
        ("drifter,time,lat,lon\n", "no data rows"),
        ("drifter,when,lat,lon\nD1,2026-03-01T00:00:00Z,45,-30\n", "time"),
    ],
)
def test_bad_files_give_one_line_and_exit_1(tmp_path, capsys, content, expected):
    src = tmp_path / "bad.csv"
    src.write_text(content)
    code, _, err = run(["analyse", src, "--out", tmp_path / "run"], capsys)
    assert code == 1
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("driftloop: error: ")
    assert "bad.csv" in lines[0] and expected in lines[0]
    assert not (tmp_path / "run" / "fixes.csv").exists()


def test_binary_junk_gives_one_line(tmp_path, capsys):
    src = tmp_path / "junk.csv"
    src.write_bytes(bytes(range(256)) * 4)
    code, _, err = run(["analyse", src, "--out", tmp_path / "run"], capsys)
    assert code == 1 and len(err.strip().splitlines()) == 1 and "junk.csv" in err


def test_unknown_suffix_and_missing_file(tmp_path, capsys):
    (tmp_path / "t.xlsx").write_bytes(b"PK")
    code, _, err = run(["analyse", tmp_path / "t.xlsx", "--out", tmp_path / "r"], capsys)
    assert code == 1 and "unknown file type" in err
    code, _, err = run(["analyse", tmp_path / "nope.csv", "--out", tmp_path / "r"], capsys)
    assert code == 1 and "no such file" in err


def test_out_refuses_a_foreign_non_empty_folder(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv")
    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("keep me")
    code, _, err = run(["qc", src, "--out", foreign, "--no-land-test"], capsys)
    assert code == 1 and "--overwrite" in err
    assert (foreign / "notes.txt").read_text() == "keep me"
    # a previous driftloop run may be written over
    run_dir = tmp_path / "run"
    assert run(["qc", src, "--out", run_dir, "--no-land-test"], capsys)[0] == 0
    assert run(["qc", src, "--out", run_dir, "--no-land-test"], capsys)[0] == 0


def test_inputs_are_never_overwritten(tmp_path, capsys):
    folder = tmp_path / "data"
    folder.mkdir()
    src = _track_csv(folder / "fixes.csv")
    before = src.read_bytes()
    code, _, err = run(["qc", src, "--out", folder, "--overwrite", "--no-land-test"], capsys)
    assert code == 1 and "input" in err
    assert src.read_bytes() == before


def test_config_file_values_are_recorded(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv")
    cfg = tmp_path / "c.toml"
    cfg.write_text("[qc]\nspeed_fail_m_s = 2.75\nland_test = false\n")
    code, _, _ = run(["qc", src, "--out", tmp_path / "run", "--config", cfg], capsys)
    assert code == 0
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    assert summary["provenance"]["parameters"]["qc"]["speed_fail_m_s"] == 2.75
    meta = json.loads((tmp_path / "run" / "fixes.csv-metadata.json").read_text())
    assert meta["notes"][0]["parameters"]["qc"]["speed_fail_m_s"] == 2.75


def test_bad_config_exit_1_naming_key(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv")
    cfg = tmp_path / "c.toml"
    cfg.write_text("[qc]\nspeed_limit = 2\n")
    code, _, err = run(["qc", src, "--out", tmp_path / "run", "--config", cfg], capsys)
    assert code == 1 and "qc.speed_limit" in err and "c.toml" in err


def test_bad_columns_option_exit_1(tmp_path, capsys):
    src = _track_csv(tmp_path / "t.csv")
    code, _, err = run(["qc", src, "--out", tmp_path / "r", "--columns", "depth=z"], capsys)
    assert code == 1 and "unknown role 'depth'" in err


def test_installed_script_and_module_form_agree(tmp_path):
    src = _track_csv(tmp_path / "t.csv")
    for i, prefix in enumerate([["driftloop"], [sys.executable, "-m", "driftloop"]]):
        done = subprocess.run(
            [*prefix, "qc", str(src), "--out", str(tmp_path / f"r{i}"), "--no-land-test",
             "--quiet"],
            capture_output=True, text=True, check=False,
        )
        assert done.returncode == 0, done.stderr
        assert done.stdout == ""
    first, second = (tmp_path / f"r{i}" / "fixes.csv" for i in range(2))
    assert first.read_bytes() == second.read_bytes()
