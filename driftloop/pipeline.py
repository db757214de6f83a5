"""The analysis pipeline: the only module that knows the order of the stages.

Stages: read -> QC -> resample -> wavelet ridges and loop events -> rotary
spectra -> accounting -> writers.  Each drifter goes through QC on its own
(the tests never look across drifters), which keeps memory bounded by the
longest drifter and lets the stages run drifters in parallel.

``driftloop qc`` stops after QC; ``driftloop analyse`` runs every stage.

:func:`analyse` holds the release in memory as tables (for notebooks and
small releases); the command line runs the same stages drifter by drifter
with :func:`driftloop.streaming.run`, which writes byte-identical files
without holding the release (``docs/scaling.md``).
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from driftloop.config import Config, provenance
from driftloop.errors import InputError
from driftloop.io import FIX_COLUMNS, empty_fixes, read_file
from driftloop.io.writers import write_csv, write_json
from driftloop.qc import QC_COLUMNS, run_qc
from driftloop.summary import build_summary

__all__ = ["FIXES_CSV_COLUMNS", "Analysis", "analyse", "prepare_out_dir", "qc_fixes"]

#: Columns of ``fixes.csv``, in order.
FIXES_CSV_COLUMNS = (
    "source_file",
    "source_row",
    "drifter_id",
    "time",
    "lat",
    "lon",
    "qc_flag",
    "qc_reasons",
    "segment",
    "time_assumed_utc",
    "raw",
)

#: The file that marks a folder as a driftloop run (and holds run timestamps).
RUN_MARKER = "provenance.json"

#: Drifter count from which a progress bar is shown.
PROGRESS_MIN_DRIFTERS = 10


@dataclass
class Analysis:
    """Everything a run produced, as tables.

    Attributes
    ----------
    fixes : pandas.DataFrame
        Every input row with its QC flag, reasons and segment number, in
        input order (files sorted by name, rows in file order).
    summary : dict
        Accounting per drifter and for the release (``summary.json``).
    config : Config
        The configuration used.
    inputs : list of dict
        One entry per input file: its name and the number of rows read.
    track : pandas.DataFrame or None
        Resampled tracks (:data:`driftloop.resample.RESAMPLED_COLUMNS`);
        ``None`` when only QC ran.
    events : pandas.DataFrame or None
        Loop events (:data:`driftloop.loops.EVENT_COLUMNS`).
    spectra : pandas.DataFrame or None
        Rotary spectra per drifter and for the release
        (:func:`driftloop.spectra.rotary_spectra`).
    stage_seconds : dict of str to float
        Wall-clock time of each stage that ran (``read``, ``qc``, ...), in
        seconds; recorded in ``provenance.json`` only, so that every other
        output is the same on every run.
    """

    fixes: pd.DataFrame
    summary: dict
    config: Config
    inputs: list[dict] = field(default_factory=list)
    track: pd.DataFrame | None = None
    events: pd.DataFrame | None = None
    spectra: pd.DataFrame | None = None
    stage_seconds: dict[str, float] = field(default_factory=dict)

    @property
    def drifters(self) -> list[str]:
        """Drifter ids, sorted."""
        return sorted(self.summary["drifters"])

    def fixes_geo(self):
        """Return the flagged fixes as a GeoDataFrame of points (EPSG:4326).

        Returns
        -------
        geopandas.GeoDataFrame
            :attr:`fixes` with a point geometry per fix; fixes without a valid
            position (missing, unparseable or out of range) have no geometry.
        """
        import geopandas as gpd
        import numpy as np

        fixes = self.fixes
        valid = (
            fixes["lat"].between(-90.0, 90.0) & fixes["lon"].between(-180.0, 180.0)
        ).to_numpy()
        points = gpd.points_from_xy(
            np.where(valid, fixes["lon"], np.nan), np.where(valid, fixes["lat"], np.nan)
        )
        geometry = gpd.GeoSeries(points, index=fixes.index, crs="EPSG:4326")
        geometry[~valid] = None
        return gpd.GeoDataFrame(fixes.copy(), geometry=geometry, crs="EPSG:4326")

    def tables(self) -> dict[str, pd.DataFrame]:
        """Return the tables the GIS export takes: fixes, tracks and events.

        Returns
        -------
        dict of str to pandas.DataFrame
            Keys ``"fixes"`` and, after a full analysis, ``"tracks"`` and
            ``"events"``.
        """
        tables = {"fixes": self.fixes.loc[:, list(FIXES_CSV_COLUMNS)]}
        if self.track is not None:
            tables["tracks"] = self.track
        if self.events is not None:
            tables["events"] = self.events
        return tables

    def write(self, out_dir: str | Path, *, overwrite: bool = False,
              protect: Sequence[str | Path] = (),
              formats: Sequence[str] = ("geojson",)) -> list[Path]:
        """Write every output of the run into a folder, each file atomically.

        Parameters
        ----------
        out_dir : str or Path
            Output folder (created if needed).
        overwrite : bool
            Allow writing into a non-empty folder that is not a driftloop run.
        protect : sequence of path
            Files that must never be overwritten (the inputs).
        formats : sequence of str
            GIS formats of the layers: any of ``"geojson"``, ``"gpkg"``,
            ``"parquet"``; the CSV tables are always written.

        Returns
        -------
        list of Path
            The files written; ``provenance.json`` last.
        """
        out = prepare_out_dir(out_dir, overwrite=overwrite)
        targets = [out / name for name in OUTPUT_NAMES]
        _refuse_overwriting_inputs(targets, protect)
        written = []
        table = self.fixes.loc[:, list(FIXES_CSV_COLUMNS)]
        write_csv(out / "fixes.csv", table)
        write_json(out / "fixes.csv-metadata.json", _csv_metadata("fixes.csv", self.config))
        written += [out / "fixes.csv", out / "fixes.csv-metadata.json"]
        info = provenance(self.config)
        if self.track is not None:
            from driftloop.export import export_run
            from driftloop.io.trajectory_nc import write_trajectories_nc

            gis = [f for f in formats if f != "csv"]
            written += export_run(self.tables(), out, formats=[*gis, "csv"], provenance=info)
            written.append(write_trajectories_nc(
                out / "resampled.nc", self.track,
                {"driftloop_provenance": json.dumps(info, sort_keys=True)},
            ))
        if self.spectra is not None:
            from driftloop.export.formats import write_table_csv

            written += write_table_csv(
                out / "spectra.csv", self.spectra,
                description="Rotary (Welch) spectra of the resampled velocities, per drifter "
                "and for the release; PSD in (m/s)^2 per cycle per day.",
                provenance=info,
            )
        write_json(out / "summary.json", self.summary)
        write_json(out / RUN_MARKER,
                   _run_provenance(self.config, self.inputs, self.stage_seconds))
        written += [out / "summary.json", out / RUN_MARKER]
        return written


#: Names of every file a run may write (checked against the inputs before writing).
OUTPUT_NAMES = (
    "fixes.csv", "fixes.csv-metadata.json", "summary.json", RUN_MARKER,
    "resampled.csv", "resampled.csv-metadata.json", "resampled.nc",
    "loops.csv", "loops.csv-metadata.json", "spectra.csv", "spectra.csv-metadata.json",
    "fixes.geojson", "tracks.geojson", "loops.geojson", "loop_centres.geojson",
    "loop_shapes.geojson", "report.html", "driftloop.gpkg", "fixes.parquet", "tracks.parquet",
    "loops.parquet", "loop_centres.parquet", "loop_shapes.parquet",
)


def prepare_out_dir(out_dir: str | Path, *, overwrite: bool = False) -> Path:
    """Create the output folder, refusing a non-empty folder of other files.

    Parameters
    ----------
    out_dir : str or Path
        The folder.
    overwrite : bool
        Accept a non-empty folder that is not a previous driftloop run.

    Returns
    -------
    Path
        The folder.

    Raises
    ------
    InputError
        If the folder is a file, or non-empty without a driftloop run marker
        and ``overwrite`` is false.
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError(str(out), "--out must be a folder, but this is a file")
    if out.is_dir() and not overwrite and not _is_previous_run(out):
        raise InputError(
            str(out),
            "output folder is not empty and holds no previous driftloop run; "
            "choose another --out or pass --overwrite",
        )
    out.mkdir(parents=True, exist_ok=True)
    return out


