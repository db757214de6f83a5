"""Self-contained HTML report of a driftloop run.

:func:`build_report` reads only the files of a run folder (``fixes.csv``,
``resampled.csv``, ``loops.csv``, ``spectra.csv``, ``summary.json``) and
writes ``report.html`` next to them, atomically.  The file needs nothing
else: figures are embedded as base64 PNG, the style sheet and the few lines
of script that sort the event table are inline, and there are no links to
fonts, tiles or scripts elsewhere.  Scalograms are recomputed from
``resampled.csv`` one segment at a time.
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
import warnings
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

import pandas as pd
from matplotlib.figure import Figure

from driftloop.io.writers import atomic_open
from driftloop.notices import CAUTION
from driftloop.report import figures as fg

__all__ = ["CAUTION", "build_report", "figure_to_data_uri", "render_report"]

_KINDS = ("inertial", "eddy", "tidal", "other")
_FLAGS = (("pass", 1), ("suspect", 3), ("fail", 4), ("missing", 9))

_STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:0;color:#1a1a1a;
background:#fafafa;line-height:1.4}
header{background:#0b3954;color:#fff;padding:14px 24px}
header h1{margin:0;font-size:1.5em}
header p{margin:4px 0 0;opacity:.85;font-size:.9em}
main{max-width:1180px;margin:0 auto;padding:8px 24px 40px}
section{background:#fff;border:1px solid #ddd;border-radius:6px;padding:10px 18px;margin:16px 0}
h2{font-size:1.2em;border-bottom:2px solid #0072B2;padding-bottom:3px}
h3{font-size:1.05em;margin-top:1.4em}
.caution{border-left:6px solid #D55E00;background:#fff4ec;padding:10px 14px;margin:16px 0;
font-weight:600}
table{border-collapse:collapse;font-size:.82em;margin:6px 0}
th,td{border:1px solid #ccc;padding:3px 7px;text-align:right}
td{white-space:nowrap}
th{background:#e9f1f7}
td.t,th.t{text-align:left}
table.sortable th{cursor:pointer;user-select:none}
table.sortable th[aria-sort=ascending]::after{content:" \\25B2"}
table.sortable th[aria-sort=descending]::after{content:" \\25BC"}
.scroll{overflow-x:auto;max-height:520px;overflow-y:auto}
figure{margin:10px 0}
figure img{max-width:100%;height:auto;border:1px solid #eee}
figcaption{font-size:.85em;color:#444}
.kv td{text-align:left}
.glance{display:flex;flex-wrap:wrap;gap:18px;align-items:flex-start}
.glance-map{flex:1 1 520px;min-width:320px}
.ok{color:#009E73;font-weight:600}.bad{color:#D55E00;font-weight:600}
"""

# Sort the rows of every table.sortable by the clicked column: numbers when
# both cells parse as numbers (data-v holds the raw value), text otherwise.
_SCRIPT = """
document.querySelectorAll("table.sortable").forEach(function(t){
  t.querySelectorAll("th").forEach(function(th,i){
    th.addEventListener("click",function(){
      var asc=th.getAttribute("aria-sort")!=="ascending";
      t.querySelectorAll("th").forEach(function(h){h.removeAttribute("aria-sort");});
      th.setAttribute("aria-sort",asc?"ascending":"descending");
      var b=t.tBodies[0],rows=Array.prototype.slice.call(b.rows);
      function key(r){var c=r.cells[i];return c.getAttribute("data-v")||c.textContent;}
      rows.sort(function(a,c){
        var x=key(a),y=key(c),nx=parseFloat(x),ny=parseFloat(y);
        var r=(!isNaN(nx)&&!isNaN(ny))?nx-ny:x.localeCompare(y);
        return asc?r:-r;});
      rows.forEach(function(r){b.appendChild(r);});
    });
  });
});
"""


def _e(value: object) -> str:
    """HTML-escape a value."""
    return html.escape("" if value is None else str(value), quote=True)


