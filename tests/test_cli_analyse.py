"""`driftloop analyse` end to end on the bundled sample release, and `driftloop export`."""

import json
import re
from pathlib import Path

import pandas as pd
import pytest

from driftloop.cli import main

SAMPLE = Path(__file__).resolve().parent.parent / "sample_tracks" / "orravane_a.csv"
CONTRACT = {
    "drifter_id": str, "start": str, "end": str, "kind": str, "spin": str,
    "period_h": float, "radius_km": float, "speed_m_s": float, "cycles": float,
    "lat": float, "lon": float, "inertial_period_h": float, "inertial_radius_km": float,
    "period_ratio": float, "radius_ratio": float,
}
ISO_Z = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d+)?Z$")


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("run") / "orravane_a"
    assert main(["analyse", str(SAMPLE), "--out", str(out), "--no-land-test", "--quiet"]) == 0
    return out


def test_loops_geojson_follows_the_contract(run_dir):
    collection = json.loads((run_dir / "loops.geojson").read_text())
    assert collection["type"] == "FeatureCollection" and "crs" not in collection  # RFC 7946
    features = collection["features"]
    assert features
    for feature in features:
        props = feature["properties"]
        for key, kind in CONTRACT.items():
            assert isinstance(props[key], int | float) if kind is float else \
                isinstance(props[key], kind), key
        assert ISO_Z.match(props["start"]) and ISO_Z.match(props["end"])
        assert props["kind"] in {"inertial", "eddy", "tidal", "other"}
        assert props["spin"] in {"cyclonic", "anticyclonic"}
        assert feature["geometry"]["type"] in {"LineString", "MultiLineString"}


def test_the_eddy_drifter_loops_are_not_called_inertial(run_dir):
    # sample_tracks/README.md: ORV-A06 orbits a cyclonic eddy at 12 km, 4.0-day period
    events = pd.read_csv(run_dir / "loops.csv")
    slow = events[(events["drifter_id"] == "ORV-A06") & (events["period_h"] > 48)]
    assert len(slow) == 1
    eddy = slow.iloc[0]
    assert eddy["kind"] == "eddy" and eddy["spin"] == "cyclonic"
    assert eddy["period_h"] == pytest.approx(96.0, rel=0.05)
    assert eddy["radius_km"] == pytest.approx(12.0, rel=0.1)
    inertial = events[events["kind"] == "inertial"]
    assert (inertial["spin"] == "anticyclonic").all()
    assert (inertial["period_ratio"].between(0.85, 1.15)).all()


def test_summary_counts_events_and_checks_the_inertial_peak(run_dir):
    summary = json.loads((run_dir / "summary.json").read_text())
    assert summary["accounting"]["balanced"]
    counts = summary["loops"]["by_kind"]
    assert sum(counts.values()) == summary["loops"]["events"]
    per_drifter = sum(sum(d["events"].values()) for d in summary["drifters"].values())
    assert per_drifter == summary["loops"]["events"]
    peak = summary["release"]["inertial_peak_check"]
    assert peak["drifters_checked"] == 8 and peak["within_tolerance"] == 8


def test_resampled_outputs_read_back(run_dir):
    xr = pytest.importorskip("xarray")
    table = pd.read_csv(run_dir / "resampled.csv")
    with xr.open_dataset(run_dir / "resampled.nc") as ds:
        # CF Conventions 1.11, section 9: contiguous ragged array of trajectories
        assert ds.attrs["featureType"] == "trajectory"
        assert int(ds["rowSize"].sum()) == len(table) == ds.sizes["obs"]
    assert (pd.to_datetime(table["time"]).dt.minute == 0).all()  # whole hours


def test_export_writes_a_geopackage_from_the_run_folder(run_dir):
    pyogrio = pytest.importorskip("pyogrio")
    assert main(["export", str(run_dir), "--formats", "gpkg", "--quiet"]) == 0
    layers = {name for name, _ in pyogrio.list_layers(run_dir / "driftloop.gpkg")}
    assert layers == {"fixes", "tracks", "loops", "loop_centres", "loop_shapes"}
    loops = pyogrio.read_dataframe(run_dir / "driftloop.gpkg", layer="loops")
    assert len(loops) == len(pd.read_csv(run_dir / "loops.csv"))


def test_export_refuses_a_folder_that_is_not_a_run(tmp_path, capsys):
    assert main(["export", str(tmp_path), "--formats", "gpkg"]) == 1
    assert "not a driftloop run folder" in capsys.readouterr().err


def test_unknown_format_is_refused(tmp_path, capsys):
    assert main(["export", str(tmp_path), "--formats", "shapefile"]) == 1
    assert "unknown format shapefile" in capsys.readouterr().err
