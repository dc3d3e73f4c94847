"""Video files in and out, streaming, with exact presentation times (PyAV / FFmpeg).

Frames are (H, W, 3) uint8 BGR arrays (OpenCV's channel order, ``img[v, u]``); times are seconds.
:func:`iter_grey` gives downscaled grey frames for whole-clip passes, with the full BGR frame
converted only on request.
"""

from __future__ import annotations

import itertools
import math
import os
import queue
import threading
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path
from typing import Any, Iterable, Iterator

import av
import cv2
import numpy as np

from vision.atomic import atomic_path

_CODECS = {"h264": "libx264", "mpeg4": "mpeg4"}


@dataclass(frozen=True)
class VideoInfo:
    """What a video file's first video stream holds: size (px), average frame rate (frames/s),
    frame count (from the container, else estimated as duration x fps), duration (s) and codec."""

    width: int
    height: int
    fps: float
    frame_count: int
    duration_s: float
    codec: str


def _rate(fps: float) -> Fraction:
    """Frame rate as an exact fraction: 29.97 -> 2997/100, 30000/1001 stays 30000/1001."""
    try:
        value = float(fps)
    except (TypeError, ValueError):
        raise ValueError(f"fps {fps!r} is not a number; give frames per second, e.g. 60 or 29.97") from None
    if not (0 < value <= 1000):
        raise ValueError(f"fps {fps!r} is outside 0..1000; give frames per second, e.g. 60 or 29.97")
    return Fraction(value).limit_denominator(10000)