def _is_previous_run(out: Path) -> bool:
    """Whether a folder is empty or holds only what driftloop runs write.

    A run marks its folder with ``provenance.json`` when it finishes; a run
    killed before that leaves only driftloop's own output files and
    temporary ``.NAME.*.part`` files, which a new run may replace.
    """
    if (out / RUN_MARKER).is_file():
        return True
    known = set(OUTPUT_NAMES) | {"report.html"}
    for entry in out.iterdir():
        name = entry.name
        temporary = name.startswith(".") and name.endswith(".part")
        if not (entry.is_file() and (name in known or temporary)):
            return False
    return True


def _refuse_overwriting_inputs(targets: Iterable[Path], protect: Sequence[str | Path]) -> None:
    protected = {os.path.realpath(p) for p in protect}
    for target in targets:
        if os.path.realpath(target) in protected:
            raise InputError(
                str(target), "refusing to overwrite an input file; choose another --out"
            )


def _csv_metadata(name: str, config: Config) -> dict:
    """Describe a CSV output in the W3C *Metadata Vocabulary for Tabular Data* (CSVW)."""
    from driftloop.summary import FLAG_MEANINGS

    columns = [
        ("source_file", "string", "input file, as given"),
        ("source_row", "integer", "1-based record number in the input file"),
        ("drifter_id", "string", "drifter identifier"),
        ("time", "datetime", "time of the fix, UTC, ISO 8601"),
        ("lat", "double", "latitude, degrees_north (WGS 84)"),
        ("lon", "double", "longitude, degrees_east in [-180, 180) (WGS 84)"),
        ("qc_flag", "integer", "QARTOD flag: "
         + ", ".join(f"{k} {v}" for k, v in FLAG_MEANINGS.items() if k != 2)),
        ("qc_reasons", "string", "reason codes joined by '|'; see docs/qc.md"),
        ("segment", "integer", "segment number within the drifter; -1 if not usable"),
        ("time_assumed_utc", "boolean", "time had no zone designator and was taken as UTC"),
        ("raw", "string", "the raw record when it could not be parsed"),
    ]
    return {
        "@context": "http://www.w3.org/ns/csvw",
        "url": name,
        "dc:creator": f"driftloop {provenance(config)['version']}",
        "dc:description": "Every input fix with its quality-control flag (QARTOD scale).",
        "tableSchema": {
            "columns": [
                {"name": n, "titles": n, "datatype": t, "dc:description": d}
                for n, t, d in columns
            ]
        },
        "notes": [provenance(config)],
    }


