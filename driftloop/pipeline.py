"""The analysis pipeline: the only module that knows the order of the stages.

Stages so far: read → QC → accounting.  Each drifter goes through QC on its
own (the tests never look across drifters), which keeps memory bounded by
the longest drifter and lets later stages run drifters in parallel.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from driftloop.config import Config, provenance
from driftloop.errors import InputError
from driftloop.io import FIX_COLUMNS, empty_fixes, read_file
from driftloop.io.writers import write_csv, write_json
from driftloop.qc import run_qc
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
    """

    fixes: pd.DataFrame
    summary: dict
    config: Config
    inputs: list[dict] = field(default_factory=list)

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

    def write(self, out_dir: str | Path, *, overwrite: bool = False,
              protect: Sequence[str | Path] = ()) -> list[Path]:
        """Write ``fixes.csv``, ``summary.json`` and the run provenance.

        Parameters
        ----------
        out_dir : str or Path
            Output folder (created if needed).
        overwrite : bool
            Allow writing into a non-empty folder that is not a driftloop run.
        protect : sequence of path
            Files that must never be overwritten (the inputs).

        Returns
        -------
        list of Path
            The files written.
        """
        out = prepare_out_dir(out_dir, overwrite=overwrite)
        targets = {
            "fixes": out / "fixes.csv",
            "fixes_meta": out / "fixes.csv-metadata.json",
            "summary": out / "summary.json",
            "provenance": out / RUN_MARKER,
        }
        _refuse_overwriting_inputs(targets.values(), protect)
        table = self.fixes.loc[:, list(FIXES_CSV_COLUMNS)]
        write_csv(targets["fixes"], table)
        write_json(targets["fixes_meta"], _csv_metadata("fixes.csv", self.config))
        write_json(targets["summary"], self.summary)
        write_json(targets["provenance"], _run_provenance(self.config, self.inputs))
        return list(targets.values())


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
    if out.is_dir() and any(out.iterdir()) and not (out / RUN_MARKER).is_file() and not overwrite:
        raise InputError(
            str(out),
            "output folder is not empty and holds no previous driftloop run; "
            "choose another --out or pass --overwrite",
        )
    out.mkdir(parents=True, exist_ok=True)
    return out


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


def _run_provenance(config: Config, inputs: list[dict]) -> dict:
    info = provenance(config)
    info["inputs"] = inputs
    info["written_utc"] = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
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
    parts = [run_qc(group, config.qc) for group in iterator]
    if not parts:
        return run_qc(fixes, config.qc)
    return pd.concat(parts).loc[fixes.index]


def analyse(
    inputs: str | Path | Sequence[str | Path] | pd.DataFrame,
    config: Config | None = None,
    *,
    progress: bool = False,
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

    Returns
    -------
    Analysis
        The flagged fixes and the summary.

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
    config = config or Config()
    if isinstance(inputs, pd.DataFrame):
        fixes = inputs.loc[:, list(FIX_COLUMNS)].reset_index(drop=True)
        files = fixes["source_file"].astype(str)
        info = [{"file": f, "rows": int(n)} for f, n in files.value_counts(sort=False).items()]
    else:
        paths = [inputs] if isinstance(inputs, str | Path) else list(inputs)
        # outputs must not depend on the order the files were named in
        paths = sorted(paths, key=str)
        tables, info = [], []
        for path in paths:
            table = read_file(path, config.read)
            tables.append(table)
            info.append({"file": str(path), "rows": len(table)})
        fixes = pd.concat(tables, ignore_index=True) if tables else empty_fixes()
    wrap = None
    if progress and fixes["drifter_id"].nunique() >= PROGRESS_MIN_DRIFTERS:
        from tqdm import tqdm

        n = int(fixes["drifter_id"].nunique())

        def wrap(iterable: Iterable) -> Iterable:
            return tqdm(iterable, total=n, desc="QC", unit="drifter", leave=False, disable=None)

    flagged = qc_fixes(fixes, config, progress=wrap)
    summary = build_summary(flagged, config, info)
    return Analysis(fixes=flagged, summary=summary, config=config, inputs=info)
