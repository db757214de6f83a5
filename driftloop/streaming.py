"""Streaming runs: whole archives one drifter (or batch of drifters) at a time.

:func:`run` gives the same output files, byte for byte, as
:func:`driftloop.pipeline.analyse` followed by :meth:`Analysis.write
<driftloop.pipeline.Analysis.write>`, without holding the release in memory:

1. **read** -- every input file (sorted by path) is read in turn and its rows
   are split by drifter into pieces kept in an anonymous temporary file in
   the output folder; each row keeps its place in the input order;
2. **drifters** -- each drifter's rows are gathered and run through QC,
   resampling, the loop catalogue, the drift decomposition and the spectra
   (:func:`process_batch`, in this process or on Dask workers, see
   :mod:`driftloop.parallel`); the results are taken in drifter order and
   appended to the outputs (resampled and loop tables, GIS layers).  When
   each drifter's rows lie together in the input (the usual layout) and no
   GeoPackage or GeoParquet layer is asked for, the same call also formats
   the drifter's flagged rows for ``fixes.csv`` and the fixes layer, one run
   of consecutive input rows at a time, and only that text comes back to a
   temporary file; otherwise the flagged rows themselves go back to it;
3. **fixes** -- the formatted runs are appended to ``fixes.csv`` and the
   fixes layer in input order; or the flagged rows are put back in input
   order, one read chunk at a time, formatted (on the workers) and appended;
4. **release** -- the summary, spectra and drift statistics of the release
   are finished from what was accumulated, and every file is renamed into
   place in the order of :meth:`Analysis.write`, ``provenance.json`` last.

Memory therefore follows the largest input file (while it is read) and the
longest drifter, not the number of drifters, with two exceptions kept
small: ``resampled.nc`` is written at the end from memory-mapped columns
(one 8-byte column of the resampled points at a time), and the release
drift statistics (pooled quantiles and the pooled dispersion bootstrap)
need the drift velocity of every resampled point (32 bytes per point),
loaded at the end.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import math
import tempfile
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from driftloop.config import Config, provenance
from driftloop.io import read_file

__all__ = ["CHUNK_ROWS", "BatchResult", "StreamRun", "process_batch", "render_fixes", "run"]

#: Rows of an input file handled as one chunk (fixes.csv is written a chunk at a time).
CHUNK_ROWS = 20_000

#: Rows gathered into one batch of drifters for a worker (a drifter is never split).
BATCH_ROWS = 50_000

#: Most drifters in one batch.
BATCH_DRIFTERS = 32

#: Batches per worker thread (at least) in a parallel run, for an even load.
IN_FLIGHT_BATCHES = 6

#: Runs of consecutive input rows per drifter (on average) up to which the
#: workers format the fixes outputs themselves.
DIRECT_RUNS_PER_DRIFTER = 4

#: Modules that :func:`process_batch` imports, loaded once for all local workers.
WORKER_MODULES = ("driftloop.streaming", "driftloop.qc", "driftloop.resample", "driftloop.loops",
                  "driftloop.drift", "driftloop.spectra", "driftloop.summary",
                  "driftloop.export.layers", "driftloop.export.stream",
                  "driftloop.io.trajectory_nc")

_KINDS = ("inertial", "eddy", "tidal", "other")

#: Columns of the decomposition pooled over the release for its drift statistics.
_POOLED = ("u_drift", "v_drift", "u_inertial", "v_inertial")


# ---------------------------------------------------------------------------
# temporary storage
# ---------------------------------------------------------------------------


class _Spool:
    """Tables and lists of arrays in an anonymous temporary file.

    Each item is written at the end of the file; :meth:`put` returns where
    it lies and :meth:`get` reads it back with its dtypes, index and attrs.
    Tables of the column types the pipeline's row tables have (NumPy
    numbers and booleans, UTC datetimes, Arrow-backed strings; a range or
    integer index) are written column by column as raw buffers
    (:func:`_encode_table`), several times faster than an Arrow IPC round
    trip of the same table, which is used for any other table.  Nothing
    is pickled.
    """

    def __init__(self, folder: Path) -> None:
        self._file = tempfile.TemporaryFile(dir=folder)
        self._end = 0

    def _write(self, data: bytes) -> tuple[int, int]:
        self._file.seek(self._end)
        self._file.write(data)
        where = (self._end, len(data))
        self._end += len(data)
        return where

    def _read(self, where: tuple[int, int]) -> bytes:
        self._file.seek(where[0])
        return self._file.read(where[1])

    def put(self, table: pd.DataFrame) -> tuple[int, int]:
        """Store a table; return where it lies."""
        return self._write(_encode_table(table))

    def get(self, where: tuple[int, int]) -> pd.DataFrame:
        """Read back the table stored at ``where``."""
        return _decode_table(self._read(where))

    def put_arrays(self, arrays: Sequence[np.ndarray]) -> tuple[int, int]:
        """Store numeric arrays (raw buffers after a JSON header); return where they lie."""
        arrays = [np.ascontiguousarray(a) for a in arrays]
        if any(a.dtype.kind not in "biufmM" for a in arrays):
            raise TypeError("put_arrays takes numeric arrays")
        head = json.dumps([[a.dtype.str, list(a.shape)] for a in arrays]).encode("utf-8")
        return self._write(len(head).to_bytes(8, "little") + head
                           + b"".join(a.tobytes() for a in arrays))

    def get_arrays(self, where: tuple[int, int]) -> list[np.ndarray]:
        """Read back the arrays stored at ``where``."""
        data = self._read(where)
        size = int.from_bytes(data[:8], "little")
        pos = 8 + size
        out = []
        for dtype, shape in json.loads(data[8:pos].decode("utf-8")):
            dtype = np.dtype(dtype)
            n = dtype.itemsize * math.prod(shape)
            out.append(np.frombuffer(data, dtype=dtype, count=math.prod(shape),
                                     offset=pos).reshape(shape).copy())
            pos += n
        return out

    def close(self) -> None:
        self._file.close()


def _column_parts(column: pd.Series) -> tuple[dict, list] | None:
    """Describe a column (JSON-able) and give its buffers (None: not handled here)."""
    dtype = column.dtype
    if isinstance(dtype, np.dtype) and dtype.kind in "biuf":
        return {"np": dtype.str}, [np.ascontiguousarray(column.to_numpy()).tobytes()]
    if isinstance(dtype, pd.DatetimeTZDtype) and str(dtype.tz) == "UTC":
        values = column.array
        return ({"utc": str(dtype.unit)},
                [np.ascontiguousarray(values.asi8).tobytes()])
    if (isinstance(dtype, pd.StringDtype) and dtype.storage == "pyarrow"
            and dtype.na_value is pd.NA):
        import pyarrow as pa

        chunked = column.array._pa_array  # noqa: SLF001 - the array's own Arrow data
        if chunked.type not in (pa.string(), pa.large_string()):
            return None
        # one array with compact buffers at offset 0 (a slice keeps its parent's)
        array = pa.concat_arrays(chunked.chunks) if chunked.num_chunks else \
            pa.array([], chunked.type)
        validity, offsets, data = array.buffers()
        parts = [b"" if validity is None else validity.to_pybytes(),
                 offsets.to_pybytes(), b"" if data is None else data.to_pybytes()]
        return {"str": str(array.type), "nulls": array.null_count}, parts
    return None


def _encode_table(table: pd.DataFrame) -> bytes:
    """Raw column buffers after a JSON header; an Arrow IPC stream for other tables."""
    index = table.index
    if isinstance(index, pd.RangeIndex):
        index_desc: Any = ["range", index.start, index.stop, index.step]
        index_parts: list = []
    elif index.dtype == np.int64 and index.name is None:
        index_desc = ["int64"]
        index_parts = [np.ascontiguousarray(index.to_numpy()).tobytes()]
    else:
        index_desc = None
    columns = []
    parts: list = [] if index_desc is None else list(index_parts)
    names = list(table.columns)
    simple = index_desc is not None and table.columns.is_unique and all(
        isinstance(n, str) for n in names)
    if simple:
        try:
            attrs = json.dumps(table.attrs)
        except (TypeError, ValueError):
            simple = False
    if simple:
        for k, name in enumerate(names):
            got = _column_parts(table.iloc[:, k])
            if got is None:
                simple = False
                break
            columns.append([name, got[0], [len(p) for p in got[1]]])
            parts.extend(got[1])
    if not simple:
        import pyarrow as pa

        arrow = pa.Table.from_pandas(table, preserve_index=None, nthreads=1)
        sink = pa.BufferOutputStream()
        with pa.ipc.new_stream(sink, arrow.schema) as writer:
            writer.write_table(arrow)
        return b"A" + sink.getvalue().to_pybytes()
    header = json.dumps({"rows": len(table), "index": index_desc,
                         "index_bytes": [len(p) for p in index_parts],
                         "columns": columns, "attrs": attrs}).encode("utf-8")
    return b"C" + len(header).to_bytes(8, "little") + header + b"".join(parts)


def _decode_table(data: bytes) -> pd.DataFrame:
    """Read back what :func:`_encode_table` wrote."""
    if data[:1] == b"A":
        import pyarrow as pa

        return pa.ipc.open_stream(pa.py_buffer(data[1:])).read_all().to_pandas(
            use_threads=False)
    size = int.from_bytes(data[1:9], "little")
    head = json.loads(data[9:9 + size].decode("utf-8"))
    view = memoryview(data)
    pos = 9 + size

    def take(n: int) -> memoryview:
        nonlocal pos
        piece = view[pos:pos + n]
        pos += n
        return piece

    rows = head["rows"]
    if head["index"][0] == "range":
        index: pd.Index = pd.RangeIndex(*head["index"][1:])
    else:
        index = pd.Index(np.frombuffer(take(head["index_bytes"][0]), dtype=np.int64).copy())
    out = {}
    for name, desc, sizes in head["columns"]:
        buffers = [take(n) for n in sizes]
        if "np" in desc:
            out[name] = np.frombuffer(buffers[0], dtype=np.dtype(desc["np"])).copy()
        elif "utc" in desc:
            ns = np.frombuffer(buffers[0], dtype=np.int64).copy()
            out[name] = pd.DatetimeIndex(ns.view(f"M8[{desc['utc']}]")).tz_localize("UTC").array
        else:
            import pyarrow as pa

            kind = pa.large_string() if desc["str"] == "large_string" else pa.string()
            validity = pa.py_buffer(buffers[0]) if len(buffers[0]) else None
            array = pa.Array.from_buffers(
                kind, rows, [validity, pa.py_buffer(buffers[1]), pa.py_buffer(buffers[2])],
                null_count=desc["nulls"])
            out[name] = pd.array(array, dtype=pd.StringDtype("pyarrow"))
    table = pd.DataFrame(out, index=index, copy=False)
    if not head["columns"]:
        table = pd.DataFrame(index=index)
    table.attrs = json.loads(head["attrs"])
    return table


class _Columns:
    """Numeric columns appended to anonymous temporary files, memory-mapped at the end."""

    def __init__(self, folder: Path, dtypes: dict[str, Any]) -> None:
        self.dtypes = dtypes
        self._files = {n: tempfile.TemporaryFile(dir=folder) for n in dtypes}
        self.size = 0

    def append(self, columns: dict[str, np.ndarray]) -> None:
        for name, dtype in self.dtypes.items():
            np.ascontiguousarray(columns[name], dtype=dtype).tofile(self._files[name])
        self.size += len(next(iter(columns.values())))

    def array(self, name: str) -> np.ndarray:
        handle = self._files[name]
        handle.flush()
        if self.size == 0:
            return np.empty(0, dtype=self.dtypes[name])
        return np.memmap(handle, dtype=self.dtypes[name], mode="r", shape=(self.size,))

    def close(self) -> None:
        for handle in self._files.values():
            handle.close()


# ---------------------------------------------------------------------------
# per-drifter work
# ---------------------------------------------------------------------------

_STATE = threading.local()


def _add_time(stage: str, seconds: float) -> None:
    timer = getattr(_STATE, "timer", None)
    if timer is not None:
        timer[stage] = timer.get(stage, 0.0) + seconds


def _install_hooks() -> None:
    """Time the wavelet transforms and ridge searches, and share ridges within a drifter.

    :func:`driftloop.loops.find_events` and :func:`driftloop.drift.decompose`
    both run :func:`driftloop.ridges.detect` on every segment, on the same
    velocities with the same parameters.  While a drifter is processed here,
    the first result is kept (keyed by a digest of the velocities, the step
    and the parameters) and handed to the second caller, so each segment is
    transformed once; the results are those of a fresh call, since
    ``detect`` is a function of its arguments.  The hooks also add the time
    spent in the transform and in ``detect`` to the stage timer; outside
    :func:`process_batch` they only pass the call on.
    """
    import driftloop.drift as drift_module
    import driftloop.loops as loops_module
    import driftloop.ridges as ridges_module

    if getattr(loops_module.detect, "_driftloop_hook", False):
        return
    original_detect = loops_module.detect

    def detect(z, dt_s, config=None, **kwargs):
        cache = getattr(_STATE, "cache", None)
        key = None
        if cache is not None:
            array = np.ascontiguousarray(z)
            try:
                key = (hashlib.blake2b(array.tobytes(), digest_size=20).digest(),
                       array.shape, array.dtype.str, float(dt_s), config,
                       tuple(sorted(kwargs.items())))
                hash(key)
            except TypeError:
                key = None
            if key is not None and key in cache:
                return cache[key]
        start = time.perf_counter()
        result = original_detect(z, dt_s, config, **kwargs)
        _add_time("_detect", time.perf_counter() - start)
        if key is not None:
            cache[key] = result
        return result

    detect._driftloop_hook = True  # type: ignore[attr-defined]
    loops_module.detect = detect
    drift_module.detect = detect
    import driftloop.wavelet as wavelet_module

    for module, name in ((ridges_module, "rotary_transform"), (wavelet_module, "rotary_transform"),
                         *((wavelet_module, n) for n in _TRANSFORM_STEPS)):
        target = getattr(module, name, None)
        if callable(target) and not getattr(target, "_driftloop_hook", False):
            setattr(module, name, _timed(target))


#: Functions of :mod:`driftloop.wavelet` whose time counts as "transform"
#: (the forward FFT and the inverse FFTs of the wavelet filters), where the
#: ridge search runs block by block inside the transform.
_TRANSFORM_STEPS = ("_half_spectra", "_ifft_into")


def _timed(function):
    """Wrap a transform step: its time (outermost call only) goes to the stage timer."""

    def timed(*args, **kwargs):
        depth = getattr(_STATE, "depth", 0)
        _STATE.depth = depth + 1
        start = time.perf_counter()
        try:
            return function(*args, **kwargs)
        finally:
            _STATE.depth = depth
            if depth == 0:
                _add_time("_transform", time.perf_counter() - start)

    timed._driftloop_hook = True  # type: ignore[attr-defined]
    timed.__wrapped__ = function  # type: ignore[attr-defined]
    return timed


@dataclass
class BatchResult:
    """What the stages give for a batch of drifters (see :func:`process_batch`).

    Tables hold the batch's drifters in sorted order; per-drifter values
    are keyed by drifter id.
    """

    drifters: list
    flagged: pd.DataFrame
    summary: Any
    timings: dict[str, float] = field(default_factory=dict)
    track: pd.DataFrame | None = None
    dropped: list = field(default_factory=list)
    events: pd.DataFrame | None = None
    ridges: int = 0
    notes: list = field(default_factory=list)
    spectra: list = field(default_factory=list)
    peaks: dict = field(default_factory=dict)
    drift: dict = field(default_factory=dict)
    step_counts: dict = field(default_factory=dict)
    local_dt_s: dict = field(default_factory=dict)
    pooled: dict = field(default_factory=dict)
    series: dict = field(default_factory=dict)
    decay: dict = field(default_factory=dict)
    layers: dict = field(default_factory=dict)
    tables: dict = field(default_factory=dict)
    obs: dict | None = None
    fixes_runs: list | None = None
    track_info: dict = field(default_factory=dict)


def _process(batch: Sequence[tuple[str | None, pd.DataFrame]], config: Config, stages: str,
             formats: tuple, fixes: tuple | None = None) -> BatchResult:
    from driftloop.qc import run_qc
    from driftloop.summary import SummaryAccumulator

    timer: dict[str, float] = {}
    _STATE.timer = timer
    _STATE.cache = {}
    try:
        clock = time.perf_counter()

        def lap(stage: str) -> None:
            nonlocal clock
            now = time.perf_counter()
            timer[stage] = timer.get(stage, 0.0) + now - clock
            clock = now

        # one QC call for the batch: it flags each drifter as if alone
        summary = SummaryAccumulator(config)
        tables = [rows for _, rows in batch]
        flagged = run_qc(tables[0] if len(tables) == 1 else pd.concat(tables), config.qc)
        summary.add_drifters(flagged, [(drifter, len(rows)) for drifter, rows in batch])
        lap("qc")
        result = BatchResult([d for d, _ in batch], flagged, summary, timer)
        if fixes is not None:
            result.fixes_runs = [render_run(run, *fixes, formats) for run in _runs(flagged)]
            lap("write")
        if stages == "qc":
            result.flagged = None if fixes is not None else flagged
            return result
        _later_stages(result, config, formats, lap)
        if fixes is not None:
            result.flagged = None  # rendered above: the rows need not travel back
        timer["transform"] = timer.pop("_transform", 0.0)
        detect_s = timer.pop("_detect", 0.0)
        timer["ridges"] = max(detect_s - timer["transform"], 0.0)
        timer["events"] = max(timer.pop("loops", 0.0) - detect_s, 0.0)
        return result
    finally:
        _STATE.timer = None
        _STATE.cache = None


def _later_stages(result: BatchResult, config: Config, formats: tuple, lap) -> None:
    from driftloop.drift import (
        decompose,
        drift_series,
        drifter_drift_statistics,
        grid_step_counts,
        grid_step_from_counts,
        inertial_decay_times,
    )
    from driftloop.loops import find_events
    from driftloop.resample import resample_all
    from driftloop.spectra import SpectraAccumulator, inertial_peak_check

    resampled = resample_all(result.flagged, config.resample, config.qc.gps_noise_m)
    track = resampled.track
    result.track, result.dropped = track, resampled.dropped
    lap("resample")
    catalogue = find_events(track, config.loops, config.wavelet)
    events = catalogue.events
    result.events, result.ridges, result.notes = events, catalogue.ridges, catalogue.notes
    lap("loops")
    decomposed = decompose(track, config.wavelet, events)
    lap("drift")
    spectra = SpectraAccumulator()
    for drifter, group in track.groupby("drifter_id", sort=True, observed=True):
        rows = spectra.drifter_rows(str(drifter), group)
        spectra.add_rows(rows)
        result.spectra.append(rows)
    result.peaks = inertial_peak_check(spectra.table(), track,
                                       equator_band_deg=config.loops.equator_band_deg)
    lap("spectra")
    decay = inertial_decay_times(events)
    names: list = []
    if len(decomposed):
        # each drifter's rows by one stable sort of the batch (in table order within it)
        ids = decomposed["drifter_id"].astype(str).to_numpy(dtype=object)
        names, codes = np.unique(ids, return_inverse=True)
        order = np.argsort(codes, kind="stable")
        bounds = np.searchsorted(codes[order], np.arange(len(names) + 1))
        columns = {name: decomposed[name].to_numpy(dtype=float) for name in _POOLED}
        times = pd.DatetimeIndex(pd.to_datetime(decomposed["time"], utc=True)).asi8
    for k, drifter in enumerate(names):
        drifter = str(drifter)
        take = order[bounds[k]:bounds[k + 1]]
        rows = decomposed.iloc[take]
        counts = grid_step_counts(rows)
        dt_s = grid_step_from_counts(counts)
        result.step_counts[drifter], result.local_dt_s[drifter] = counts, dt_s
        result.decay[drifter] = decay.get(drifter, [])
        result.series[drifter] = drift_series(rows, drifter, dt_s)
        result.drift[drifter] = drifter_drift_statistics(rows, drifter, result.decay[drifter],
                                                         dt_s, series=result.series[drifter])
        pooled = {name: column[take] for name, column in columns.items()}
        pooled["time_ns"] = times[take]
        result.pooled[drifter] = pooled
    lap("drift")
    if formats:
        from driftloop.export.layers import (
            loop_centres_layer,
            loop_shapes_layer,
            loops_layer,
            tracks_layer,
        )
        from driftloop.export.stream import render_layer
        from driftloop.io.writers import csv_text

        layers = {"tracks": tracks_layer(track), "loops": loops_layer(events, track),
                  "loop_centres": loop_centres_layer(events),
                  "loop_shapes": loop_shapes_layer(events)}
        result.layers = {name: render_layer(layer, formats) for name, layer in layers.items()}
        result.tables = {"tracks": (csv_text(track), len(track), track.iloc[:0]),
                         "events": (csv_text(events), len(events), events.iloc[:0])}
    if len(track):
        from driftloop.io.trajectory_nc import obs_columns

        result.obs = obs_columns(track)
    result.track_info = _track_info(track)
    result.track = None  # what the release needs of it is in track_info, tables and obs
    lap("layers")


def _track_info(track: pd.DataFrame) -> dict:
    """Count what the release summary and ``resampled.nc`` need of a batch's resampled rows."""
    info = {"rows": int(len(track)), "points": {}, "segments": 0,
            "in_gap": int(track["in_gap"].sum()) if len(track) else 0, "trajectories": []}
    if not len(track):
        return info
    ids = track["drifter_id"].astype(str).to_numpy()
    seg = track["segment"].to_numpy()
    new = np.r_[True, (seg[1:] != seg[:-1]) | (ids[1:] != ids[:-1])]
    starts = np.flatnonzero(new)
    counts = np.diff(np.r_[starts, seg.size])
    info["trajectories"] = [(d, int(s_), int(n)) for d, s_, n in zip(
        ids[starts].tolist(), seg[starts].tolist(), counts.tolist(), strict=True)]
    for d, n in zip(*np.unique(ids, return_counts=True), strict=True):
        info["points"][str(d)] = int(n)
    info["segments"] = int(track.groupby(["drifter_id", "segment"], observed=True).ngroups)
    return info


