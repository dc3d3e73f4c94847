"""``railtrace analyse``: one clip in, a results folder out.

frames -> calibrated table coordinates (``vision.calibrate`` or a calibration file) ->
detections (``vision.detect``) -> tracks (``tracking.tracker``) -> events and shots
(``tracking.events``), with each stay at rest held at one place (``tracking.rests``) -> ``tracks.csv``, ``events.csv``, ``shots.csv``, ``calibration.json``,
``detections.csv`` and ``run.json`` (``railtrace.results``), written all at once or not at all.

The clip is streamed: frames are decoded, detected and dropped one at a time, decoding in a
thread ahead of the detector where there is a spare core. With ``workers`` other than 1,
detection, most of the work, runs in parallel: the clip is cut in time into one part per worker
process (:func:`split_frames`), each part's detector starting ``chunk_warmup_s`` before its
part (its first frame builds the background, as at the start of a clip) and keeping only its
own frames; tracking and events then run once over the joined detections (the event
finder's contact fits shared with a forked copy per spare core, ``EventConfig.workers``); this
process begins tracking its own part as soon as it is detected, while the others' processes
still detect (:class:`_EarlyTracks`). The later parts'
processes are started before calibration, so their start-up and their decoding up to their
part (from the last keyframe before it, ``vision.video.iter_frames``) overlap it; while they wait for the cameras they take on pieces of the calibration's own
work (``vision.calibrate.calibrate``'s ``run_map``: half of the cushion sides' nose searches),
which give the same results to the last bit in any process.
"""

from __future__ import annotations

import io
import itertools
import logging
import math
import resource
import threading
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

import pandas as pd

from railtrace.results import write_results
from tracking.events import EventConfig, find_events_and_rests
from tracking.rests import hold_rests
from tracking.share import start_process, stop_processes
from tracking.tracker import TrackerConfig, TrackFeed, track
from vision.calibfile import calibration_dict, read_calibration
from vision.calibrate import CalibConfig, calibrate
from vision.camera import Camera
from vision.detect import BallDetector, DetectConfig, stack_detections
from vision.table import TableSpec
from vision.video import iter_frames, probe, usable_cores

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class AnalyseConfig:
    """Everything that steers one analysis: the table, an optional calibration file, and each
    stage's own configuration.

    ``workers``: processes that detect balls, each on its own part of the clip; the default, 0,
    is one per core this process may run on (``taskset`` respected), so a 2-core machine
    detects the two halves of a clip at once; a clip shorter than ``2 * chunk_min_s`` s is not
    split. 1 gives exactly the detections of one pass; a later part's detector starts with a
    fresh background, so its detections differ slightly (measured on the small test clip filmed
    with six scene seeds, cut in two: 99 % of the positions within 0.07-0.26 mm of one pass's;
    after the cut a median move of 0.01-0.02 mm and the largest 0.12-0.78 mm, on moving balls,
    whose error against the truth stayed as it was, median 0.51-0.68 mm either way; a longer
    warm-up does not shrink it, as the background's running update forgets its start only
    slowly; on the 38 s bank sample,
    against one pass with the truth calibration, the same cushion contacts within noise (along
    the rail 0.39 vs 0.386 mm, outgoing angle 0.497 vs 0.502 deg, outgoing speed 0.54 vs
    0.46 %, restitution 0.0087 vs 0.0079, medians) and two extra short false tracks of 9-10 frames; on the 82 s cushion
    sample the same 54 of 56 contacts, along the rail 0.24 vs 0.20 mm, outgoing angle 0.23 vs
    0.19 deg, outgoing speed 0.28 vs 0.26 %, no identity switch (2 in one pass), 44 tracks for
    40). The split costs a second background and decoding up to the cut (in processor time
    within the noise of runs on a loaded machine: detection 54.0-55.5 s split, 51.4-54.5 s in
    one pass).
    ``chunk_warmup_s``: how long before its part each later part's detector starts, so its
    background and change state have settled when its own frames begin.
    """

    table: TableSpec
    calibration_path: Path | None = None
    calib: CalibConfig = field(default_factory=CalibConfig)
    detect: DetectConfig = field(default_factory=DetectConfig)
    tracker: TrackerConfig = field(default_factory=TrackerConfig)
    events: EventConfig = field(default_factory=EventConfig)
    workers: int = 0
    chunk_warmup_s: float = 1.0
    chunk_min_s: float = 8.0

    def __post_init__(self) -> None:
        if int(self.workers) < 0:
            raise ValueError(f"workers = {self.workers!r} must be 0 (one per core) or a positive count")
        if not self.chunk_warmup_s >= 0 or not self.chunk_min_s > 0:
            raise ValueError(f"chunk_warmup_s = {self.chunk_warmup_s!r} must be >= 0 and chunk_min_s = {self.chunk_min_s!r} positive")


