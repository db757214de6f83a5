"""The 1-km land mask: known places, coast distances, packing and the cache."""

from __future__ import annotations

import os
import zipfile

import numpy as np
import pytest

from driftloop import geodesy, landmask

# Places whose land/sea status is common geographic knowledge.
SEA = {
    "Gulf of Guinea, 0N 0E": (0.0, 0.0),
    "central Pacific": (0.0, -150.0),
    "central North Atlantic": (30.0, -40.0),
    "central Indian Ocean": (-20.0, 80.0),
    "near the North Pole (Arctic Ocean)": (89.9, 0.0),
}
LAND = {
    "central Paris": (48.8566, 2.3522),
    "central Australia": (-25.0, 134.0),
    "Sahara": (23.0, 10.0),
    "Siberia": (62.0, 100.0),
    "Amazon basin": (-3.5, -62.0),
    "Antarctic interior": (-80.0, 0.0),
}

# Off the west coast of Portugal: at 39 N the first land cell along the
# parallel lies near 9.424 W (from the mask), about 6.6 km east of this point.
COASTAL_SEA = (39.0, -9.5)


@pytest.fixture(scope="module")
def bits():
    return landmask.land_bits()


def test_packed_mask_shape(bits):
    assert bits.shape == (21600, 5400)
    assert bits.dtype == np.uint8
    assert not bits.flags.writeable


@pytest.mark.parametrize("name", sorted(SEA))
def test_known_sea(bits, name):
    lat, lon = SEA[name]
    assert not landmask.is_land(lat, lon)


@pytest.mark.parametrize("name", sorted(LAND))
def test_known_land(bits, name):
    lat, lon = LAND[name]
    assert landmask.is_land(lat, lon)


def test_is_land_vectorised_and_invalid_inputs(bits):
    lats = np.array([[0.0, 48.8566], [np.nan, 95.0]])
    lons = np.array([[0.0, 2.3522], [0.0, 0.0]])
    result = landmask.is_land(lats, lons)
    assert result.shape == (2, 2)
    assert result.tolist() == [[False, True], [False, False]]
    assert not landmask.is_land(np.inf, 0.0)
    assert not landmask.is_land(0.0, np.nan)


def test_longitude_wraps(bits):
    lat, lon = LAND["central Australia"]
    assert landmask.is_land(lat, lon + 360.0)
    assert landmask.is_land(lat, lon - 360.0)
    rng = np.random.default_rng(3)
    lats = rng.uniform(-60, 70, 2000)
    lons = rng.uniform(-180, 180, 2000)
    np.testing.assert_array_equal(landmask.is_land(lats, lons), landmask.is_land(lats, lons + 360))


def test_is_land_matches_raw_archive_rows(bits):
    # Independent check of the indexing and bit order: decompress a band of
    # rows straight from the archive (rows 840-899, about 82.5-83 N, through
    # the coasts of Greenland and Ellesmere Island) and compare cell centres.
    first, count = 840, 60
    with zipfile.ZipFile(landmask.mask_source()) as archive, archive.open("mask.npy") as f:
        version = np.lib.format.read_magic(f)
        assert version in ((1, 0), (2, 0))
        shape, _, _ = (np.lib.format.read_array_header_1_0(f) if version == (1, 0)
                       else np.lib.format.read_array_header_2_0(f))
        f.read(first * shape[1])
        sea = np.frombuffer(f.read(count * shape[1]), dtype=bool).reshape(count, shape[1])
    rows = np.arange(first, first + count)
    cols = np.arange(0, shape[1], 7)
    lat = 90.0 - (rows + 0.5) / 120.0
    lon = -180.0 + (cols + 0.5) / 120.0
    lat_g, lon_g = np.meshgrid(lat, lon, indexing="ij")
    expected = ~sea[:, ::7]
    assert expected.any() and (~expected).any()
    np.testing.assert_array_equal(landmask.is_land(lat_g, lon_g), expected)


def test_land_within_near_a_coast(bits):
    lat, lon = COASTAL_SEA
    assert not landmask.is_land(lat, lon)
    assert not landmask.land_within(lat, lon, 5.0)
    assert landmask.land_within(lat, lon, 8.0)
    assert landmask.land_within(lat, lon, 10.0)
    # the flip agrees with the geodesic distance to the first land cell east
    lons = np.arange(lon, lon + 0.2, 0.0005)
    coast_lon = lons[np.argmax(landmask.is_land(np.full(lons.size, lat), lons))]
    distance_km = float(geodesy.inverse(lon, lat, coast_lon, lat).distance_m) / 1e3
    assert 5.0 < distance_km < 8.0


def test_land_within_open_ocean_and_inland(bits):
    lat, lon = SEA["central Pacific"]
    assert not landmask.land_within(lat, lon, 50.0)
    lat, lon = LAND["central Paris"]
    assert landmask.land_within(lat, lon, 0.0)
    assert landmask.land_within(lat, lon, 1.0)


def test_land_within_zero_radius_is_is_land(bits):
    rng = np.random.default_rng(11)
    lats = rng.uniform(30, 60, 3000)
    lons = rng.uniform(-15, 30, 3000)
    np.testing.assert_array_equal(landmask.land_within(lats, lons, 0.0),
                                  landmask.is_land(lats, lons))