def _run_provenance(config: Config, inputs: list[dict],
                    stage_seconds: dict[str, float] | None = None) -> dict:
    info = provenance(config)
    info["inputs"] = inputs
    info["written_utc"] = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    if stage_seconds:
        info["run_seconds"] = round(sum(stage_seconds.values()), 3)
        info["stage_seconds"] = {k: round(v, 3) for k, v in stage_seconds.items()}
    return info


def qc_fixes(
    fixes: pd.DataFrame,
    config: Config,
    progress: Callable[[Iterable], Iterable] | None = None,
) -> pd.DataFrame:
    """Run QC drifter by drifter and return the flagged table in input order.

    Parameters
    ----------
    fixes : pandas.DataFrame
        The tidy fixes table.
    config : Config
        Configuration (its ``qc`` section is used).
    progress : callable, optional
        Wraps the iterable of drifter groups (e.g. a progress bar).

    Returns
    -------
    pandas.DataFrame
        ``fixes`` with ``qc_flag``, ``qc_reasons`` and ``segment`` added, same
        row order and index.
    """
    groups = fixes.groupby("drifter_id", sort=True, observed=True, dropna=False)
    iterator = (group for _, group in groups)
    if progress is not None:
        iterator = progress(iterator)
    parts = [run_qc(group, config.qc).loc[:, list(QC_COLUMNS)] for group in iterator]
    if not parts:
        return run_qc(fixes, config.qc)
    added = pd.concat(parts).reindex(fixes.index)
    out = fixes.copy()
    for name in QC_COLUMNS:
        out[name] = added[name]
    return out


def _progress_factory(progress: bool, n: int, desc: str):
    if not progress or n < PROGRESS_MIN_DRIFTERS:
        return None
    from tqdm import tqdm

    def wrap(iterable: Iterable) -> Iterable:
        return tqdm(iterable, total=n, desc=desc, unit="drifter", leave=False, disable=None)

    return wrap