@dataclass(frozen=True)
class AnalyseSummary:
    """What one analysis found, for the closing summary line (times in s). ``stage_seconds``:
    wall time of each stage (``calibration``, ``detection``, ``tracking``, ``events``,
    ``writing``)."""

    out_dir: Path
    frames: int
    duration_s: float
    shots: int
    cushions: int
    collisions: int
    pocketed: int
    balls: int
    calibration_source: str
    calibration_quality: dict
    seconds: float
    stage_seconds: dict = field(default_factory=dict)
    stage_cpu_seconds: dict = field(default_factory=dict)

    def text(self) -> str:
        """A short human summary."""
        q = self.calibration_quality
        quality = f"noses rms {q['nose_rms_px']:.2f} px" if "nose_rms_px" in q else "from file"
        if q.get("height_from") == "typical":
            quality += (f", square-on view: typical camera height assumed, ball positions "
                        f"+- {q['ball_position_sd_mm']:.1f} mm (1 sd)")
        return (
            f"{self.frames} frames ({self.duration_s:.1f} s) in {self.seconds:.1f} s: "
            f"{self.balls} balls, {self.shots} shots, {self.cushions} cushion contacts, "
            f"{self.collisions} collisions, {self.pocketed} pocketed; calibration "
            f"{self.calibration_source} ({quality}); results in {self.out_dir}/"
        )


def analyse_clip(
    clip: str | Path,
    out_dir: str | Path,
    config: AnalyseConfig,
    progress: Callable[[int, int], None] | None = None,
) -> AnalyseSummary:
    """Analyse ``clip`` into ``out_dir`` (which must not exist). ValueError with a one-line
    message for bad input; nothing is written unless the whole analysis succeeds."""
    t0 = time.perf_counter()
    clip, out = Path(clip), Path(out_dir)
    if out.exists():
        raise ValueError(f"output folder {out} exists already; choose a new --out or remove it first")
    info = probe(clip)
    stages: dict[str, float] = {}
    cpu: dict[str, float] = {}
    mark = [time.perf_counter(), _cpu_seconds()]

    def done(stage: str) -> None:
        now = [time.perf_counter(), _cpu_seconds()]
        stages[stage], cpu[stage] = now[0] - mark[0], now[1] - mark[1]
        mark[:] = now

    parts = _plan_parts(info, config)
    # Later parts' processes start now: they load, and decode up to their part, while this one
    # calibrates; they wait for the cameras before detecting.
    helpers = _Helpers(clip, parts[1:], info.frame_count) if len(parts) > 1 else None
    try:
        table, cameras, source, quality, calib_doc = _calibration(clip, config, None if helpers is None else helpers.run_map)
        done("calibration")
        early = _EarlyTracks(table, config.tracker)
        detections = _detect_parts(clip, table, cameras, config, info, parts, helpers, progress, early.take)
    finally:
        if helpers is not None:
            helpers.close()
    done("detection")
    # Tracking and events run on the detections as written (micrometre decimals), so what
    # they find is what detections.csv reproduces (extra clip uneven_60fps once gave 2 identity
    # switches on the unrounded detections and none on the written ones, through the tracker's
    # inexact third differences since mended: _Track.note_scatter).
    detections_csv, detections = _as_written(detections)
    tracks = early.finish(detections)
    done("tracking")
    events, shots, rests = find_events_and_rests(tracks, table, detections, config.events)
    # A resting ball lies in one place until something touches it (tracking.rests).
    tracks = hold_rests(tracks, rests, detections)
    done("events")
    run_info = {
        "clip": str(clip),
        "frames": int(detections["frame"].max() + 1) if len(detections) else info.frame_count,
        "config": _jsonable(asdict(config)),
    }
    write_results(
        out, tracks, events, shots, calib_doc, overwrite=False, run_info=run_info,
        extra_files={"detections.csv": detections_csv},
    )
    done("writing")
    counts = events["kind"].value_counts() if len(events) else pd.Series(dtype=int)
    return AnalyseSummary(
        out_dir=out,
        frames=info.frame_count,
        duration_s=info.duration_s,
        shots=len(shots),
        cushions=int(counts.get("cushion", 0)),
        collisions=int(counts.get("collision", 0)) // 2,
        pocketed=int(counts.get("pocket", 0)),
        balls=int(tracks["track"].nunique()) if len(tracks) else 0,
        calibration_source=source,
        calibration_quality=quality,
        seconds=time.perf_counter() - t0,
        stage_seconds=stages,
        stage_cpu_seconds=cpu,
    )