def write_video(path, frames: Iterable[np.ndarray], fps: float, codec: str = "h264", quality: int = 23, preset: str = "medium") -> int:
    """Encode ``frames`` ((H, W, 3) uint8 BGR, all one size, even width and height) to ``path``.

    ``codec`` is ``h264`` (libx264, yuv420p, constant rate factor ``quality`` 0..51, lower is
    better; ``preset`` is libx264's speed preset, without B-frames) or ``mpeg4`` (yuv420p, fixed
    quantiser ``quality`` 1..31). The container follows the file's extension (.mp4, .mkv, .avi,
    .mov). Identical frames give a byte-identical file, whatever the machine's core count, the
    process's floating-point mode or the state of its heap: libx264 runs on one thread and without
    B-frames. With B-frames, libx264's macroblock-tree rate control (Garrett-Glaser 2009, "A novel
    macroblock-tree algorithm for high-performance optimization of dependent video coding in
    H.264/AVC") depended on heap memory it had not written (x264 core 165: one file per
    ``MALLOC_PERTURB_`` fill byte). Its thread count is chosen from the cores the process may use
    and changes the file (measured on the test's 40 noisy 480 x 272 frames at crf 23: 4230, 4787,
    7335 and 6258 bytes for 1, 2, 3 and 4 threads), and with two threads a process with the SSE
    flush-to-zero flag set (as a library built with fast-math sets it) gave another file on 5
    encodes of 50; one
    CI run wrote a different file inside the test process than in fresh ones. One thread costs
    about 1.5 times the encoding time (2.0 -> 3.0 s for 120 720p frames) for a smaller file of
    the same fidelity (crf 18: 9.6 kB and 2.63 DN mean absolute error, against 10.9 kB and 2.62
    DN with two threads); the macroblock tree and the rest of the preset stay.
    Frame i is stamped at exactly i / fps s: the stream's time base is 1 / numerator of the
    frame rate as a fraction, so 60, 29.97 (2997/100) and 30000/1001 are all exact. Frames are
    encoded as they arrive (the clip is never held in memory); the file is written under a
    temporary name in the same folder and renamed when complete, so an error leaves no file.
    Returns the number of frames written.
    """
    if codec not in _CODECS:
        raise ValueError(f"codec {codec!r} is not supported; use one of: {', '.join(_CODECS)}")
    rate = _rate(fps)
    q = int(quality)
    if codec == "h264" and not 0 <= q <= 51:
        raise ValueError(f"h264 quality (crf) {quality!r} is outside 0..51; 18-28 is usual")
    if codec == "mpeg4" and not 1 <= q <= 31:
        raise ValueError(f"mpeg4 quality (quantiser) {quality!r} is outside 1..31; 2-6 is usual")
    path = Path(path)
    if not path.parent.is_dir():
        raise ValueError(f"folder {str(path.parent)!r} does not exist; create it first")
    count = 0
    container = None
    with atomic_path(path, suffix=f".partial{path.suffix}") as tmp:
        try:
            fmt = None if path.suffix else "mp4"
            container = av.open(str(tmp), mode="w", format=fmt)
            stream = None
            for frame in frames:
                arr = np.asarray(frame)
                if arr.ndim != 3 or arr.shape[2] != 3 or arr.dtype != np.uint8:
                    raise ValueError(f"frame {count} has shape {arr.shape} and dtype {arr.dtype}; expected (H, W, 3) uint8 BGR")
                if stream is None:
                    h, w = arr.shape[:2]
                    if h % 2 or w % 2:
                        raise ValueError(f"frame size {w}x{h} is odd; yuv420p needs even width and height (crop a row or column)")
                    stream = container.add_stream(_CODECS[codec], rate=rate)
                    stream.width, stream.height = w, h
                    stream.pix_fmt = "yuv420p"
                    tb = Fraction(1, rate.numerator)
                    stream.time_base = tb
                    stream.codec_context.time_base = tb
                    if codec == "h264":
                        stream.options = {"crf": str(q), "preset": preset, "x264-params": "bframes=0:threads=1"}
                    else:
                        stream.codec_context.qscale = q
                    size = (h, w)
                elif arr.shape[:2] != size:
                    raise ValueError(f"frame {count} is {arr.shape[1]}x{arr.shape[0]}, but the clip is {size[1]}x{size[0]}")
                vf = av.VideoFrame.from_ndarray(np.ascontiguousarray(arr), format="bgr24")
                vf.pts = count * rate.denominator  # i / fps in units of 1 / numerator
                vf.time_base = tb  # the muxer may rescale the stream's own time base once it opens
                for packet in stream.encode(vf):
                    container.mux(packet)
                count += 1
            if stream is None:
                raise ValueError("no frames to write; give at least one frame")
            for packet in stream.encode():
                container.mux(packet)
            container.close()
            container = None
        except BaseException:
            if container is not None:
                try:
                    container.close()
                except Exception:  # the original error matters, not a failure to close a broken file
                    pass
            raise
    return count


def _open(path) -> "av.container.InputContainer":
    path = Path(path)
    if not path.exists():
        raise ValueError(f"video file {str(path)!r} does not exist")
    try:
        container = av.open(str(path))
    except av.FFmpegError as exc:
        raise ValueError(f"{str(path)!r} is not a readable video file ({exc.__class__.__name__})") from None
    if not container.streams.video:
        container.close()
        raise ValueError(f"{str(path)!r} has no video stream")
    return container


def usable_cores() -> int:
    """Cores this process may run on (``taskset`` and container limits respected where the
    system reports them)."""
    try:
        return max(len(os.sched_getaffinity(0)), 1)
    except AttributeError:  # not every system has affinity masks
        return max(os.cpu_count() or 1, 1)