def read_inputs(
    inputs: str | Path | Sequence[str | Path] | pd.DataFrame, config: Config
) -> tuple[pd.DataFrame, list[dict]]:
    """Read the inputs of a run into one fixes table.

    Parameters
    ----------
    inputs : path, sequence of paths, or pandas.DataFrame
        Track files, or a fixes table already read.
    config : Config
        Configuration (its ``read`` section is used).

    Returns
    -------
    tuple
        The fixes table and one ``{"file", "rows"}`` entry per input file.
    """
    if isinstance(inputs, pd.DataFrame):
        fixes = inputs.loc[:, list(FIX_COLUMNS)].reset_index(drop=True)
        files = fixes["source_file"].astype(str)
        info = [{"file": f, "rows": int(n)} for f, n in files.value_counts(sort=False).items()]
        return fixes, info
    paths = [inputs] if isinstance(inputs, str | Path) else list(inputs)
    # outputs must not depend on the order the files were named in
    paths = sorted(paths, key=str)
    tables, info = [], []
    for path in paths:
        table = read_file(path, config.read)
        tables.append(table)
        info.append({"file": str(path), "rows": len(table)})
    fixes = pd.concat(tables, ignore_index=True) if tables else empty_fixes()
    return fixes, info


def analyse(
    inputs: str | Path | Sequence[str | Path] | pd.DataFrame,
    config: Config | None = None,
    *,
    progress: bool = False,
    stages: str = "all",
) -> Analysis:
    """Run every stage of driftloop on track files or on a fixes table.

    Parameters
    ----------
    inputs : path, sequence of paths, or pandas.DataFrame
        Track files (any format :func:`driftloop.read_tracks` reads) or a
        fixes table already read.
    config : Config, optional
        Configuration; defaults to :class:`Config()`.
    progress : bool
        Show a progress bar over drifters when there are many.
    stages : {"all", "qc"}
        ``"qc"`` stops after quality control.

    Returns
    -------
    Analysis
        The flagged fixes, resampled tracks, loop events, spectra and summary.

    Raises
    ------
    InputError
        If an input cannot be read.

    Examples
    --------
    >>> import driftloop
    >>> result = driftloop.analyse("sample_tracks/orravane_a.csv")  # doctest: +SKIP
    >>> result.summary["release"]["by_flag"]  # doctest: +SKIP
    """
    if stages not in ("all", "qc"):
        raise ValueError(f"stages must be 'all' or 'qc', got {stages!r}")
    config = config or Config()
    timings: dict[str, float] = {}
    clock = time.perf_counter()

    def lap(stage: str) -> None:
        nonlocal clock
        now = time.perf_counter()
        timings[stage] = timings.get(stage, 0.0) + now - clock
        clock = now

    fixes, info = read_inputs(inputs, config)
    lap("read")
    n_drifters = int(fixes["drifter_id"].nunique())
    flagged = qc_fixes(fixes, config, progress=_progress_factory(progress, n_drifters, "QC"))
    summary = build_summary(flagged, config, info)
    lap("qc")
    result = Analysis(fixes=flagged, summary=summary, config=config, inputs=info,
                      stage_seconds=timings)
    if stages == "qc":
        return result

    from driftloop.loops import find_events
    from driftloop.resample import resample_all
    from driftloop.spectra import inertial_peak_check, rotary_spectra

    resampled = resample_all(flagged, config.resample, config.qc.gps_noise_m)
    lap("resample")
    catalogue = find_events(
        resampled.track, config.loops, config.wavelet,
        progress=_progress_factory(progress, n_drifters, "loops"),
    )
    lap("loops")
    from driftloop.drift import decompose, drift_statistics

    decomposed = decompose(resampled.track, config.wavelet, catalogue.events)
    lap("drift")
    spectra = rotary_spectra(resampled.track)
    check = inertial_peak_check(spectra, resampled.track,
                                equator_band_deg=config.loops.equator_band_deg)
    lap("spectra")
    _add_stage_summaries(summary, resampled, catalogue, check)
    drift = drift_statistics(decomposed, catalogue.events)
    lap("drift")
    summary["drift"] = drift.get("(release)")
    for drifter, entry in summary["drifters"].items():
        entry["drift"] = drift.get(drifter)
    result.track = resampled.track
    result.events = catalogue.events
    result.spectra = spectra.table
    return result