def _cpu_seconds() -> float:
    """Processor seconds used so far by this process (all threads) and its finished children."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def _calibration(clip: Path, config: AnalyseConfig, run_map: Callable | None = None):
    """(table, [(t_from_s, Camera)], source, quality dict, calibration.json dict); ``run_map``
    as :func:`vision.calibrate.calibrate`'s."""
    if config.calibration_path is not None:
        table, camera, doc = read_calibration(config.calibration_path)
        if camera is None:
            raise ValueError(f"{config.calibration_path} holds no camera model; run 'railtrace calibrate' on a clip from this camera")
        changes = [(float(c["t"]), Camera.from_dict(c["camera"])) for c in doc.get("camera_changes", [])]
        return table, changes or [(0.0, camera)], "file", doc.get("quality", {}), doc
    cal = calibrate(clip, config.table, config.calib, run_map=run_map)
    changes = list(cal.camera_changes) or [(0.0, cal.camera)]
    doc = calibration_dict(
        config.table, cal.camera, "auto",
        camera_changes=changes if len(changes) > 1 else None,
        quality=cal.quality, origin=cal.origin,
    )
    return config.table, changes, "auto", cal.quality, doc


def split_frames(n_frames: int, parts: int, warmup: int) -> list[tuple[int, int, int | None]]:
    """Cut frames ``0 .. n_frames - 1`` into ``parts`` consecutive parts of near-equal length:
    a list of ``(first frame read, first frame kept, end)`` per part; the first part reads from
    0, a later one ``warmup`` frames before its own; ``end`` is exclusive and None for the last
    part (read to the end of the file, whatever the header's frame count said)."""
    if n_frames < 1 or parts < 1 or warmup < 0:
        raise ValueError(f"cannot split {n_frames} frames into {parts} parts with {warmup} warm-up frames")
    parts = min(parts, n_frames)
    cuts = [round(k * n_frames / parts) for k in range(parts + 1)]
    out = []
    for k in range(parts):
        keep = cuts[k]
        out.append((max(keep - warmup, 0), keep, None if k == parts - 1 else cuts[k + 1]))
    return out