def iter_frames(path, read_ahead: int | None = None, start: int = 0, stop: int | None = None) -> Iterator[tuple[int, float, np.ndarray]]:
    """Stream ``(index from 0, presentation time s, (H, W, 3) uint8 BGR frame)`` from a video file.

    Times come from the container's timestamps, relative to the first frame, so variable frame
    rate clips are right. ValueError with a one-line message for a missing file, a file that is
    not a video, or one without a video stream.

    ``read_ahead`` > 0 decodes in a background thread up to that many frames ahead of the
    caller (FFmpeg's decoding and colour conversion release Python's global lock, so on a
    machine with a spare core decoding overlaps the caller's work); the frames, times and
    errors are the same as with 0, which decodes in the caller's thread. None: 4 where this
    process may use more than one core (:func:`usable_cores`), else 0.

    ``start`` / ``stop``: only frames with ``start <= index < stop`` are yielded (indices and
    times stay those of the whole clip). Decoding begins at the last keyframe before ``start``
    where that gives the same frames (:func:`_keyframe_before`: on the 38 s 720p60 bank sample,
    whose keyframes are about 250 frames apart, the second detection process's start at frame
    1082 is decoded from frame 996, not from 0); the frames decoded before ``start`` are not
    converted to BGR, which is most of a plain read's cost after decoding; reading stops after
    ``stop - 1``.
    """
    if read_ahead is None:
        read_ahead = 4 if usable_cores() > 1 else 0
    if read_ahead < 0:
        raise ValueError(f"read_ahead {read_ahead!r} is negative; give 0 (no decoding thread) or a frame count such as 8")
    if start < 0 or (stop is not None and stop < start):
        raise ValueError(f"frame range {start}..{stop} is not 0 <= start <= stop")
    if read_ahead == 0:
        yield from _decode(path, start, stop)
        return
    yield from _threaded(_decode(path, start, stop), int(read_ahead))


@dataclass(frozen=True)
class GreyFrame:
    """One decoded frame as :func:`iter_grey` gives it: ``index`` from 0, ``t`` presentation time
    (s, as :func:`iter_frames`), ``grey`` the (h, w) float32 downscaled grey image, and
    :meth:`bgr` the full frame, converted only when asked for."""

    index: int
    t: float
    grey: np.ndarray
    _frame: Any = field(repr=False, compare=False)

    def bgr(self) -> np.ndarray:
        """The (H, W, 3) uint8 BGR frame, pixel for pixel what :func:`iter_frames` yields."""
        return self._frame.to_ndarray(format="bgr24")


# 8-bit formats whose first plane is the luma Y' (BT.601/709: Y' = 0.299 R' + 0.587 G' + 0.114 B',
# the weights of cv2.COLOR_BGR2GRAY, so Y' is that grey up to range and rounding).
_LUMA_FIRST = {"yuv420p", "yuvj420p", "yuv422p", "yuvj422p", "yuv444p", "yuvj444p", "nv12", "nv21", "gray"}