def _add_stage_summaries(summary: dict, resampled, catalogue, check: dict) -> None:
    """Put the resampling, loop and spectral results into the summary."""
    track = resampled.track
    events = catalogue.events
    kinds = ("inertial", "eddy", "tidal", "other")
    summary["resample"] = {
        "points": int(len(track)),
        "segments": int(track.groupby(["drifter_id", "segment"], observed=True).ngroups),
        "points_in_gaps": int(track["in_gap"].sum()),
        "dropped_segments": resampled.dropped,
    }
    summary["loops"] = {
        "ridges": catalogue.ridges,
        "events": int(len(events)),
        "by_kind": {k: int((events["kind"] == k).sum()) for k in kinds},
        "notes": catalogue.notes,
    }
    for drifter, entry in summary["drifters"].items():
        mine = events[events["drifter_id"] == drifter]
        entry["events"] = {k: int((mine["kind"] == k).sum()) for k in kinds}
        entry["resampled_points"] = int((track["drifter_id"] == drifter).sum())
        entry["dropped_segments"] = sum(
            1 for d in resampled.dropped if d["drifter_id"] == drifter
        )
        entry["inertial_peak"] = check.get(
            drifter, {"checked": False, "reason": "no resampled segment"}
        )
    checked = [c for c in check.values() if c.get("checked")]
    summary["release"]["inertial_peak_check"] = {
        "drifters_checked": len(checked),
        "within_tolerance": sum(1 for c in checked if c["within_tolerance"]),
        "tolerance": 0.15,
    }
    summary["release"]["notes"].extend(catalogue.notes)


def load_run(run_dir: str | Path) -> dict[str, pd.DataFrame]:
    """Read back the tables of a previous run folder.

    Parameters
    ----------
    run_dir : str or Path
        Folder written by ``driftloop analyse``.

    Returns
    -------
    dict of str to pandas.DataFrame
        ``"fixes"`` and, where the run wrote them, ``"tracks"`` (from
        ``resampled.csv``) and ``"events"`` (from ``loops.csv``), with the
        dtypes the export expects.

    Raises
    ------
    InputError
        If the folder is not a driftloop run or a table is missing.
    """
    run = Path(run_dir)
    if not (run / RUN_MARKER).is_file():
        raise InputError(str(run), "not a driftloop run folder (no provenance.json)")
    if not (run / "fixes.csv").is_file():
        raise InputError(str(run), "the run folder has no fixes.csv")
    text = {"drifter_id": "string", "qc_reasons": "string", "raw": "string",
            "source_file": "string", "event_id": "string", "kind": "string", "spin": "string",
            "sense": "string", "tide": "string"}

    def read(name: str, times: Sequence[str]) -> pd.DataFrame:
        table = pd.read_csv(run / name, dtype={k: v for k, v in text.items()},
                            keep_default_na=False, na_values={"lat": [""], "lon": [""]})
        for column in table.columns:
            if column in text:
                continue
            if table[column].dtype == object:
                try:
                    table[column] = pd.to_numeric(table[column].replace("", None))
                except (ValueError, TypeError):
                    pass  # a text column: keep it as read
        for column in times:
            table[column] = pd.to_datetime(table[column].replace("", None), utc=True)
        return table

    tables = {"fixes": read("fixes.csv", ["time"])}
    if (run / "resampled.csv").is_file():
        tables["tracks"] = read("resampled.csv", ["time"])
    if (run / "loops.csv").is_file():
        tables["events"] = read("loops.csv", ["start", "end"])
    return tables


def export_previous_run(run_dir: str | Path, formats: Sequence[str]) -> list[Path]:
    """Re-export the GIS layers of a previous run without recomputing.

    Parameters
    ----------
    run_dir : str or Path
        Folder written by ``driftloop analyse``.
    formats : sequence of str
        Any of ``"geojson"``, ``"gpkg"``, ``"parquet"``, ``"csv"``.

    Returns
    -------
    list of Path
        The files written.
    """
    import json as _json

    from driftloop.export import export_run

    tables = load_run(run_dir)
    info = _json.loads((Path(run_dir) / RUN_MARKER).read_text(encoding="utf-8"))
    info = {k: info[k] for k in ("software", "version", "parameters") if k in info}
    return export_run(tables, run_dir, formats=formats, provenance=info)
