"""The HTML report and its figures, built from a real run of the bundled sample."""

from __future__ import annotations

import json
import math
import shutil
from html.parser import HTMLParser
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

from driftloop import cli  # noqa: E402
from driftloop.constants import EARTH_ROTATION_RATE_RAD_S  # noqa: E402
from driftloop.report import figures as fg  # noqa: E402
from driftloop.report.html import CAUTION, build_report  # noqa: E402

SAMPLE = Path(__file__).resolve().parent.parent / "sample_tracks" / "orravane_a.csv"
CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("report_run")
    rc = cli.main(["analyse", str(SAMPLE), "--out", str(out), "--no-land-test", "--quiet"])
    assert rc in (0, None)
    return out


@pytest.fixture(scope="module")
def tables(run_dir):
    ids = {"drifter_id": str}
    return {
        "fixes": pd.read_csv(run_dir / "fixes.csv", dtype=ids),
        "resampled": pd.read_csv(run_dir / "resampled.csv", dtype=ids),
        "loops": pd.read_csv(run_dir / "loops.csv", dtype=ids),
        "spectra": pd.read_csv(run_dir / "spectra.csv", dtype=ids),
        "summary": json.loads((run_dir / "summary.json").read_text(encoding="utf-8")),
    }


@pytest.fixture(scope="module")
def report(run_dir) -> Path:
    return build_report(run_dir)