def test_land_within_against_brute_force(bits):
    # Every cell whose centre is within the radius must be found; cells
    # only overlapping the circle may add a little (less than a cell).
    rng = np.random.default_rng(5)
    lats = rng.uniform(82.0, 83.4, 300)  # the band read above is rows 792-960
    lons = rng.uniform(-80, -20, 300)
    radius_km = 4.0
    found = landmask.land_within(lats, lons, radius_km)
    for k in range(lats.size):
        inside = _cells_within(lats[k], lons[k], radius_km)
        centre_land = landmask.is_land(inside[0], inside[1]).any()
        if centre_land:
            assert found[k]
        wider = _cells_within(lats[k], lons[k], radius_km + 1.5)
        if found[k]:
            assert landmask.is_land(wider[0], wider[1]).any()
    assert found.any() and (~found).any()


def test_land_within_is_fast(bits):
    import time

    rng = np.random.default_rng(0)
    lats = rng.uniform(-70, 70, 100_000)
    lons = rng.uniform(-180, 180, 100_000)
    landmask.land_within(lats[:10], lons[:10], 10.0)  # builds the coarse table
    start = time.perf_counter()
    landmask.land_within(lats, lons, 10.0)
    assert time.perf_counter() - start < 1.0


def test_land_within_near_poles_and_antimeridian(bits):
    assert landmask.land_within(-89.99, 0.0, 10.0)  # Antarctica under the pole
    assert not landmask.land_within(89.95, 45.0, 20.0)  # Arctic Ocean
    # find a row whose last cell west of 180 E is land while the 20 cells
    # east of it are sea: from the second cell east of the meridian the
    # nearest land in that row lies across the wrap
    rows = np.arange(21600)
    lat = 90.0 - (rows + 0.5) / 120.0
    west = landmask.is_land(lat, 180.0 - 0.5 / 120.0)
    east = np.zeros(rows.size, dtype=bool)
    for k in range(20):
        east |= landmask.is_land(lat, -180.0 + (k + 0.5) / 120.0)
    candidates = np.flatnonzero(west & ~east & (np.abs(lat) < 75))
    assert candidates.size
    phi = lat[candidates[0]]
    lon = -180.0 + 1.5 / 120.0
    reach_km = float(geodesy.inverse(lon, phi, 180.0 - 0.5 / 120.0, phi).distance_m) / 1e3
    assert not landmask.land_within(phi, lon, 0.2)  # its own (sea) cell only
    assert landmask.land_within(phi, lon, reach_km)
    assert landmask.land_within(phi, lon + 360.0, reach_km)
    assert landmask.land_within(phi, lon - 360.0, reach_km)


def test_land_within_rejects_bad_radius(bits):
    with pytest.raises(ValueError, match="radius_km"):
        landmask.land_within(0.0, 0.0, -1.0)
    with pytest.raises(ValueError, match="radius_km"):
        landmask.land_within(0.0, 0.0, float("nan"))
    assert landmask.land_within([np.nan], [0.0], 5.0).tolist() == [False]


def test_cache_dir_precedence(monkeypatch, tmp_path):
    monkeypatch.setenv("DRIFTLOOP_CACHE_DIR", str(tmp_path / "explicit"))
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert landmask.cache_dir() == tmp_path / "explicit"
    monkeypatch.delenv("DRIFTLOOP_CACHE_DIR")
    assert landmask.cache_dir() == tmp_path / "xdg" / "driftloop"
    monkeypatch.delenv("XDG_CACHE_HOME")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert landmask.cache_dir() == tmp_path / "home" / ".cache" / "driftloop"


def test_cache_is_written_atomically_and_memory_mapped(bits, monkeypatch, tmp_path):
    cache = tmp_path / "cache"
    monkeypatch.setenv("DRIFTLOOP_CACHE_DIR", str(cache))
    monkeypatch.setattr(landmask, "_bits", None)
    monkeypatch.setattr(landmask, "_block_table", None)
    built = landmask.land_bits()
    files = os.listdir(cache)
    assert len(files) == 1 and files[0].endswith(".npy")  # no temporary file left
    assert isinstance(built, np.memmap)
    np.testing.assert_array_equal(built, bits)
    monkeypatch.setattr(landmask, "_bits", None)
    again = landmask.land_bits()  # read back from the cache this time
    assert isinstance(again, np.memmap)
    assert os.path.samefile(again.filename, cache / files[0])


def test_unwritable_cache_keeps_mask_in_memory(bits, monkeypatch, tmp_path):
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("a file where the cache folder should be")
    monkeypatch.setenv("DRIFTLOOP_CACHE_DIR", str(blocker / "cache"))
    monkeypatch.setattr(landmask, "_bits", None)
    monkeypatch.setattr(landmask, "_block_table", None)
    in_memory = landmask.land_bits()
    assert not isinstance(in_memory, np.memmap)
    assert in_memory[10800].tobytes() == bits[10800].tobytes()
    assert landmask.is_land(*LAND["central Paris"])


def _cells_within(lat: float, lon: float, radius_km: float) -> tuple[np.ndarray, np.ndarray]:
    """Centres of the mask cells whose centre lies within ``radius_km`` (geodesic)."""
    step = 1.0 / 120.0
    half_rows = int(radius_km / 0.9) + 2
    half_cols = int(radius_km / (0.9 * np.cos(np.radians(lat)))) + 2
    r0 = int(np.floor((90.0 - lat) * 120))
    c0 = int(np.floor((lon + 180.0) * 120))
    rows = np.arange(r0 - half_rows, r0 + half_rows + 1)
    cols = np.arange(c0 - half_cols, c0 + half_cols + 1)
    clat = 90.0 - (rows + 0.5) * step
    clon = -180.0 + (cols + 0.5) * step
    glat, glon = np.meshgrid(clat, clon, indexing="ij")
    d = geodesy.inverse(lon, lat, glon, glat).distance_m
    keep = d <= radius_km * 1e3
    return glat[keep], glon[keep]