def area_down(img: np.ndarray, scale: float) -> np.ndarray:
    """``cv2.resize(img, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA)`` of a uint8
    image; where 1 / scale is a power of two dividing both sides, by halving repeatedly
    (OpenCV's area resize has a fast path for a factor of two: a 1280 x 720 plane by four
    took an eighth of the time so, a colour frame by eight a third), each halving rounding to
    whole levels, so a pixel may differ from the one resize's by up to a level for a factor of
    four and two for eight."""
    h, w = img.shape[:2]
    k = round(1.0 / scale)
    if k < 2 or k & (k - 1) or abs(k * scale - 1.0) > 1e-9 or h % k or w % k:
        return cv2.resize(img, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA)
    while k > 1:
        img = cv2.resize(img, (img.shape[1] // 2, img.shape[0] // 2), interpolation=cv2.INTER_AREA)
        k //= 2
    return img


def _grey_small(frame, scale: float) -> np.ndarray:
    """(h, w) float32 grey of an ``av.VideoFrame`` downscaled by ``scale`` (area averaging, as
    ``cv2.resize(..., INTER_AREA)`` of the full grey image, :func:`area_down`), on the 0..255 scale of
    ``cv2.COLOR_BGR2GRAY`` applied to the BGR frame.

    Where the frame's first plane is 8-bit luma, it is used as it is stored, skipping the colour
    conversion (most of a plain read's cost after decoding); studio-range luma (16..235, ITU-R
    BT.601 / BT.709, FFmpeg's default when a stream does not say) is stretched to 0..255 as the
    BGR conversion does. Measured against the grey of the BGR frame (720p bank sample at full
    size, the test clip at half size): a near-constant offset of 1.3-1.4 DN (the conversion's
    rounding) and at most 2.6 DN; frame differences and alignments do not see the offset."""
    name = frame.format.name
    if name in _LUMA_FIRST:
        plane = frame.planes[0]
        y = np.frombuffer(plane, np.uint8).reshape(plane.height, plane.line_size)[:, : plane.width]
        small = area_down(y, scale).astype(np.float32)
        full_range = name.startswith("yuvj") or name == "gray" or int(frame.color_range or 0) == 2  # AVCOL_RANGE_JPEG
        if not full_range:
            small = (small - 16.0) * np.float32(255.0 / 219.0)
        return small
    grey = cv2.cvtColor(frame.to_ndarray(format="bgr24"), cv2.COLOR_BGR2GRAY)
    return cv2.resize(grey, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA).astype(np.float32)


def iter_grey(path, scale: float, read_ahead: int | None = None) -> Iterator[GreyFrame]:
    """Stream a video file as :class:`GreyFrame` s: each frame's grey image downscaled by
    ``scale`` (0 < scale <= 1, :func:`_grey_small`), its index and time as :func:`iter_frames`
    gives them, and its full BGR frame on request. For whole-clip passes that look at every
    frame small and at a few in full (calibration's still frames and camera bumps): the full
    colour conversion is skipped for the others. ``read_ahead`` and errors as
    :func:`iter_frames`; the downscaling runs in the decoding thread when there is one."""
    if not (0 < scale <= 1):
        raise ValueError(f"scale {scale!r} is outside (0, 1]; give the downscaling factor, e.g. 0.25")
    if read_ahead is None:
        read_ahead = 4 if usable_cores() > 1 else 0
    if read_ahead < 0:
        raise ValueError(f"read_ahead {read_ahead!r} is negative; give 0 (no decoding thread) or a frame count such as 8")
    frames = _decode(path, convert=lambda i, t, f: GreyFrame(i, t, _grey_small(f, scale), f))
    yield from (frames if read_ahead == 0 else _threaded(frames, int(read_ahead)))


def _bgr(index: int, t: float, frame) -> tuple[int, float, np.ndarray]:
    return index, t, frame.to_ndarray(format="bgr24")


def _keyframe_before(path, start: int) -> tuple[int, int, int] | None:
    """Where decoding may begin for frame ``start`` without decoding from frame 0:
    ``(index, pts)`` of the last keyframe at or before it and the pts of frame 0, or None where
    that could give other frames than a decode from the start, or saves nothing.

    From the container's packets alone (demuxed, not decoded): every packet must carry its own
    pts, frame ``k`` being the one with the ``k``-th smallest, and the keyframe must close its
    group: every packet before it in decoding order shows earlier, every one after it later,
    as around an IDR picture, after which no picture in decoding order refers to one before it
    (ITU-T Rec. H.264, sec. 3.69 and 8.2.1), so decoding from it gives the same pictures."""
    if start <= 0:
        return None
    container = _open(path)
    try:
        packets = [(p.pts, p.is_keyframe) for p in container.demux(container.streams.video[0]) if p.size]
    except av.FFmpegError:
        return None
    finally:
        container.close()
    pts = [p for p, _ in packets]
    if start >= len(pts) or any(p is None for p in pts) or len(set(pts)) != len(pts):
        return None
    order = sorted(pts)
    best = None
    before = -math.inf  # the latest pts before packet k in decoding order
    after = list(itertools.accumulate(reversed(pts), min))[::-1]  # the earliest from packet k on
    for k, (p, key) in enumerate(packets):
        if key and before < p == after[k] and p <= order[start]:
            best = k
        before = max(before, p)
    if not best:
        return None
    return best, pts[best], order[0]


def _seek(container, stream, plan: tuple[int, int, int]):
    """Seek ``container`` to the keyframe of ``plan`` (:func:`_keyframe_before`): ``(decoded
    frames from it, its index, frame 0's time s)``, or None when the first frame decoded there
    is not that keyframe (the container is then to be opened again)."""
    k, key_pts, pts0 = plan
    try:
        container.seek(key_pts, stream=stream, backward=True, any_frame=False)
        frames = container.decode(stream)
        head = next(frames, None)
    except av.FFmpegError:
        return None
    if head is None or head.pts != key_pts or head.time_base != stream.time_base:
        return None
    return itertools.chain([head], frames), k, float(pts0 * head.time_base)


def _open_threaded(path):
    """(container, its video stream) of :func:`_open`, the stream decoding with FFmpeg's own
    threads."""
    container = _open(path)
    stream = container.streams.video[0]
    stream.thread_type = "AUTO"
    return container, stream


def _decode(path, start: int = 0, stop: int | None = None, convert=_bgr) -> Iterator:
    """:func:`iter_frames` in the caller's thread; ``convert(index, t, av.VideoFrame)`` makes
    each item yielded. With ``start`` > 0, decoding begins at the last keyframe before it where
    that gives the same frames (:func:`_keyframe_before`, :func:`_seek`), else at frame 0."""
    plan = _keyframe_before(path, start)
    container, stream = _open_threaded(path)
    try:
        first, i0, frames = None, 0, None
        if plan is not None:
            seeked = _seek(container, stream, plan)
            if seeked is None:
                container.close()
                container, stream = _open_threaded(path)
            else:
                frames, i0, first = seeked
        if frames is None:
            frames = container.decode(stream)
        rate = stream.average_rate or stream.guessed_rate
        for i, frame in enumerate(frames, i0):
            if stop is not None and i >= stop:
                break
            if frame.pts is not None and frame.time_base is not None:
                t = float(frame.pts * frame.time_base)
            elif rate:
                t = i / float(rate)
            else:
                raise ValueError(f"{str(path)!r}: frame {i} has no timestamp and the stream no frame rate")
            if first is None:
                first = t
            if i >= start:
                yield convert(i, t - first, frame)
    except av.FFmpegError as exc:
        raise ValueError(f"{str(path)!r}: decoding failed ({exc.__class__.__name__}: {exc})") from None
    finally:
        container.close()


_END = object()


def _threaded(items: Iterator, depth: int) -> Iterator:
    """Run the iterator ``items`` in a background thread, ``depth`` items ahead of the consumer;
    its exception, if any, is raised in the consumer where the item would have come. Closing
    the returned generator early stops the thread and closes ``items``."""
    q: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(item) -> bool:
        # A bounded wait so a consumer that stopped reading never leaves the thread blocked.
        while not stop.is_set():
            try:
                q.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def run() -> None:
        try:
            for item in items:
                if not put((item, None)):
                    break
            else:
                put((_END, None))
        except BaseException as exc:  # handed to the consumer, which raises it
            put((_END, exc))
        finally:
            items.close()

    worker = threading.Thread(target=run, name="railtrace-decode", daemon=True)
    worker.start()
    try:
        while True:
            item, exc = q.get()
            if exc is not None:
                raise exc
            if item is _END:
                return
            yield item
    finally:
        stop.set()
        worker.join()


def probe(path) -> VideoInfo:
    """Size, average frame rate, frame count, duration and codec of a video file's first video
    stream, from its headers (no decoding); ValueError as :func:`iter_frames`."""
    container = _open(path)
    try:
        s = container.streams.video[0]
        rate = s.average_rate or s.guessed_rate
        fps = float(rate) if rate else 0.0
        if s.duration is not None and s.time_base is not None:
            duration = float(s.duration * s.time_base)
        elif container.duration is not None:
            duration = container.duration / 1e6  # microseconds (FFmpeg's AV_TIME_BASE)
        else:
            duration = 0.0
        frames = int(s.frames) if s.frames else int(round(duration * fps))
        return VideoInfo(
            width=int(s.codec_context.width),
            height=int(s.codec_context.height),
            fps=fps,
            frame_count=frames,
            duration_s=duration,
            codec=str(s.codec_context.name),
        )
    finally:
        container.close()