def _plan_parts(info, config: AnalyseConfig) -> list[tuple[int, int, int | None]]:
    """The clip's parts for detection (:func:`split_frames`), one per worker process; a single
    ``(0, 0, None)`` when it is not split (one worker, or a clip too short for two parts of
    ``chunk_min_s``)."""
    workers = int(config.workers) or usable_cores()
    fps = info.fps if info.fps > 0 else 30.0
    n = info.frame_count
    if n < 2 * config.chunk_min_s * fps:
        workers = 1
    else:
        workers = max(1, min(workers, int(n // (config.chunk_min_s * fps))))
    if workers == 1:
        return [(0, 0, None)]
    return split_frames(n, workers, int(math.ceil(config.chunk_warmup_s * fps)))


def _detect_parts(clip, table, cameras, config: AnalyseConfig, info, parts, helpers, progress,
                  own_done: Callable[[pd.DataFrame], None] | None = None) -> pd.DataFrame:
    """Detections of the whole clip: the first part in this process (which alone reports
    progress), the others in the ``helpers`` processes, alongside; ``own_done(detections)`` is
    called with the first part's as soon as they are complete, before the others are awaited."""
    if helpers is None:
        # A decoding thread only helps with a spare core.
        return _detect(clip, table, cameras, config.detect, 0, None, info.frame_count, progress,
                       read_ahead=8 if usable_cores() > 1 else 0)
    helpers.go(table, cameras, config.detect)
    a, b, e = parts[0]
    results = [_detect(clip, table, cameras, config.detect, a, (b, e), info.frame_count, progress)]
    if own_done is not None:
        own_done(results[0])
    results += helpers.results()
    filled = [r for r in results if len(r)]
    return pd.concat(filled, ignore_index=True) if filled else results[0]


def _as_written(detections: pd.DataFrame) -> tuple[str, pd.DataFrame]:
    """``detections`` as detections.csv holds them (CSV text, micrometre decimals) and as read
    back from that text."""
    text = detections.to_csv(index=False, float_format="%.6f")
    return text, pd.read_csv(io.StringIO(text), dtype={"colour": str, "pattern": str})


class _EarlyTracks:
    """Tracking begun on the clip's first part while the other parts' processes still detect
    (:class:`tracking.tracker.TrackFeed`), so this process's core does not wait idle; the
    tracks are those of :func:`tracking.tracker.track` on the whole, to the bit.

    :meth:`take` steps the tracker through the first part's detections as written and read
    back (micrometre decimals, as the whole's are); :meth:`finish` checks that those rows are
    the whole's first rows, value for value, and steps through the rest, or tracks the whole
    afresh where they are not (or the first part could not be tracked on its own)."""

    def __init__(self, table: TableSpec, config: TrackerConfig):
        self.table, self.config = table, config
        self.feed: TrackFeed | None = None
        self.head: pd.DataFrame | None = None

    def take(self, part: pd.DataFrame) -> None:
        if not len(part):
            return
        head = _as_written(part)[1]
        feed = TrackFeed(self.table, self.config)
        try:
            feed.add(head)
        except ValueError:  # raised again, where it belongs, by the whole's tracking
            return
        self.feed, self.head = feed, head

    def finish(self, detections: pd.DataFrame) -> pd.DataFrame:
        """The tracks of ``detections`` (the whole clip's, as read back)."""
        n = 0 if self.head is None else len(self.head)
        if self.feed is None or not _same_rows(detections.iloc[:n].reset_index(drop=True), self.head):
            return track(detections, self.table, self.config)
        self.feed.add(detections.iloc[n:])
        return self.feed.result()


def _same_rows(a: pd.DataFrame, b: pd.DataFrame) -> bool:
    """True when ``a`` and ``b`` hold the same columns, dtypes and values (floats bit for bit)."""
    if list(a.columns) != list(b.columns) or not a.dtypes.equals(b.dtypes) or len(a) != len(b):
        return False
    for c in a.columns:
        x, y = a[c].to_numpy(), b[c].to_numpy()
        if x.dtype.kind == "f":
            if x.tobytes() != y.tobytes():
                return False
        elif not a[c].equals(b[c]):
            return False
    return True


class _Helpers:
    """Worker processes, one per later part of the clip (:func:`_part_worker`), started before
    calibration, which may hand them work through :meth:`run_map` until :meth:`go` gives them
    the cameras. Spawned, not forked: a fork copies this process's decoder and OpenCV thread
    pools in whatever state they are."""

    def __init__(self, clip: Path, parts: list[tuple[int, int, int | None]], n_frames: int):
        self.procs, self.conns = [], []
        try:
            for a, b, e in parts:
                proc, conn = start_process("spawn", _part_worker, (str(clip), a, (b, e), n_frames), "railtrace-detect")
                self.procs.append(proc)
                self.conns.append(conn)
        except BaseException:
            self.close()
            raise

    def go(self, table, cameras, detect_config) -> None:
        for conn in self.conns:
            conn.send(("go", table, cameras, detect_config))

    def run_map(self, fn: Callable, jobs: list[tuple]) -> list:
        """``[fn(*job) for job in jobs]``, in order, the jobs shared in near-equal consecutive
        groups between this process (the first group) and the waiting workers (:func:`_serve`).
        ``fn`` must be a top-level function and the jobs picklable. The requests are sent from
        a thread, as a large one blocks until its worker reads it (a worker still decoding up
        to its part reads it only then), while this process works through its own group."""
        n = 1 + len(self.conns)
        groups = [jobs[round(k * len(jobs) / n) : round((k + 1) * len(jobs) / n)] for k in range(n)]
        asked = [(conn, group) for conn, group in zip(self.conns, groups[1:]) if group]
        def send() -> None:
            for conn, group in asked:
                try:
                    conn.send(("run", fn, group))
                except OSError:  # the worker is gone: its recv below says so
                    pass

        sender = threading.Thread(target=send, daemon=True, name="railtrace-calibration-requests")
        sender.start()
        out = [fn(*job) for job in groups[0]]
        sender.join()
        for conn, _ in asked:
            out += _answer(conn, "while calibrating")
        return out

    def results(self) -> list[pd.DataFrame]:
        return [_answer(conn, "without its results") for conn in self.conns]

    def close(self) -> None:
        """Tell waiting workers to stop, and end them (a worker that fails to end in 10 s is
        terminated)."""
        stop_processes(self.procs, self.conns, None)


def _answer(conn, ended: str):
    """A worker's next answer on ``conn``: its value, or its ValueError raised here; a worker
    gone before answering is a ValueError saying it ended ``ended``."""
    try:
        kind, value = conn.recv()
    except EOFError:
        raise ValueError(f"a detection worker process ended {ended} (out of memory?); run again with --workers 1 (AnalyseConfig.workers = 1)") from None
    if kind == "error":
        raise value
    return value


def _part_worker(conn, clip: str, read_from: int, keep: tuple[int, int | None], n_frames: int) -> None:
    """A worker process's whole life: decode up to its part, wait for ``(table, cameras,
    detect config)`` on ``conn`` (None: stop) while running the calibration's requests
    (:func:`_serve`), detect its part, send ``("ok", detections)`` or ``("error", ValueError)``.
    Top-level, so a spawned process can run it."""
    try:
        out = _detect(Path(clip), None, None, None, read_from, keep, n_frames, None, wait=lambda: _serve(conn))
        if out is not None:
            conn.send(("ok", out))
    except EOFError:  # the analysis ended without starting this part
        return
    except BaseException as exc:  # handed to the analysing process, which raises it
        message = str(exc) if isinstance(exc, ValueError) else f"detection failed in a worker process ({type(exc).__name__}: {exc})"
        try:
            conn.send(("error", ValueError(message)))
        except OSError:
            pass


def _serve(conn):
    """A waiting worker's side of :meth:`_Helpers.run_map`: answers each ``("run", fn, jobs)``
    on ``conn`` with ``("ok", [fn(*job) for job in jobs])`` (or ``("error", exception)``) until
    ``("go", table, cameras, detect config)`` comes, and returns that triple (None for None)."""
    while True:
        message = conn.recv()
        if message is None:
            return None
        kind, *rest = message
        if kind == "go":
            return tuple(rest)
        fn, jobs = rest
        try:
            reply = ("ok", [fn(*job) for job in jobs])
        except Exception as exc:  # raised in the calibrating process, where it belongs
            reply = ("error", exc)
        try:
            conn.send(reply)
        except Exception:  # an exception that does not pickle: its words still do
            conn.send(("error", ValueError(f"calibration work failed in a worker process ({type(reply[1]).__name__}: {reply[1]})")))


def _detect(clip, table, cameras, detect_config, read_from, keep, n_frames, progress, read_ahead: int = 0, wait=None) -> pd.DataFrame | None:
    """Stream the clip through a detector from frame ``read_from``, switching to a new one
    where the camera moved; ``keep`` None keeps every frame read, else ``(first, end)`` keeps
    frames ``first <= index < end`` (end None: to the end of the clip). With ``wait``, the
    clip is first decoded up to ``read_from`` and then ``wait()`` gives ``(table, cameras,
    detect_config)`` (None: return None at once)."""
    first, end = (read_from, None) if keep is None else keep
    steps = []
    k, detector = -1, None
    try:
        frames = iter_frames(clip, read_ahead=read_ahead, start=read_from, stop=end)
        if wait is not None:
            head = next(frames, None)  # the frames before read_from are decoded by now
            given = wait()
            if given is None:
                frames.close()
                return None
            table, cameras, detect_config = given
            frames = itertools.chain([] if head is None else [head], frames)
        for index, t, img in frames:
            while k + 1 < len(cameras) and cameras[k + 1][0] <= t + 1e-9:
                k += 1
                detector = BallDetector(cameras[k][1], table, detect_config)
            det = detector.step_rows(index, t, img)
            if index >= first:
                steps.append((index, t, det))
            if progress is not None:
                # The first part stands for the whole clip: the other parts run alongside it.
                done = index + 1 if end is None else (index + 1) * n_frames // end
                progress(min(done, n_frames), n_frames)
    except (ValueError, EOFError):  # EOFError: a worker's wait() found the analysis gone
        raise
    except Exception as exc:  # a decoder error part-way through: the file is damaged
        raise ValueError(f"{clip} could not be decoded to the end ({type(exc).__name__}: {exc}); the file may be truncated") from None
    if read_from > 0 and not steps:
        raise ValueError(f"{clip} ends before frame {first} although its header promises {n_frames} frames; the file may be truncated")
    return stack_detections(steps)


def _jsonable(obj):
    if isinstance(obj, dict):
        return {k: _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (str, int, float, bool)) or obj is None:
        return obj
    return str(obj)