def _warm_up(config: Config) -> None:
    """Import the stages and fill their caches with a tiny drifter (a worker's first task)."""
    rows = pd.DataFrame({
        "drifter_id": pd.array(["warm-up"] * 200, dtype="string"),
        "time": pd.date_range("2024-01-01", periods=200, freq="h", tz="UTC"),
        "lat": np.linspace(35.0, 35.2, 200), "lon": np.linspace(-50.0, -49.8, 200),
    })
    from driftloop.io import make_fixes

    fixes = make_fixes(drifter_id=rows["drifter_id"].to_numpy(object), time=rows["time"],
                       lat=rows["lat"].to_numpy(), lon=rows["lon"].to_numpy(),
                       source_file="warm-up", source_row=np.arange(1, 201))
    with contextlib.suppress(Exception):  # only a warm-up: a failure here changes nothing
        process_batch([("warm-up", fixes)], config, "all", ("geojson", "csv"))


def process_batch(batch: Sequence[tuple[str | None, pd.DataFrame]], config: Config,
                  stages: str = "all", formats: tuple = (), fixes: tuple | None = None
                  ) -> BatchResult:
    """Run the per-drifter stages on a batch of drifters.

    QC and the later stages run on the batch's table,
    where every stage treats each drifter on its own, so a drifter's
    results do not depend on which batch it is in.

    Parameters
    ----------
    batch : sequence of (drifter id, rows)
        Drifters in sorted order (``None``, the rows without a drifter id,
        last), each drifter's rows in input order and indexed by their
        position in the input.
    config : Config
        The configuration.
    stages : {"all", "qc"}
        ``"qc"`` stops after quality control.
    formats : tuple of str
        Export formats (as :class:`driftloop.export.stream.StreamExport`
        takes them); the layers of the tracks and events and the CSV text of
        the tables are prepared for them.  Empty: no export.
    fixes : tuple, optional
        ``(attrs, columns, max_problems)`` as :func:`render_fixes` takes
        them: the flagged rows are formatted for ``fixes.csv`` and the fixes
        layer here, one run of consecutive input rows at a time
        (:attr:`BatchResult.fixes_runs`, see :func:`render_run`), and are not
        returned (``flagged`` is None).

    Returns
    -------
    BatchResult
        The batch's flagged rows, tables and per-drifter values.
    """
    _install_hooks()
    return _process(batch, config, stages, formats, fixes)


