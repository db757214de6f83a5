"""The HTML report and its figures, built from a real run of the bundled sample."""

from __future__ import annotations

import json
import math
import shutil
import subprocess
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
    assert "not an operational search-and-rescue system" in text
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


@pytest.mark.skipif(not CHROMIUM.exists(),
                    reason="needs /usr/bin/chromium (apt-get install -y chromium)")
def test_report_renders_in_a_real_browser(report, tmp_path):
    shot = tmp_path / "shot.png"
    cmd = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp_path / 'profile'}",
           f"--screenshot={shot}", "--window-size=1280,2000", report.resolve().as_uri()]
    subprocess.run(cmd, check=False, capture_output=True, timeout=120)
    assert shot.is_file() and shot.stat().st_size > 10_000
    import matplotlib.image as mpimg

    img = mpimg.imread(shot)
    rgb = (np.asarray(img)[..., :3] * 255).astype(np.uint8).reshape(-1, 3)
    colours = np.unique(rgb[:: 7], axis=0)
    assert len(colours) > 200, len(colours)
    shutil.rmtree(tmp_path / "profile", ignore_errors=True)