class _Collector(HTMLParser):
    """Collect tags with attributes, table rows and the visible text."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []
        self.table_stack: list[str] = []
        self.in_tbody = False
        self.rows: dict[str, int] = {}

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "table":
            self.table_stack.append(a.get("id") or "")
        elif tag == "tbody":
            self.in_tbody = True
        elif tag == "tr" and self.in_tbody and self.table_stack:
            key = self.table_stack[-1]
            self.rows[key] = self.rows.get(key, 0) + 1

    def handle_endtag(self, tag):
        if tag == "table" and self.table_stack:
            self.table_stack.pop()
        elif tag == "tbody":
            self.in_tbody = False

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def parsed(report) -> _Collector:
    p = _Collector()
    p.feed(report.read_text(encoding="utf-8"))
    p.close()
    return p


def test_report_is_self_contained(parsed, report):
    for tag, attrs in parsed.tags:
        for name in ("src", "href", "data", "srcset", "action", "poster"):
            value = (attrs.get(name) or "").strip()
            if not value:
                continue
            if tag == "img" and name == "src":
                assert value.startswith("data:image/"), value[:60]
            else:
                assert value.startswith("#"), f"<{tag} {name}={value[:60]!r}>"
        if tag in ("script", "link", "iframe", "object", "embed"):
            assert "src" not in attrs and "href" not in attrs, (tag, attrs)
    text = report.read_text(encoding="utf-8")
    assert "http://" not in text and "https://" not in text
    assert "@import" not in text and "url(" not in text
    imgs = [a for t, a in parsed.tags if t == "img"]
    assert len(imgs) >= 3
    assert (report.parent / "report.html") == report


def test_report_contents(parsed, tables):
    text = " ".join(parsed.text)
    assert CAUTION in text
    assert "not an operational search-and-rescue (SAR) system" in text
    assert "licensed practice" in text
    assert text.count("not an operational search-and-rescue") == 1  # said once, not twice
    drifters = set(tables["fixes"]["drifter_id"].astype(str))
    assert drifters
    for d in drifters:
        assert d in text
    prov = tables["summary"]["provenance"]
    assert prov["version"] in text
    assert "wavelet.beta" in text and "qc.speed_fail_m_s" in text
    assert parsed.rows["event-table"] == len(tables["loops"])
    for event in tables["loops"]["event_id"].astype(str):
        assert event in text


def test_report_is_written_atomically(run_dir, report):
    assert report.read_text(encoding="utf-8").rstrip().endswith("</html>")
    assert not [p for p in run_dir.iterdir() if p.name.startswith(".report.html.")]


def test_build_report_needs_the_run_files(tmp_path):
    with pytest.raises(FileNotFoundError, match="summary.json"):
        build_report(tmp_path)


def _labels(fig):
    return [(ax.get_xlabel(), ax.get_ylabel()) for ax in fig.axes]


def test_map_aspect_and_labels(tables):
    fig = fg.track_map(tables["resampled"], tables["fixes"], tables["loops"])
    ax = fig.axes[0]
    expected = 1.0 / math.cos(math.radians(float(tables["resampled"]["lat"].mean())))
    assert ax.get_aspect() == pytest.approx(expected, rel=0.01)
    assert "(degrees east)" in ax.get_xlabel() and "(degrees north)" in ax.get_ylabel()
    assert ax.get_legend() is not None
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any(t.startswith("inertial") for t in legend)
    assert any("QC fail" in t for t in legend)


def test_period_latitude_curve(tables):
    fig = fg.period_latitude(tables["loops"])
    ax = fig.axes[0]
    (line,) = [ln for ln in ax.get_lines() if ln.get_label() == "inertial period"]
    x, y = (np.asarray(v, dtype=float) for v in line.get_data())
    t30 = math.pi / (EARTH_ROTATION_RATE_RAD_S * math.sin(math.radians(30.0))) / 3600.0
    assert t30 == pytest.approx(23.934, abs=5e-4)
    north = x > 0
    assert np.interp(30.0, x[north], y[north]) == pytest.approx(t30, rel=1e-4)
    south = x < 0
    assert np.interp(-30.0, x[south], y[south]) == pytest.approx(t30, rel=1e-4)
    assert ax.get_xlabel() == "Latitude (degrees north)" and ax.get_ylabel() == "Period (h)"
    assert ax.get_yscale() == "log"


def test_spectrum_figure(tables):
    fig = fg.rotary_spectrum(tables["spectra"], "(release)", 43.5)
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert "(cycles per day, cpd)" in ax.get_xlabel()
    assert "(m/s)$^2$/cpd" in ax.get_ylabel()
    f_cpd = 24.0 / float(fg.inertial_period_h(43.5))
    assert any(np.allclose(ln.get_xdata(), f_cpd) for ln in ax.get_lines())
    assert "Period (h)" in [c.get_xlabel() for c in ax.child_axes]


def test_scalogram_and_qc_figures(tables):
    drifter = sorted(tables["resampled"]["drifter_id"].unique())[0]
    config = fg.wavelet_config_from(tables["summary"]["provenance"]["parameters"])
    fig = fg.scalogram(tables["resampled"], drifter, config)
    panels = [a for a in fig.axes if a.get_ylabel() == "Period (h)"]
    assert len(panels) == 2
    assert all(a.get_yscale() == "log" for a in panels)
    assert panels[1].get_xlabel() == "Time (UTC)"
    assert any(a.get_ylabel() == "|W| (m/s)" for a in fig.axes)
    labels = {ln.get_label() for a in panels for ln in a.get_lines()}
    assert {"local inertial period", "ridge"} <= labels
    qc = fg.qc_timeline(tables["fixes"], drifter, tables["resampled"])
    assert qc.axes[0].get_xlabel() == "Time (UTC)" and qc.axes[0].get_ylabel() == "QC flag"


@pytest.mark.parametrize("suffix", [".png", ".svg"])
def test_save_figure_atomic(tmp_path, tables, suffix):
    fig = fg.period_latitude(tables["loops"])
    out = fg.save_figure(fig, tmp_path / f"pl{suffix}", dpi=60)
    assert out.is_file() and out.stat().st_size > 1000
    assert [p.name for p in tmp_path.iterdir()] == [out.name]
    with pytest.raises(ValueError, match="png or .svg"):
        fg.save_figure(fig, tmp_path / "pl.pdf")


def _circle_track(lat: float, days: float = 20.0, speed: float = 0.2) -> pd.DataFrame:
    """Hourly resampled track of a pure clockwise inertial circle at one latitude.

    The Coriolis parameter comes from TEOS-10's ``gsw.f`` (an outside
    reference), so the expected period 2 pi / f does not use driftloop code.
    """
    import gsw

    f = float(gsw.f(lat))
    t = np.arange(int(days * 24)) * 3600.0
    z = speed * np.exp(-1j * f * t)  # clockwise in the north (f > 0)
    x = np.cumsum(z) * 3600.0
    m_per_deg = 111_320.0
    times = pd.Timestamp("2025-03-01T00:00:00Z") + pd.to_timedelta(t, unit="s")
    return pd.DataFrame({
        "drifter_id": "CIRCLE-1", "segment": 0,
        "time": times.strftime("%Y-%m-%dT%H:%M:%SZ"),
        "lat": lat + x.imag / m_per_deg,
        "lon": -40.0 + x.real / (m_per_deg * math.cos(math.radians(lat))),
        "u": z.real, "v": z.imag, "sigma_m": 10.0, "in_gap": False, "gap_h": 0.0,
    })


def test_scalogram_ridge_sits_at_the_inertial_period_row():
    import gsw

    lat = 45.0
    period_h = 2 * math.pi / float(gsw.f(lat)) / 3600.0  # TEOS-10 Coriolis parameter
    assert period_h == pytest.approx(16.93, abs=0.01)  # from memory: 16.9 h at 45 N
    fig = fg.scalogram(_circle_track(lat), "CIRCLE-1")
    top, bottom = [a for a in fig.axes if a.get_ylabel() == "Period (h)"]
    ridges = [ln for ln in bottom.get_lines() if ln.get_label() in ("ridge", "_child1")
              or ln.get_color() == fg.PALETTE["vermillion"]]
    assert ridges, "no ridge drawn in the clockwise panel"
    y = np.concatenate([np.asarray(ln.get_ydata(), dtype=float) for ln in ridges])
    assert np.median(y) == pytest.approx(period_h, rel=0.01)
    assert not [ln for ln in top.get_lines() if ln.get_color() == fg.PALETTE["vermillion"]]
    # the brightest row of the clockwise image is the inertial period
    (mesh,) = bottom.collections[:1]
    amp = np.asarray(mesh.get_array()).reshape(-1, len(_circle_track(lat)))
    periods = np.asarray(mesh.get_coordinates())[:, 0, 1]
    middle = amp[:, amp.shape[1] // 2]
    brightest = periods[int(np.argmax(middle))]
    step = abs(math.log(periods[1] / periods[0]))  # log-spaced period rows
    # one of the two rows that bracket the inertial period
    assert abs(math.log(brightest / period_h)) <= step * 1.01
    # clockwise motion only in the clockwise transform (away from the record's ends)
    top_amp = np.asarray(top.collections[0].get_array()).reshape(amp.shape)
    assert float(top_amp[:, amp.shape[1] // 2].max()) < 0.05 * float(middle.max())


def test_qc_timeline_draws_every_fix_in_its_flag_row(tables):
    fixes = tables["fixes"]
    drifter = str(fixes.loc[fixes["qc_flag"] == 4, "drifter_id"].iloc[0])
    fig = fg.qc_timeline(fixes, drifter, tables["resampled"])
    ax = fig.axes[0]
    mine = fixes[fixes["drifter_id"].astype(str) == drifter]
    legend = {t.get_text() for t in ax.get_legend().get_texts()}
    for code, (name, _) in fg.FLAG_COLOURS.items():
        assert f"{name} ({int((mine['qc_flag'] == code).sum())})" in legend


def test_drift_figure_arrows_point_where_the_drift_goes(tables):
    summary = tables["summary"]
    fig = fg.drift_dispersion(summary, tables["resampled"])
    ax_map, ax_k = fig.axes[:2]
    arrows = [a for a in ax_map.texts if getattr(a, "arrow_patch", None) is not None
              and a.get_text() == ""]
    drifters = sorted(summary["drifters"])
    assert len(arrows) == len(drifters) + 1  # one per drifter and the 0.1 m/s key
    aspect = fg.map_aspect(tables["resampled"].groupby("drifter_id")["lat"].mean().to_numpy())
    for arrow, d in zip(arrows, drifters, strict=False):
        (x1, y1), (x0, y0) = arrow.xy, arrow.xyann
        # compass bearing, clockwise from north (common practice), on an equal-distance frame
        bearing = math.degrees(math.atan2((x1 - x0) * aspect, y1 - y0)) % 360.0
        expected = summary["drifters"][d]["drift"]["mean_drift_direction_deg"]
        assert (bearing - expected + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=0.5)
    k = [ln for ln in ax_k.get_lines() if len(ln.get_xdata()) == 1]
    values = sorted(float(ln.get_ydata()[0]) for ln in k)
    expected_k = sorted(summary["drifters"][d]["drift"]["dispersion"]["vector"]
                        ["diffusivity_m2_s"] for d in drifters)
    assert values == pytest.approx(expected_k, rel=1e-9)


def test_report_has_the_drift_table_and_the_run_clock(parsed, tables, run_dir):
    summary = tables["summary"]
    assert parsed.rows["drift-table"] == len(summary["drifters"]) + 1  # and the release
    text = " ".join(parsed.text)
    k = summary["drift"]["dispersion"]["vector"]["diffusivity_m2_s"]
    assert f"{k:.0f}" in text
    assert "Taylor 1921" in text
    run = json.loads((run_dir / "provenance.json").read_text(encoding="utf-8"))
    assert f"Run written {run['written_utc']}" in text
    assert f"analysis took {run['run_seconds']:.1f} s" in text


def _chromium_driver(tmp_path):
    webdriver = pytest.importorskip("selenium.webdriver")
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for arg in ("--headless", "--no-sandbox", "--disable-gpu",
                "--disable-background-networking", "--no-first-run",
                "--disable-component-update", "--disable-sync", "--window-size=1280,2000",
                f"--user-data-dir={tmp_path / 'profile'}"):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service(executable_path=str(CHROMEDRIVER)), options=options)


@pytest.mark.skipif(not (CHROMIUM.exists() and CHROMEDRIVER.exists()),
                    reason="needs /usr/bin/chromium and /usr/bin/chromedriver "
                           "(apt-get install -y chromium chromium-driver)")
def test_report_renders_in_a_real_browser(report, run_dir, tmp_path, monkeypatch):
    monkeypatch.setenv("SE_OFFLINE", "true")  # selenium must not look for drivers online
    driver = _chromium_driver(tmp_path)
    try:
        driver.set_page_load_timeout(120)
        driver.get(report.resolve().as_uri())
        assert driver.title == f"driftloop report: {run_dir.name}"
        images = driver.execute_script(
            "return Array.from(document.images).map("
            "function(i){return [i.complete, i.naturalWidth, i.naturalHeight];});")
        assert len(images) >= 3
        assert all(done and w > 0 and h > 0 for done, w, h in images), images
        # the event table sorts when its period header is clicked
        header = driver.find_element("xpath", "//table[@id='event-table']//th[.='Period (h)']")
        header.click()
        column = [h.text for h in driver.find_elements(
            "xpath", "//table[@id='event-table']//th")].index("Period (h)") + 1
        periods = [float(c.get_attribute("data-v")) for c in driver.find_elements(
            "xpath", f"//table[@id='event-table']/tbody/tr/td[{column}]")]
        assert len(periods) > 1 and periods == sorted(periods)
        errors = [e for e in driver.get_log("browser") if e.get("level") == "SEVERE"]
        assert not errors, errors
        shot = tmp_path / "shot.png"
        assert driver.save_screenshot(str(shot))
    finally:
        driver.quit()
    import matplotlib.image as mpimg

    rgb = (np.asarray(mpimg.imread(shot))[..., :3] * 255).astype(np.uint8).reshape(-1, 3)
    assert len(np.unique(rgb[::7], axis=0)) > 200  # a rendered page, not a blank one
    shutil.rmtree(tmp_path / "profile", ignore_errors=True)