def _runs(flagged: pd.DataFrame) -> Iterator[pd.DataFrame]:
    """Split a batch's flagged rows (drifter after drifter) into runs of consecutive input rows.

    Drifters that follow each other in the input as in the batch share a
    run, so that a release sorted by drifter is formatted a batch at a time.
    """
    if not len(flagged):
        return
    pos = flagged.index.to_numpy()
    cuts = np.flatnonzero(np.diff(pos) != 1) + 1
    bounds = np.r_[0, cuts, pos.size]
    for a, b in zip(bounds[:-1].tolist(), bounds[1:].tolist(), strict=True):
        yield flagged.iloc[a:b]


def render_run(table: pd.DataFrame, attrs: dict, columns: tuple, max_problems: int,
               formats: tuple) -> dict:
    """Format a run of consecutive input rows (of one or more drifters) for the fixes outputs.

    Parameters
    ----------
    table : pandas.DataFrame
        Flagged rows whose index (input position) counts up by one.
    attrs, columns, max_problems
        As for :func:`render_fixes`.
    formats : tuple of str
        Export formats; empty when only QC ran.

    Returns
    -------
    dict
        :func:`render_fixes`' result with ``start`` (input position of the
        first row) and, instead of a ``layer``, its GeoJSON parts as bytes:
        ``geojson`` (UTF-8 feature text, or None), ``geojson_count`` and
        ``boxes`` (``.npy`` bytes or None).  The formats must not include
        the GeoPackage or GeoParquet ones.
    """
    formats = tuple(f for f in formats if f in ("geojson", "csv"))
    out = render_fixes(table, attrs, columns, formats, max_problems)
    out["start"] = int(table.index[0])
    layer = out.pop("layer")
    out["geojson"] = out["boxes"] = None
    out["geojson_count"] = 0
    if layer is not None and layer.get("geojson") is not None:
        text, count, boxes = layer["geojson"]
        out["geojson"], out["geojson_count"] = text.encode("utf-8"), count
        if boxes is not None:
            buffer = io.BytesIO()
            np.save(buffer, np.asarray(boxes), allow_pickle=False)
            out["boxes"] = buffer.getvalue()
    out["csv"] = out["csv"].encode("utf-8")
    return out


