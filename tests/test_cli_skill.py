"""`driftloop skill` as users meet it."""

import json

import numpy as np
import pandas as pd
import pytest

from driftloop.cli import main


def _write_track(path, drifter, lat, lon, hours):
    times = pd.Timestamp("2026-03-01T00:00:00Z") + pd.to_timedelta(hours, unit="h")
    table = pd.DataFrame({
        "drifter": drifter,
        "time": times.strftime("%Y-%m-%dT%H:%M:%SZ"),
        "lat": np.round(lat, 6),
        "lon": np.round(lon, 6),
    })
    table.to_csv(path, index=False)
    return path


def test_identical_model_scores_one_and_writes_every_file(tmp_path, capsys):
    hours = np.arange(0, 73.0)
    lat = 44.0 + 0.002 * hours
    lon = -30.0 + 0.003 * hours
    obs = _write_track(tmp_path / "obs.csv", "D1", lat, lon, hours)
    model = _write_track(tmp_path / "model.csv", "D1@run1", lat, lon, hours)
    code = main(["skill", str(obs), str(model), "--out", str(tmp_path / "run"),
                 "--windows", "24,72", "--no-land-test"])
    out, err = capsys.readouterr()
    assert code == 0, err
    # one modelled run, started at the release: one window of each length
    assert "24 h windows: 1 scored of 1, mean skill 1.000" in out
    assert "72 h windows: 1 scored of 1, mean skill 1.000" in out
    for name in ("separation.csv", "skill.csv", "skill.json", "skill.geojson", "skill.png"):
        assert (tmp_path / "run" / name).is_file(), name
    summary = json.loads((tmp_path / "run" / "skill.json").read_text())
    assert summary["windows"]["72"]["median_ss"] == pytest.approx(1.0)


def test_model_starting_elsewhere_is_refused_in_one_line(tmp_path, capsys):
    hours = np.arange(0, 25.0)
    lat = 44.0 + 0.002 * hours
    lon = -30.0 + 0.003 * hours
    obs = _write_track(tmp_path / "obs.csv", "D1", lat, lon, hours)
    model = _write_track(tmp_path / "model.csv", "D1@far", lat + 0.5, lon, hours)  # 55 km off
    code = main(["skill", str(obs), str(model), "--out", str(tmp_path / "run"),
                 "--no-land-test"])
    err = capsys.readouterr().err
    assert code == 1
    assert len(err.strip().splitlines()) == 1
    assert "model.csv" in err and "Traceback" not in err
    assert not (tmp_path / "run" / "skill.csv").exists()


def test_bad_windows_option_names_the_key(tmp_path, capsys):
    hours = np.arange(0, 25.0)
    obs = _write_track(tmp_path / "obs.csv", "D1", 44 + 0 * hours, -30 + 0.003 * hours, hours)
    code = main(["skill", str(obs), str(obs), "--out", str(tmp_path / "r"),
                 "--windows", "24,soon"])
    assert code == 1 and "windows_h" in capsys.readouterr().err