def _fmt(value: object, digits: int = 2) -> str:
    """Format a number compactly (blank for NaN / None)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:d}"
    if isinstance(value, float):
        if not math.isfinite(value):
            return ""
        return f"{value:.{digits}f}"
    return str(value)


def figure_to_data_uri(fig: Figure, dpi: int = 90) -> str:
    """Render a figure to a ``data:image/png;base64`` URI.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    dpi : int, optional
        Resolution.

    Returns
    -------
    str
        The data URI.
    """
    buf = io.BytesIO()
    with warnings.catch_warnings():
        # ids may hold characters the bundled font lacks; matplotlib draws a box
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .*missing from font",
                                category=UserWarning)
        fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": "driftloop"})
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _figure(fig: Figure, alt: str, caption: str, dpi: int) -> str:
    uri = figure_to_data_uri(fig, dpi)
    fig.clear()
    return (f'<figure><img src="{uri}" alt="{_e(alt)}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _table(header: Iterable[str], rows: Iterable[Iterable[object]], *, cls: str = "",
           text_cols: int = 1, table_id: str = "",
           digits: Sequence[int] | None = None) -> str:
    """HTML table; the first ``text_cols`` columns are left-aligned text.

    ``digits`` gives the decimals of each column's numbers (default 2).
    """
    head = "".join(f'<th class="t">{_e(h)}</th>' if i < text_cols else f"<th>{_e(h)}</th>"
                   for i, h in enumerate(header))
    body = []
    for row in rows:
        cells = []
        for i, v in enumerate(row):
            raw = "" if isinstance(v, str) or v is None else f' data-v="{_e(v)}"'
            klass = ' class="t"' if i < text_cols else ""
            places = digits[i] if digits is not None and i < len(digits) else 2
            cells.append(f"<td{klass}{raw}>{_e(_fmt(v, places))}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    attrs = (f' class="{cls}"' if cls else "") + (f' id="{table_id}"' if table_id else "")
    return (f"<table{attrs}><thead><tr>{head}</tr></thead><tbody>"
            + "".join(body) + "</tbody></table>")


def _flatten(prefix: str, value: object) -> list[tuple[str, str]]:
    if isinstance(value, Mapping):
        out: list[tuple[str, str]] = []
        for k, v in value.items():
            out += _flatten(f"{prefix}.{k}" if prefix else str(k), v)
        return out
    return [(prefix, json.dumps(value) if not isinstance(value, str) else value)]


def _release_section(summary: dict, fixes: pd.DataFrame, map_html: str = "") -> str:
    rel = summary.get("release", {})
    by_flag = rel.get("by_flag", {})
    n = int(rel.get("fixes", len(fixes)))
    lost = by_flag.get("fail", 0) + by_flag.get("missing", 0)
    loss = 100.0 * lost / n if n else math.nan
    rows = [
        ("Drifters", int(rel.get("drifters", fixes["drifter_id"].nunique()))),
        ("Drifter-days", float(rel.get("drifter_days", math.nan))),
        ("Fixes (input rows)", n),
    ]
    rows += [(f"Fixes flagged {name} ({code})", int(by_flag.get(name, 0)))
             for name, code in _FLAGS]
    rows += [("Data loss (fail + missing), %", loss),
             ("First good fix (UTC)", str(rel.get("first_good_fix", ""))),
             ("Last good fix (UTC)", str(rel.get("last_good_fix", "")))]
    check = rel.get("inertial_peak_check") or {}
    if check:
        rows.append(("Inertial-peak check", f"{check.get('within_tolerance', 0)} of "
                     f"{check.get('drifters_checked', 0)} drifters within "
                     f"{100 * float(check.get('tolerance', 0)):.0f} %"))
    loops = summary.get("loops", {}).get("by_kind", {})
    rows += [(f"Events: {k}", int(loops.get(k, 0))) for k in _KINDS]
    reasons = rel.get("by_reason") or {}
    reason_table = _table(["QC reason", "fixes"], sorted(reasons.items())) if reasons else ""
    tables = _table(["Quantity", "Value"], rows, cls="kv") + reason_table
    return ("<section id='release'><h2>Release summary</h2><div class='glance'>"
            f"<div>{tables}</div>" + (f"<div class='glance-map'>{map_html}</div>" if map_html
                                      else "") + "</div></section>")


def _drifter_table(summary: dict, drifters: list[str]) -> str:
    entries = summary.get("drifters", {})
    rows = []
    for d in drifters:
        s = entries.get(d, {})
        flags = s.get("by_flag", {})
        gap = s.get("largest_gap") or {}
        ev = s.get("events", {})
        peak = s.get("inertial_peak") or {}
        if peak.get("checked"):
            check = (f"{'ok' if peak.get('within_tolerance') else 'off'}: peak "
                     f"{_fmt(peak.get('peak_cpd'))} vs f {_fmt(peak.get('inertial_cpd'))} cpd "
                     f"({peak.get('side', '')})")
        else:
            check = "not checked"
        rows.append([d, s.get("fixes"), *[flags.get(name, 0) for name, _ in _FLAGS],
                     s.get("duration_days"), gap.get("hours"),
                     *[ev.get(k, 0) for k in _KINDS], check])
    header = ["Drifter", "Fixes", "Pass", "Suspect", "Fail", "Missing", "Duration (d)",
              "Largest gap (h)", "Inertial", "Eddy", "Tidal", "Other", "Inertial-peak check"]
    return ("<section id='drifters'><h2>Drifters</h2><div class='scroll'>"
            + _table(header, rows, cls="sortable") + "</div></section>")


_EVENT_COLUMNS = [("event_id", "Event", 0), ("drifter_id", "Drifter", 0),
                  ("kind", "Kind", 0), ("spin", "Spin", 0), ("start", "Start (UTC)", 0),
                  ("end", "End (UTC)", 0), ("duration_h", "Duration (h)", 1),
                  ("cycles", "Cycles", 1), ("period_h", "Period (h)", 2),
                  ("inertial_period_h", "Inertial period (h)", 2),
                  ("period_ratio", "Period / inertial", 2), ("radius_km", "Radius (km)", 2),
                  ("speed_m_s", "Speed (m/s)", 3), ("lat", "Lat (deg N)", 3),
                  ("lon", "Lon (deg E)", 3), ("tide", "Tide", 0)]


def _events_section(loops: pd.DataFrame) -> str:
    cols = [c for c in _EVENT_COLUMNS if c[0] in loops.columns]
    rows_html = []
    for rec in loops.to_dict("records"):
        cells = []
        for name, _, digits in cols:
            v = rec.get(name)
            if isinstance(v, float) and digits:
                text = _fmt(v, digits)
                cells.append(f'<td data-v="{_e(v)}">{_e(text)}</td>')
            else:
                text = "" if v is None or (isinstance(v, float) and math.isnan(v)) else v
                cells.append(f'<td class="t">{_e(text)}</td>')
        rows_html.append("<tr>" + "".join(cells) + "</tr>")
    head = "".join(f'<th class="t">{_e(label)}</th>' if not d else f"<th>{_e(label)}</th>"
                   for _, label, d in cols)
    return ("<section id='events'><h2>Event catalogue</h2>"
            f"<p>{len(loops)} loop events (see docs/loops.md); click a column header to "
            "sort.</p><div class='scroll'>"
            f"<table class='sortable' id='event-table'><thead><tr>{head}</tr></thead><tbody>"
            + "".join(rows_html) + "</tbody></table></div></section>")


def _num(entry: Mapping | None, *keys: str) -> float | None:
    """``entry[k0][k1]...`` as a float, or None when any level is missing."""
    value: object = entry
    for key in keys:
        if not isinstance(value, Mapping):
            return None
        value = value.get(key)
    return None if value is None else float(value)


def _interval(entry: Mapping | None, key: str, scale: float = 1.0, digits: int = 0) -> str:
    lo, hi = ((entry or {}).get(key) or [None, None])[:2]
    if lo is None or hi is None:
        return ""
    return f"{lo * scale:.{digits}f}–{hi * scale:.{digits}f}"


def _drift_row(name: str, drift: Mapping | None) -> list[object]:
    drift = drift or {}
    vec = (drift.get("dispersion") or {}).get("vector") or {}
    speed = drift.get("drift_speed_m_s") or {}
    t_l = _num(vec, "integral_time_s")
    decays = drift.get("inertial_decay_times_h") or []
    return [
        name, _num(drift, "mean_drift_speed_m_s"), _num(drift, "mean_drift_direction_deg"),
        _num(speed, "median"),
        (f"{speed['p10']:.3f}–{speed['p90']:.3f}"
         if speed.get("p10") is not None and speed.get("p90") is not None else ""),
        _num(drift, "inertial_fraction"), _num(drift, "inertial_speed_median_m_s"),
        _num(drift, "inertial_decay_time_median_h"), len(decays),
        None if _num(vec, "variance_m2_s2") is None else _num(vec, "variance_m2_s2") * 1e4,
        None if t_l is None else t_l / 3600.0,
        _interval(vec, "integral_time_ci_s", 1 / 3600.0, 1),
        _num(vec, "diffusivity_m2_s"), _interval(vec, "diffusivity_ci_m2_s"),
    ]


def _drift_section(summary: dict, resampled: pd.DataFrame, dpi: int) -> str:
    drifters = summary.get("drifters", {})
    rows = [_drift_row(d, drifters[d].get("drift")) for d in sorted(drifters)
            if drifters[d].get("drift")]
    if summary.get("drift"):
        rows.append(_drift_row("(release)", summary["drift"]))
    if not rows:
        return ("<section id='drift'><h2>Drift and dispersion</h2>"
                "<p>No drift estimate (no resampled segment).</p></section>")
    header = ["Drifter", "Mean drift (m/s)", "Towards (deg)", "Drift speed median (m/s)",
              "Drift speed p10–p90 (m/s)", "Inertial share", "Inertial speed median (m/s)",
              "Decay time median (h)", "Decay times", "Variance (cm²/s²)",
              "T_L (h)", "T_L 95 % (h)", "K (m²/s)", "K 95 % (m²/s)"]
    method = ((summary.get("drift") or {}).get("dispersion") or {}).get("vector", {})
    note = ("<p>Drift: the resampled velocity less its ridge-reconstructed oscillations "
            "(inertial, tidal, eddy). Direction is where the mean drift goes, clockwise from "
            "north. Inertial share: fraction of the record with an inertial ridge. Decay time: "
            "e-folding time of each inertial event's amplitude. Dispersion of the drift "
            "velocity (both components): variance, integral time scale T_L (autocorrelation "
            f"integrated to its {_e(_limit_name(method.get('method')))}) and diffusivity "
            "K = variance × T_L (Taylor 1921), with block-bootstrap 95 % intervals where "
            "the record holds enough independent blocks. See docs/drift-calibration.md.</p>")
    figure = _figure(fg.drift_dispersion(summary, resampled), "drift and dispersion",
                     "Mean drift vector of each drifter from its mean position, and "
                     "single-particle diffusivity per drifter and for the release.", dpi)
    return ("<section id='drift'><h2>Drift and dispersion</h2>" + note
            + "<div class='scroll'>" + _table(header, rows, cls="sortable", table_id="drift-table",
                                             digits=[0, 3, 0, 3, 0, 2, 3, 0, 0, 1, 1, 0, 0, 0])
            + "</div>" + figure + "</section>")


def _limit_name(method: object) -> str:
    return {"first_zero": "first zero crossing"}.get(str(method), str(method or "limit"))


def _clock(run: Mapping | None) -> str:
    """Say when the run was written and how long it took (from ``provenance.json``)."""
    if not run or not run.get("written_utc"):
        return ""
    text = f"Run written {_e(run['written_utc'])}"
    if run.get("run_seconds") is not None:
        stages = ", ".join(f"{_e(k)} {float(v):.1f} s"
                           for k, v in (run.get("stage_seconds") or {}).items())
        text += f"; analysis took {float(run['run_seconds']):.1f} s"
        text += f" ({stages})" if stages else ""
    return f"<p id='run-clock'>{text}.</p>"


def _parameters_section(summary: dict, run: Mapping | None = None) -> str:
    prov = summary.get("provenance", {})
    software = prov.get("software", "driftloop")
    version = prov.get("version", "unknown")
    rows = _flatten("", prov.get("parameters", {}))
    inputs = summary.get("inputs") or []
    inp = _table(["Input file", "rows"], [(i.get("file"), i.get("rows")) for i in inputs]) \
        if inputs else ""
    return ("<section id='parameters'><h2>Parameters and version</h2>"
            f"<p>Produced by <b>{_e(software)}</b> version <b id='version'>{_e(version)}"
            "</b>.</p>" + _clock(run) + inp
            + "<div class='scroll'>" + _table(["Parameter", "Value"], rows, cls="kv", text_cols=2)
            + "</div></section>")


def render_report(fixes: pd.DataFrame, resampled: pd.DataFrame, loops: pd.DataFrame,
                  spectra: pd.DataFrame, summary: dict, *, title: str = "driftloop report",
                  dpi: int = 90, run: Mapping | None = None) -> str:
    """Render the report of one run to an HTML string.

    Parameters
    ----------
    fixes, resampled, loops, spectra : pandas.DataFrame
        The run's tables (``fixes.csv`` ...).
    summary : dict
        ``summary.json``.
    title : str, optional
        Page title.
    dpi : int, optional
        Resolution of the embedded PNG figures.
    run : mapping, optional
        ``provenance.json`` of the run; its clock (when written, how long
        each stage took) is shown with the parameters.

    Returns
    -------
    str
        A complete, self-contained HTML document.
    """
    drifters = sorted(set(map(str, fixes["drifter_id"].dropna()))
                      | set(map(str, resampled["drifter_id"].dropna()))
                      | set(summary.get("drifters", {})))
    params = summary.get("provenance", {}).get("parameters", {})
    wavelet = fg.wavelet_config_from(params)
    map_html = ""
    if len(resampled):
        map_html = _figure(fg.track_map(resampled, fixes, loops), "map of all tracks",
                           "Resampled tracks (grey), loop events by class, QC-failed "
                           "fixes (crosses); plain longitude/latitude axes scaled by "
                           "1/cos(mean latitude).", dpi)
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width, initial-scale=1'>",
        f"<title>{_e(title)}</title><style>{_STYLE}</style></head><body>",
        f"<header><h1>{_e(title)}</h1><p>{len(drifters)} drifters, {len(loops)} loop events"
        f" &middot; driftloop {_e(summary.get('provenance', {}).get('version', ''))}</p>"
        "</header><main>",
        f"<div class='caution' id='caution'><p>{_e(CAUTION)}</p></div>",
        "<nav><a href='#release'>Release</a> &middot; <a href='#drifters'>Drifters</a> "
        "&middot; <a href='#events'>Events</a> &middot; <a href='#drift'>Drift</a> "
        "&middot; <a href='#figures'>Figures</a> "
        "&middot; <a href='#per-drifter'>Per drifter</a> &middot; "
        "<a href='#parameters'>Parameters</a></nav>",
        _release_section(summary, fixes, map_html),
        _drifter_table(summary, drifters),
        _events_section(loops),
        _drift_section(summary, resampled, dpi),
        "<section id='figures'><h2>Release figures</h2>",
    ]
    parts.append(_figure(fg.period_latitude(loops), "event period against latitude",
                         "Loop event periods against latitude; the line is the inertial "
                         "period pi/(Omega |sin(latitude)|) in both hemispheres.", dpi))
    if (spectra["drifter_id"].astype(str) == "(release)").any():
        lat = fg.drifter_latitude(resampled, "(release)") if len(resampled) else math.nan
        parts.append(_figure(fg.rotary_spectrum(spectra, "(release)", lat),
                             "release rotary spectrum",
                             "Rotary spectrum of the release; the dotted line marks the "
                             "inertial frequency at the mean latitude.", dpi))
    parts.append("</section><section id='per-drifter'><h2>Per drifter</h2>")
    for d in drifters:
        anchor = "d-" + "".join(ch if ch.isalnum() else "-" for ch in d)
        parts.append(f"<h3 id='{_e(anchor)}'>{_e(d)}</h3>")
        has_track = (resampled["drifter_id"].astype(str) == d).any()
        if has_track:
            parts.append(_figure(fg.scalogram(resampled, d, wavelet), f"scalogram of {d}",
                                 "|W| for both rotary senses (recomputed per segment from "
                                 "resampled.csv); ridges, local inertial period (dashed) and "
                                 "cone of influence (pale).", dpi))
        if (spectra["drifter_id"].astype(str) == d).any():
            lat = fg.drifter_latitude(resampled, d) if has_track else math.nan
            parts.append(_figure(fg.rotary_spectrum(spectra, d, lat),
                                 f"rotary spectrum of {d}", "Rotary spectrum.", dpi))
        parts.append(_figure(fg.qc_timeline(fixes, d, resampled if has_track else None),
                             f"QC timeline of {d}",
                             "QC flag of every fix over time; gaps shaded.", dpi))
    parts += ["</section>", _parameters_section(summary, run), "</main>",
              f"<script>{_SCRIPT}</script></body></html>"]
    return "\n".join(parts)


def _read_csv(path: Path, **kwargs: object) -> pd.DataFrame:
    return pd.read_csv(path, keep_default_na=True, **kwargs)


def build_report(run_dir: str | Path, *, dpi: int = 90) -> Path:
    """Write ``run_dir/report.html`` from the files of a run folder.

    Parameters
    ----------
    run_dir : str or Path
        Output folder of ``driftloop analyse`` holding fixes.csv,
        resampled.csv, loops.csv, spectra.csv and summary.json.
    dpi : int, optional
        Resolution of the embedded figures.

    Returns
    -------
    Path
        The report written (atomically: temporary file + :func:`os.replace`).

    Raises
    ------
    FileNotFoundError
        If one of the input files is missing.
    """
    run_dir = Path(run_dir)
    missing = [n for n in ("fixes.csv", "resampled.csv", "loops.csv", "spectra.csv",
                           "summary.json") if not (run_dir / n).is_file()]
    if missing:
        raise FileNotFoundError(f"{run_dir}: missing {', '.join(missing)}")
    str_id = {"drifter_id": str}
    fixes = _read_csv(run_dir / "fixes.csv", dtype=str_id)
    resampled = _read_csv(run_dir / "resampled.csv", dtype=str_id)
    loops = _read_csv(run_dir / "loops.csv", dtype={"drifter_id": str, "event_id": str,
                                                     "tide": str})
    spectra = _read_csv(run_dir / "spectra.csv", dtype=str_id)
    with open(run_dir / "summary.json", encoding="utf-8") as fh:
        summary = json.load(fh)
    run = None
    if (run_dir / "provenance.json").is_file():
        with open(run_dir / "provenance.json", encoding="utf-8") as fh:
            run = json.load(fh)
    text = render_report(fixes, resampled, loops, spectra, summary,
                         title=f"driftloop report: {run_dir.name}", dpi=dpi, run=run)
    out = run_dir / "report.html"
    with atomic_open(out) as fh:
        fh.write(text)
    return out