# ---------------------------------------------------------------------------
# the run
# ---------------------------------------------------------------------------


@dataclass
class StreamRun:
    """What :func:`run` did.

    Attributes
    ----------
    files : list of Path
        The files written, ``provenance.json`` last.
    summary : dict
        The ``summary.json`` content.
    inputs : list of dict
        One ``{"file", "rows"}`` entry per input file.
    stage_seconds : dict of str to float
        Time of each stage; the per-drifter stages are summed over drifters
        (over workers when they run in parallel).
    wall_seconds : float
        Wall-clock time of the run.
    problems : pandas.DataFrame
        The first rows (in input order) that did not parse or hold
        impossible coordinates.
    problem_count : int
        How many such rows there are.
    drifters : int
        Drifters processed.
    """

    files: list[Path]
    summary: dict
    inputs: list[dict]
    stage_seconds: dict[str, float]
    wall_seconds: float
    problems: pd.DataFrame
    problem_count: int
    drifters: int


def _read_pass(paths: Sequence[Path], config: Config, spool: _Spool):
    """Read every input, splitting its rows by drifter; returns the index and chunks."""
    index: dict[Any, list[int]] = {}
    chunks: list[tuple[int, int]] = []
    info = []
    row = 0
    attrs: dict | None = None
    last: dict[Any, int] = {}  # last input position of each drifter so far
    runs = 0  # runs of consecutive input rows of one drifter

    def count_runs(key, first: int, end: int, breaks: int = 0) -> None:
        # a piece of a drifter's rows from input position first to end - 1,
        # broken `breaks` times; it continues the drifter's last run or not
        nonlocal runs
        runs += breaks + int(last.get(key, -2) + 1 != first)
        last[key] = end - 1
    for path in sorted(paths, key=str):
        table = read_file(path, config.read)
        info.append({"file": str(path), "rows": len(table)})
        # the whole-table path concatenates the files, which keeps attrs they share
        attrs = dict(table.attrs) if attrs is None or attrs == table.attrs else {}
        pos = 0
        while pos < len(table):
            # chunks fill up across files, so that a folder of small files is
            # written in a few large pieces
            if not chunks or chunks[-1][1] >= CHUNK_ROWS:
                chunks.append((row, 0))
            take = min(len(table) - pos, CHUNK_ROWS - chunks[-1][1])
            piece = table.iloc[pos:pos + take].copy()
            piece.index = pd.RangeIndex(row, row + take)
            chunks[-1] = (chunks[-1][0], chunks[-1][1] + take)
            row += take
            pos += take
            ids = piece["drifter_id"]
            first = ids.iloc[0]
            if pd.notna(first) and bool((ids == first).all()):  # one drifter: no split
                index.setdefault(str(first), []).append(spool.put(piece))
                count_runs(str(first), row - take, row)
                continue
            for key, group in piece.groupby("drifter_id", sort=False, observed=True,
                                             dropna=False):
                key = None if pd.isna(key) else str(key)
                index.setdefault(key, []).append(spool.put(group))
                at = group.index.to_numpy()
                count_runs(key, int(at[0]), int(at[-1]) + 1,
                           int(np.count_nonzero(np.diff(at) != 1)))
        del table
    return index, chunks, info, row, attrs or {}, runs


def _batches(index: dict, spool: _Spool, most: int = BATCH_DRIFTERS
             ) -> Iterator[list[tuple[str | None, pd.DataFrame]]]:
    keys = sorted(k for k in index if k is not None) + ([None] if None in index else [])
    batch: list[tuple[str | None, pd.DataFrame]] = []
    rows = 0
    for key in keys:
        parts = [spool.get(o) for o in index[key]]
        group = parts[0] if len(parts) == 1 else pd.concat(parts)
        batch.append((key, group))
        rows += len(group)
        if rows >= BATCH_ROWS or len(batch) >= most:
            yield batch
            batch, rows = [], 0
    if batch:
        yield batch


def _problem_mask(flagged: pd.DataFrame) -> np.ndarray:
    return flagged["qc_reasons"].str.contains(
        r"unparseable|lat_out_of_range|lon_out_of_range", regex=True
    ).to_numpy(dtype=bool, na_value=False)


def run(
    paths: Sequence[str | Path],
    out_dir: str | Path,
    config: Config | None = None,
    *,
    stages: str = "all",
    formats: Sequence[str] = ("geojson",),
    overwrite: bool = False,
    protect: Sequence[str | Path] = (),
    workers: int = 1,
    scheduler: str | None = None,
    progress: bool = False,
    check: Callable[[pd.DataFrame, int], None] | None = None,
    max_problems: int = 10,
) -> StreamRun:
    """Run driftloop on track files drifter by drifter and write every output.

    Parameters
    ----------
    paths : sequence of path
        Track files (read in sorted path order).
    out_dir : str or Path
        Output folder (as for :meth:`driftloop.pipeline.Analysis.write`).
    config : Config, optional
        Configuration.
    stages : {"all", "qc"}
        ``"qc"`` stops after quality control (``fixes.csv``, its metadata,
        ``summary.json``, ``provenance.json``).
    formats : sequence of str
        GIS formats of the layers, as for :meth:`Analysis.write`.
    overwrite : bool
        Allow writing into a non-empty folder that is not a driftloop run.
    protect : sequence of path
        Files that must never be overwritten (the inputs).
    workers : int
        Processes on this machine that run drifters in parallel (Dask); 1
        runs everything in this process.
    scheduler : str, optional
        Address of a running ``dask.distributed`` scheduler to send the
        drifters to instead.
    progress : bool
        Show a progress bar over drifters when there are many.
    check : callable, optional
        Called with the problem rows and their count before any file is
        renamed into place; raising stops the run and leaves the folder as
        it was.
    max_problems : int
        Problem rows kept for ``check`` and :attr:`StreamRun.problems`.

    Returns
    -------
    StreamRun
        The files written and the summary.

    Raises
    ------
    InputError
        If an input cannot be read or the output folder cannot be used.
    """
    from driftloop.pipeline import (
        FIXES_CSV_COLUMNS,
        OUTPUT_NAMES,
        PROGRESS_MIN_DRIFTERS,
        RUN_MARKER,
        _csv_metadata,
        _refuse_overwriting_inputs,
        _run_provenance,
        prepare_out_dir,
    )

    if stages not in ("all", "qc"):
        raise ValueError(f"stages must be 'all' or 'qc', got {stages!r}")
    config = config or Config()
    wall = time.perf_counter()
    created = not Path(out_dir).exists()
    out = prepare_out_dir(out_dir, overwrite=overwrite)
    _refuse_overwriting_inputs([out / n for n in OUTPUT_NAMES], protect)
    timings: dict[str, float] = {}
    raw = _Spool(out)
    flagged_spool = _Spool(out)
    writers: list[Any] = []
    state = None
    stack = contextlib.ExitStack()
    try:
        from driftloop.parallel import executor

        ex = stack.enter_context(executor(workers, scheduler, preload=WORKER_MODULES))
        ex.warm_up(_warm_up, config)  # the workers load driftloop while the inputs are read
        clock = time.perf_counter()
        index, chunks, info, n_rows, attrs, n_runs = _read_pass([Path(p) for p in paths],
                                                                config, raw)
        timings["read"] = time.perf_counter() - clock
        if n_rows == 0:
            return _whole_table_fallback(paths, out, config, stages, formats, protect, wall)
        analyse = stages == "all"
        info_prov = provenance(config)
        state = _ReleaseState(out, config, analyse)
        export = None
        if analyse:
            from driftloop.export.stream import StreamExport

            gis = [f for f in formats if f != "csv"]
            export = StreamExport(out, [*gis, "csv"], provenance=info_prov)
            writers.append(export)
        by_chunk: list[list[int]] = [[] for _ in chunks]
        starts = np.array([c[0] for c in chunks], dtype=np.int64)
        n_drifters = len(index)
        bar = None
        if progress and n_drifters >= PROGRESS_MIN_DRIFTERS:
            from tqdm import tqdm

            bar = tqdm(total=n_drifters, desc="drifters", unit="drifter", leave=False,
                       disable=None)
        export_formats = tuple(export.formats) if export is not None else ()
        # input grouped by drifter (the usual case): the workers format the
        # fixes outputs too, run by run; otherwise (rows of drifters
        # interleaved) the flagged rows come back and are formatted in input
        # order, a chunk at a time
        # (the GeoPackage and GeoParquet layers want the fixes in large
        # chunks, so with them the flagged rows come back too)
        direct = (n_runs <= DIRECT_RUNS_PER_DRIFTER * max(n_drifters, 1)
                  and not (export is not None and export.needs_frames))
        fixes_args = (attrs, tuple(FIXES_CSV_COLUMNS), max_problems) if direct else None
        fixes_runs: list[_SpooledRun] = []
        # enough batches to keep every worker busy to the end
        most = BATCH_DRIFTERS if ex.threads == 1 else max(
            1, min(BATCH_DRIFTERS, -(-n_drifters // (IN_FLIGHT_BATCHES * ex.threads))))
        for result in ex.map(process_batch, _batches(index, raw, most),
                             args=(config, stages, export_formats, fixes_args)):
            start = time.perf_counter()
            for stage, seconds in result.timings.items():
                timings[stage] = timings.get(stage, 0.0) + seconds
            if result.fixes_runs is not None:
                fixes_runs.extend(_SpooledRun.put(r, flagged_spool) for r in result.fixes_runs)
            else:
                flagged = result.flagged
                which = np.searchsorted(starts, flagged.index.to_numpy(), side="right") - 1
                for c in np.unique(which):
                    by_chunk[c].append(flagged_spool.put(flagged[which == c]))
            state.add(result, export)
            timings["write"] = timings.get("write", 0.0) + time.perf_counter() - start
            if bar is not None:
                bar.update(len(result.drifters))
        if bar is not None:
            bar.close()
        clock = time.perf_counter()
        # the release's drift statistics (a worker's job in a parallel run) are
        # computed while the outputs are written
        drift = ex.submit(release_drift, state.drift_inputs()) if analyse else None
        if direct:
            fixes_csv = _write_runs(out, fixes_runs, flagged_spool, export, max_problems, n_rows)
        else:
            fixes_csv = _fixes_pass(ex, out, by_chunk, flagged_spool, FIXES_CSV_COLUMNS,
                                    export, max_problems, attrs)
        writers.append(fixes_csv.appender)
        if check is not None:
            check(fixes_csv.problems, fixes_csv.problem_count)
        files = [fixes_csv.appender.commit()]
        from driftloop.io.writers import write_json

        write_json(out / "fixes.csv-metadata.json", _csv_metadata("fixes.csv", config))
        files.append(out / "fixes.csv-metadata.json")
        if export is not None:
            files += export.commit()
            files.append(state.write_nc(out / "resampled.nc", info_prov))
            from driftloop.export.formats import write_table_csv

            files += write_table_csv(
                out / "spectra.csv", state.spectra.table().table,
                description="Rotary (Welch) spectra of the resampled velocities, per drifter "
                "and for the release; PSD in (m/s)^2 per cycle per day.",
                provenance=info_prov,
            )
        summary = state.finish(info, fixes_csv.rows, None if drift is None else drift.result())
        ex.close_soon()  # no more work for the workers: they stop while the run ends
        write_json(out / "summary.json", summary)
        timings["write"] = timings.get("write", 0.0) + time.perf_counter() - clock
        wall_s = time.perf_counter() - wall
        doc = _run_provenance(config, info, timings)
        doc["run_seconds"] = round(wall_s, 3)
        write_json(out / RUN_MARKER, doc)
        files += [out / "summary.json", out / RUN_MARKER]
        return StreamRun(files, summary, info, timings, wall_s, fixes_csv.problems,
                         fixes_csv.problem_count, n_drifters)
    except BaseException:
        for writer in writers:
            writer.abort()
        raw.close()
        flagged_spool.close()
        if state is not None:
            state.close()
        if created:  # a failed first run leaves no folder behind, as before it
            with contextlib.suppress(OSError):
                out.rmdir()
        raise
    finally:
        stack.close()
        raw.close()
        flagged_spool.close()
        if state is not None:
            state.close()


def _whole_table_fallback(paths, out, config, stages, formats, protect, wall) -> StreamRun:
    """Write the (empty) outputs of an input without rows by the whole-table path."""
    from driftloop.pipeline import analyse

    result = analyse(list(paths), config, stages=stages)
    files = result.write(out, overwrite=True, protect=protect, formats=formats)
    return StreamRun(files, result.summary, result.inputs, dict(result.stage_seconds),
                     time.perf_counter() - wall, result.fixes.iloc[:0], 0, 0)


@dataclass
class _FixesPass:
    appender: Any
    rows: int
    problems: pd.DataFrame
    problem_count: int


def render_fixes(table: pd.DataFrame, attrs: dict, columns: tuple, formats: tuple,
                 max_problems: int) -> dict:
    """Format one chunk of flagged fixes (in input order) for the outputs.

    Parameters
    ----------
    table : pandas.DataFrame
        The chunk's flagged rows, in input order.
    attrs : dict
        ``attrs`` of the fixes table (kept by the GeoParquet layer).
    columns : tuple of str
        Columns of ``fixes.csv``.
    formats : tuple of str
        Export formats; empty when only QC ran.
    max_problems : int
        Problem rows to keep.

    Returns
    -------
    dict
        ``csv`` (text with header line), ``rows``, ``problems`` (the first
        problem rows), ``problem_count`` and ``layer`` (for
        :meth:`driftloop.export.stream.StreamExport.add_rendered`, or None).
    """
    from driftloop.io.writers import csv_text

    table.attrs = dict(attrs)
    mask = _problem_mask(table)
    out = {"csv": csv_text(table.loc[:, list(columns)]), "rows": len(table),
           "problems": table[mask].head(max_problems), "problem_count": int(mask.sum()),
           "layer": None}
    if formats:
        from driftloop.export.layers import fixes_layer
        from driftloop.export.stream import render_layer

        out["layer"] = render_layer(fixes_layer(table), formats)
    return out


@dataclass
class _SpooledRun:
    """A run of :func:`render_run`, its text and bytes kept in a spool."""

    start: int
    rows: int
    problems: pd.DataFrame
    problem_count: int
    geojson_count: int
    parts: tuple  # spool places of csv, geojson, boxes (None where absent)

    @classmethod
    def put(cls, run: dict, spool: _Spool) -> _SpooledRun:
        parts = tuple(None if run[k] is None else spool._write(run[k])
                      for k in ("csv", "geojson", "boxes"))
        return cls(run["start"], run["rows"], run["problems"], run["problem_count"],
                   run["geojson_count"], parts)

    def get(self, spool: _Spool) -> tuple:
        return tuple(None if where is None else spool._read(where) for where in self.parts)


def _write_runs(out: Path, runs: list[_SpooledRun], spool: _Spool, export, max_problems: int,
                n_rows: int) -> _FixesPass:
    """Write ``fixes.csv`` and the fixes layer from runs formatted by the workers."""
    from driftloop.io.writers import CsvAppender

    runs = sorted(runs, key=lambda r: r.start)
    ends = np.cumsum([r.rows for r in runs])
    if (not runs or int(ends[-1]) != n_rows
            or any(r.start != int(e) - r.rows for r, e in zip(runs, ends, strict=True))):
        raise RuntimeError("the formatted runs of fixes do not cover the input rows once")
    appender = CsvAppender(out / "fixes.csv")
    try:
        for item in runs:
            csv, geojson, boxes = item.get(spool)
            appender.append_text(csv.decode("utf-8"), item.rows)
            if export is not None and geojson is not None:
                if boxes is not None:
                    boxes = np.load(io.BytesIO(boxes), allow_pickle=False)
                export.add_geojson_text("fixes", geojson.decode("utf-8"), item.geojson_count,
                                        boxes)
    except BaseException:
        appender.abort()
        raise
    heads = [r.problems for r in runs if len(r.problems)]
    bad = (pd.concat(heads) if len(heads) > 1 else heads[0]) if heads else runs[0].problems
    count = sum(r.problem_count for r in runs)
    return _FixesPass(appender, appender.rows, bad.head(max_problems), count)


def _fixes_chunks(by_chunk, spool: _Spool) -> Iterator[pd.DataFrame]:
    for offsets in by_chunk:
        parts = [spool.get(o) for o in offsets]
        table = pd.concat(parts) if len(parts) > 1 else parts[0]
        if not table.index.is_monotonic_increasing:  # back to input order
            table = table.sort_index()
        yield table


def _fixes_pass(ex, out: Path, by_chunk, spool: _Spool, columns, export, max_problems: int,
                attrs: dict) -> _FixesPass:
    from driftloop.io.writers import CsvAppender

    appender = CsvAppender(out / "fixes.csv")
    problems: list[pd.DataFrame] = []
    count = kept = 0
    formats = tuple(export.formats) if export is not None else ()
    try:
        for done in ex.map(render_fixes, _fixes_chunks(by_chunk, spool),
                           args=(attrs, tuple(columns), formats, max_problems)):
            appender.append_text(done["csv"], done["rows"])
            count += done["problem_count"]
            if kept < max_problems and len(done["problems"]):
                head = done["problems"].head(max_problems - kept)
                problems.append(head)
                kept += len(head)
            elif not problems:
                problems.append(done["problems"].iloc[:0])
            if done["layer"] is not None:
                export.add_rendered("fixes", done["layer"])
    except BaseException:
        appender.abort()
        raise
    bad = pd.concat(problems) if len(problems) > 1 else problems[0]
    return _FixesPass(appender, appender.rows, bad, count)


def release_drift(inputs: tuple | None) -> dict[str, dict]:
    """Drift statistics of every drifter and of the release from :meth:`_ReleaseState.drift_inputs`.

    A drifter whose grid step is not the release's is computed again on
    that step; the others keep the statistics of their batch.  The work of
    the release entry (the pooled dispersion bootstrap) runs on a worker in
    a parallel run, while this process writes the outputs.
    """
    from driftloop.drift import (
        RELEASE_KEY,
        drift_series,
        drifter_drift_statistics,
        release_drift_statistics,
    )

    if inputs is None:
        return {}
    dt_s, decay, drifters = inputs
    pooled, series = [], []
    result = {}
    for drifter, arrays, local_dt, decay_by, entry in drifters:
        columns = dict(zip(_POOLED, arrays[:len(_POOLED)], strict=True))
        own = (arrays[-2], arrays[-1])
        if local_dt != dt_s:  # a release of mixed grid steps
            rows = pd.DataFrame({"drifter_id": drifter, "segment": 0,
                                 "time": pd.to_datetime(arrays[len(_POOLED)], utc=True),
                                 **columns})
            result[drifter] = drifter_drift_statistics(rows, drifter, decay_by, dt_s)
            own = drift_series(rows, drifter, dt_s)
        else:
            result[drifter] = entry
        pooled.append(columns)
        series.append(own)
    rows = pd.DataFrame({k: np.concatenate([p[k] for p in pooled]) for k in pooled[0]})
    result[RELEASE_KEY] = release_drift_statistics(rows, decay, series, dt_s, len(result))
    return result


class _ReleaseState:
    """What the release-level outputs accumulate over drifters (in drifter order)."""

    def __init__(self, out: Path, config: Config, analyse: bool) -> None:
        from driftloop.spectra import SpectraAccumulator
        from driftloop.summary import SummaryAccumulator

        self.config = config
        self.analyse = analyse
        self.summary = SummaryAccumulator(config)
        self.spectra = SpectraAccumulator()
        self.entries: dict[str, dict] = {}
        self.resample = {"points": 0, "segments": 0, "points_in_gaps": 0, "dropped": []}
        self.loops = {"ridges": 0, "events": 0, "by_kind": dict.fromkeys(_KINDS, 0),
                      "notes": []}
        self.checked = 0
        self.within = 0
        self.drift: dict[str, dict] = {}
        self.local_dt: dict[str, float] = {}
        self.step_counts: dict[int, int] = {}
        self.decay: list[float] = []
        self.decay_by: dict[str, list[float]] = {}
        self.pooled_spool = _Spool(out) if analyse else None
        self.pooled_offsets: list[tuple[str, int]] = []
        self.trajectories: list[tuple[str, int, int]] = []
        self.obs = None
        if analyse:
            from driftloop.io.trajectory_nc import OBS_DTYPES

            self.obs = _Columns(out, OBS_DTYPES)
        self._track_empty = None
        self._events_empty = None

    def add(self, result: BatchResult, export) -> None:
        self.summary.merge(result.summary)
        if not self.analyse:
            return
        info, events = result.track_info, result.events
        event_ids = events["drifter_id"].astype(str).to_numpy() if len(events) else None
        event_kinds = events["kind"].to_numpy(dtype=object) if len(events) else None
        dropped_by: dict[str, int] = {}
        for item in result.dropped:
            key = str(item.get("drifter_id"))
            dropped_by[key] = dropped_by.get(key, 0) + 1
        for drifter in result.drifters:
            if drifter is None:
                continue
            if event_ids is not None:
                kinds = event_kinds[event_ids == drifter]
                counts = {k: int(np.count_nonzero(kinds == k)) for k in _KINDS}
            else:
                counts = dict.fromkeys(_KINDS, 0)
            self.entries[drifter] = {
                "events": counts,
                "resampled_points": info["points"].get(drifter, 0),
                "dropped_segments": dropped_by.get(drifter, 0),
                "inertial_peak": result.peaks.get(
                    drifter, {"checked": False, "reason": "no resampled segment"}),
            }
        self.resample["points"] += info["rows"]
        self.resample["segments"] += info["segments"]
        self.resample["points_in_gaps"] += info["in_gap"]
        self.resample["dropped"].extend(result.dropped)
        self.loops["ridges"] += result.ridges
        self.loops["events"] += int(len(events))
        for k in _KINDS:
            self.loops["by_kind"][k] += int((events["kind"] == k).sum())
        self.loops["notes"].append(result.notes)
        for peak in result.peaks.values():
            if peak.get("checked"):
                self.checked += 1
                self.within += int(bool(peak["within_tolerance"]))
        for rows in result.spectra:
            self.spectra.add_rows(rows)
        for drifter, entry in result.drift.items():
            self.drift[drifter] = entry
            self.local_dt[drifter] = result.local_dt_s[drifter]
            for step, n in result.step_counts[drifter].items():
                self.step_counts[step] = self.step_counts.get(step, 0) + n
            self.decay.extend(result.decay[drifter])
            self.decay_by[drifter] = result.decay[drifter]
            pooled = result.pooled[drifter]
            offset = self.pooled_spool.put_arrays(
                [pooled[n] for n in (*_POOLED, "time_ns")] + list(result.series[drifter]))
            self.pooled_offsets.append((drifter, offset))
        if info["rows"]:
            self.trajectories.extend(info["trajectories"])
            self.obs.append(result.obs)
        if export is not None:
            for name, (text, rows, empty) in result.tables.items():
                export.add_table_text(name, text, rows, empty)
            for name, rendered in result.layers.items():
                export.add_rendered(name, rendered)

    def finish(self, inputs: list[dict], rows_out: int, drift: dict | None = None) -> dict:
        """Assemble the summary; ``drift``: what :func:`release_drift` gave (None: none)."""
        summary = self.summary.finish(inputs, rows_out)
        if not self.analyse:
            return summary
        summary["resample"] = {
            "points": self.resample["points"], "segments": self.resample["segments"],
            "points_in_gaps": self.resample["points_in_gaps"],
            "dropped_segments": self.resample["dropped"],
        }
        notes = _merge_notes(self.loops["notes"])
        summary["loops"] = {"ridges": self.loops["ridges"], "events": self.loops["events"],
                            "by_kind": self.loops["by_kind"], "notes": notes}
        for drifter, entry in summary["drifters"].items():
            entry.update(self.entries.get(drifter, {
                "events": dict.fromkeys(_KINDS, 0), "resampled_points": 0,
                "dropped_segments": 0,
                "inertial_peak": {"checked": False, "reason": "no resampled segment"}}))
        summary["release"]["inertial_peak_check"] = {
            "drifters_checked": self.checked, "within_tolerance": self.within,
            "tolerance": 0.15,
        }
        summary["release"]["notes"].extend(notes)
        drift = drift or {}
        summary["drift"] = drift.get("(release)")
        for drifter, entry in summary["drifters"].items():
            entry["drift"] = drift.get(drifter)
        return summary

    def drift_inputs(self) -> tuple | None:
        """Read back from the spool what :func:`release_drift` needs (None: no drift)."""
        from driftloop.drift import grid_step_from_counts

        if not self.drift:
            return None
        drifters = []
        for drifter, offset in self.pooled_offsets:
            arrays = self.pooled_spool.get_arrays(offset)
            drifters.append((drifter, arrays, self.local_dt[drifter], self.decay_by[drifter],
                             self.drift[drifter]))
        self.pooled_spool.close()
        return grid_step_from_counts(self.step_counts), self.decay, drifters

    def close(self) -> None:
        """Close the temporary files."""
        if self.pooled_spool is not None:
            self.pooled_spool.close()
        if self.obs is not None:
            self.obs.close()

    def write_nc(self, path: Path, info: dict) -> Path:
        from driftloop.io.trajectory_nc import write_trajectories_nc_columns

        drifters = np.array([t[0] for t in self.trajectories], dtype=object)
        segments = np.array([t[1] for t in self.trajectories], dtype=np.int32)
        counts = np.array([t[2] for t in self.trajectories], dtype=np.int32)
        columns = {name: self.obs.array(name) for name in self.obs.dtypes}
        try:
            return write_trajectories_nc_columns(
                path, drifters, segments, counts, columns,
                {"driftloop_provenance": json.dumps(info, sort_keys=True)})
        finally:
            del columns
            self.obs.close()


def _merge_notes(per_drifter: list[list[str]]) -> list[str]:
    """Merge per-drifter notes into the release notes.

    Counts of notes that differ only in their leading number are added up;
    other notes are kept once, in order.
    """
    totals: dict[str, int] = {}
    plain: list[str] = []
    order: list[tuple[str, str]] = []
    for notes in per_drifter:
        for note in notes:
            head, sep, rest = note.partition(" ")
            if sep and head.isdigit():
                if rest not in totals:
                    order.append(("count", rest))
                totals[rest] = totals.get(rest, 0) + int(head)
            elif note not in plain:
                plain.append(note)
                order.append(("plain", note))
    return [f"{totals[text]} {text}" if kind == "count" else text for kind, text in order]

