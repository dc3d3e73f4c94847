"""Video round trips: frame count, exact presentation times, pixel fidelity, clean failures."""

from __future__ import annotations

import threading

import cv2
import numpy as np
import pytest

from vision.video import VideoInfo, _keyframe_before, area_down, iter_frames, iter_grey, probe, write_video


def _frames(n=30, w=320, h=240):
    """A smooth moving scene: gradient background with a bright disc sliding across."""
    vv, uu = np.mgrid[0:h, 0:w]
    base = np.stack([60 + 0.3 * uu, 110 + 0.2 * vv, 40 + 0.1 * (uu + vv)], axis=-1)
    out = []
    for i in range(n):
        img = base.copy()
        disc = (uu - 40 - 7 * i) ** 2 + (vv - 120) ** 2 < 15**2
        img[disc] = (230, 235, 240)
        out.append(np.clip(img, 0, 255).astype(np.uint8))
    return out


@pytest.mark.parametrize("fps", [60.0, 29.97])
@pytest.mark.parametrize("codec,quality,bound", [("h264", 18, 3.0), ("mpeg4", 3, 3.0)])
def test_round_trip(tmp_path, fps, codec, quality, bound):
    frames = _frames()
    path = tmp_path / "clip.mp4"
    n = write_video(path, iter(frames), fps, codec=codec, quality=quality)
    assert n == 30
    got = list(iter_frames(path))
    assert [i for i, _, _ in got] == list(range(30))
    t = np.array([t for _, t, _ in got])
    # Frame i presents at i / fps within 0.1 ms.
    assert np.abs(t - np.arange(30) / fps).max() < 1e-4
    err = np.mean([np.abs(f.astype(int) - frames[i]).mean() for i, _, f in got])
    # Mean absolute error of lossy coding at these settings (measured 2.2 DN for h264 crf 18, most of it from 4:2:0 chroma sampling): under `bound`.
    assert err < bound, err
    info = probe(path)
    assert isinstance(info, VideoInfo)
    assert (info.width, info.height) == (320, 240)
    assert info.fps == pytest.approx(fps, rel=1e-6)
    assert info.frame_count == 30
    assert info.duration_s == pytest.approx(30 / fps, abs=0.02)
    assert info.codec == codec


def test_missing_and_non_video_files(tmp_path):
    with pytest.raises(ValueError, match="does not exist"):
        list(iter_frames(tmp_path / "nope.mp4"))
    text = tmp_path / "notes.mp4"
    text.write_text("not a video at all\n" * 50)
    with pytest.raises(ValueError, match="not a readable video"):
        list(iter_frames(text))
    with pytest.raises(ValueError):
        probe(text)


def test_failed_write_leaves_nothing(tmp_path):
    def broken():
        yield from _frames(3)
        raise RuntimeError("simulator crashed")

    path = tmp_path / "clip.mp4"
    with pytest.raises(RuntimeError, match="simulator crashed"):
        write_video(path, broken(), 60)
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(ValueError, match="odd"):
        write_video(path, [np.zeros((241, 320, 3), np.uint8)], 60)
    with pytest.raises(ValueError, match="codec"):
        write_video(path, _frames(2), 60, codec="vp9")
    assert list(tmp_path.iterdir()) == []


def _decode_threads() -> list:
    return [t for t in threading.enumerate() if t.name == "railtrace-decode"]


@pytest.mark.parametrize("read_ahead", [1, 4])
def test_read_ahead_gives_the_same_frames_and_times(tmp_path, read_ahead):
    # A decoding thread must change nothing but when the work is done: identical indices,
    # times and pixels (exact equality; same decoder, same conversion).
    path = tmp_path / "clip.mp4"
    write_video(path, iter(_frames(20)), 60.0, quality=18)
    plain = list(iter_frames(path))
    ahead = list(iter_frames(path, read_ahead=read_ahead))
    assert [(i, t) for i, t, _ in ahead] == [(i, t) for i, t, _ in plain]
    assert all(np.array_equal(a[2], b[2]) for a, b in zip(ahead, plain))
    assert _decode_threads() == []


def test_read_ahead_stops_when_the_reader_stops_and_reports_errors(tmp_path):
    path = tmp_path / "clip.mp4"
    write_video(path, iter(_frames(30)), 60.0, quality=18)
    frames = iter_frames(path, read_ahead=2)
    first = [next(frames) for _ in range(3)]
    assert [i for i, _, _ in first] == [0, 1, 2]
    frames.close()  # the thread must end although the clip is not finished
    assert _decode_threads() == []
    with pytest.raises(ValueError, match="does not exist"):
        list(iter_frames(tmp_path / "nope.mp4", read_ahead=2))
    data = path.read_bytes()
    cut = tmp_path / "cut.mp4"
    cut.write_bytes(data[: len(data) // 3])
    # A truncated file fails the same way (or yields the same frames) with and without the thread.
    def outcome(k):
        try:
            return [i for i, _, _ in iter_frames(cut, read_ahead=k)]
        except ValueError as exc:
            return str(exc)
    assert outcome(0) == outcome(3)
    with pytest.raises(ValueError, match="negative"):
        list(iter_frames(path, read_ahead=-1))
    assert _decode_threads() == []


def test_frame_range_gives_the_same_frames_as_the_whole_clip(tmp_path):
    path = tmp_path / "clip.mp4"
    write_video(path, iter(_frames(24)), 29.97, quality=18)
    whole = list(iter_frames(path))
    for start, stop, ahead in [(0, 5, 0), (7, 19, 0), (7, 19, 3), (20, None, 0), (24, None, 0)]:
        part = list(iter_frames(path, read_ahead=ahead, start=start, stop=stop))
        want = whole[start:stop]
        # Indices and times of the whole clip, identical pixels (same decoder, same frames).
        assert [(i, t) for i, t, _ in part] == [(i, t) for i, t, _ in want]
        assert all(np.array_equal(a[2], b[2]) for a, b in zip(part, want))
    with pytest.raises(ValueError, match="start"):
        list(iter_frames(path, start=5, stop=2))


def test_frame_range_decoded_from_its_keyframe_gives_the_frames_of_the_whole_clip(tmp_path):
    # A part read from frame k begins decoding at the last keyframe before it, not at frame 0.
    # The scene changes at frames 30 and 60, where libx264 puts keyframes (scene cuts; IDR
    # pictures, after which nothing refers back: ITU-T Rec. H.264 sec. 3.69, 8.2.1), so the
    # frames from there must be FFmpeg's own decode of the whole clip, pixel for pixel, with its
    # indices and times.
    def scene(i):
        k = i // 30
        img = np.full((64, 96, 3), (40 + 70 * k, 200 - 60 * k, 90 + 50 * (k % 2)), np.uint8)
        img[20:36, 10 + 2 * (i % 30): 22 + 2 * (i % 30)] = (230, 235, 240) if k != 1 else (10, 20, 30)
        return img

    path = tmp_path / "cuts.mp4"
    write_video(path, (scene(i) for i in range(90)), 29.97, quality=18)
    assert _keyframe_before(path, 45)[0] == 30 and _keyframe_before(path, 75)[0] == 60
    assert _keyframe_before(path, 29) is None  # no keyframe but frame 0 before it: nothing to skip
    whole = list(iter_frames(path))
    for start, stop, ahead in [(30, 40, 0), (31, None, 3), (45, 70, 0), (60, 61, 0), (89, None, 2)]:
        part = list(iter_frames(path, read_ahead=ahead, start=start, stop=stop))
        want = whole[start:stop]
        assert [(i, t) for i, t, _ in part] == [(i, t) for i, t, _ in want]
        assert all(np.array_equal(a[2], b[2]) for a, b in zip(part, want))


def _encode(path, codec, options, n=120):
    """A 320x192 60 fps clip of a moving patch with noise and scene cuts at 50 and 90, encoded by
    PyAV's ``codec`` with encoder ``options`` (B-frames, open groups: as phones and cameras
    record, unlike write_video's settings)."""
    import av

    rng = np.random.default_rng(3)
    with av.open(str(path), "w") as out:
        stream = out.add_stream(codec, rate=60)
        stream.width, stream.height, stream.pix_fmt = 320, 192, "yuv420p"
        stream.options = options
        for i in range(n):
            img = np.empty((192, 320, 3), np.uint8)
            img[:] = (40, 120, 30) if i < 50 else (120, 40, 30) if i < 90 else (30, 40, 140)
            x = int(20 + 1.7 * i) % 290
            img[80:100, x:x + 24] = 245
            img = np.clip(img + rng.normal(0, 4, img.shape), 0, 255).astype(np.uint8)
            for packet in stream.encode(av.VideoFrame.from_ndarray(img, format="bgr24")):
                out.mux(packet)
        for packet in stream.encode():
            out.mux(packet)


@pytest.mark.parametrize(
    "name, codec, options",
    [
        ("open.mp4", "libx264", {"bf": "3", "x264-params": "keyint=30:min-keyint=10:open-gop=1"}),
        ("open.mkv", "libx264", {"bf": "3", "x264-params": "keyint=30:min-keyint=10:open-gop=1"}),
        ("hevc.mp4", "libx265", {"x265-params": "keyint=30:min-keyint=10:bframes=4:open-gop=1:log-level=error"}),
        ("hevc.mkv", "libx265", {"x265-params": "keyint=30:min-keyint=10:bframes=4:open-gop=0:log-level=error"}),
        ("vp9.webm", "libvpx-vp9", {"g": "30"}),
        ("mpeg4.avi", "mpeg4", {"g": "30", "bf": "2"}),
    ],
)
def test_frame_range_of_footage_with_b_frames_and_open_groups_gives_the_frames_of_the_whole_clip(tmp_path, name, codec, options):
    # Footage from phones and cameras reorders pictures (B-frames) and may open its groups (a
    # keyframe whose following B-pictures refer back past it: not an IDR, ITU-T Rec. H.264 sec.
    # 3.69 and 8.2.1; H.265's CRA pictures likewise). A part read from frame k must still be
    # FFmpeg's own decode of the whole clip from frame 0, pixel for pixel, with its indices and
    # times, whether or not the keyframe start is taken.
    import av

    if codec not in av.codecs_available:
        pytest.skip(f"this FFmpeg build has no {codec} encoder")
    path = tmp_path / name
    _encode(path, codec, options)
    whole = list(iter_frames(path, read_ahead=0))
    assert len(whole) == 120
    for start in (1, 29, 30, 31, 50, 51, 61, 89, 90, 91, 110, 119):
        part = list(iter_frames(path, read_ahead=0, start=start, stop=start + 8))
        want = whole[start:start + 8]
        assert [(i, t) for i, t, _ in part] == [(i, t) for i, t, _ in want], (name, start)
        assert all(np.array_equal(a[2], b[2]) for a, b in zip(part, want)), (name, start)


@pytest.mark.parametrize("read_ahead", [0, 3])
def test_grey_frames_match_the_grey_of_the_bgr_frames(tmp_path, read_ahead):
    # iter_grey skips the colour conversion; its small grey must be cv2's BGR-to-grey of the
    # frame iter_frames gives, downscaled the same way, up to the conversion's rounding: the
    # luma weights are the same (ITU-R BT.601: 0.299, 0.587, 0.114; OpenCV's cvtColor docs), and
    # the studio range 16..235 is stretched to 0..255 as the BGR conversion does (ITU-R BT.601).
    # Tolerance: 2 DN median, 4 DN max (from memory: swscale's fixed-point rounding is within a
    # couple of DN). Same indices and times; bgr() the very frame iter_frames gives.
    path = tmp_path / "clip.mp4"
    write_video(path, iter(_frames(12, w=640, h=360)), 30.0, quality=18)
    whole = list(iter_frames(path))
    grey = list(iter_grey(path, 0.5, read_ahead=read_ahead))
    assert [(g.index, g.t) for g in grey] == [(i, t) for i, t, _ in whole]
    for g, (_, _, bgr) in zip(grey, whole):
        want = cv2.resize(cv2.cvtColor(bgr, cv2.COLOR_BGR2GRAY), None, fx=0.5, fy=0.5, interpolation=cv2.INTER_AREA)
        assert g.grey.shape == want.shape == (180, 320) and g.grey.dtype == np.float32
        d = np.abs(g.grey - want.astype(np.float32))
        assert np.median(d) <= 2.0 and d.max() <= 4.0
        assert np.array_equal(g.bgr(), bgr)
    with pytest.raises(ValueError, match="scale"):
        list(iter_grey(path, 0.0))
    with pytest.raises(ValueError, match="does not exist"):
        list(iter_grey(tmp_path / "nope.mp4", 0.5))


@pytest.mark.parametrize("scale,shape,bound", [(0.25, (720, 1280), 1), (0.125, (720, 1280, 3), 2), (0.5, (90, 160), 0), (1 / 3, (90, 120), 0), (0.25, (90, 162), 0)])
def test_area_down_matches_one_area_resize(scale, shape, bound):
    # Against OpenCV's own area resize in one step (the reference): repeated halving rounds
    # to whole levels at each step, at most half a level each, so a pixel may differ by one
    # level for a factor of 4 (two steps) and two for 8 (three) (analytic), and by none where
    # one step is taken or the factor is not a power of two dividing the sides (one resize).
    img = np.random.default_rng(3).integers(0, 256, shape, dtype=np.uint8)
    want = cv2.resize(img, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA).astype(int)
    got = area_down(img, scale)
    assert got.shape == want.shape and got.dtype == np.uint8
    assert np.abs(got.astype(int) - want).max() <= bound


_ENCODE_SCRIPT = """
import sys
import numpy as np
import os
from vision.video import write_video
if len(sys.argv) > 3:
    os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})
frames = np.load(sys.argv[1])
write_video(sys.argv[2], iter(frames), 60.0, quality=23)
"""


def test_identical_frames_give_identical_files(tmp_path):
    # Test clips must be reproducible: the same frames give the same bytes, in this process
    # (threads, a heap reused between encodes) and in fresh ones whose heap glibc fills with a
    # chosen byte (MALLOC_PERTURB_, glibc's mallopt(3) manual: allocated memory is filled with
    # the byte's complement), so an encoder that reads memory it never wrote shows it.
    import os
    import subprocess
    import sys
    from pathlib import Path

    rng = np.random.default_rng(5)
    frames = np.stack([np.clip(f + rng.normal(0.0, 2.0, f.shape), 0, 255).astype(np.uint8) for f in _frames(40, w=480, h=272)])
    np.save(tmp_path / "frames.npy", frames)
    files = []
    for k in range(3):
        files.append(tmp_path / f"here{k}.mp4")
        write_video(files[-1], iter(frames), 60.0, quality=23)
    root = str(Path(__file__).resolve().parents[1])
    # The last encode runs on one core: libx264 picks its thread count from the cores it may
    # use, and the thread count changes the file.
    for fill, one_core in (("13", False), ("77", False), ("99", True)):
        files.append(tmp_path / f"perturb{fill}.mp4")
        env = {**os.environ, "MALLOC_PERTURB_": fill, "PYTHONPATH": root}
        args = [sys.executable, "-c", _ENCODE_SCRIPT, str(tmp_path / "frames.npy"), str(files[-1])] + (["one-core"] if one_core else [])
        subprocess.run(args, env=env, check=True, timeout=60)
    data = [f.read_bytes() for f in files]
    assert all(d == data[0] for d in data[1:]), [len(d) for d in data]
    # Still lossy H.264 that looks like footage, not a lossless copy: the frames differ from the
    # input by a little (mean absolute error under 3 DN, as test_round_trip at crf 18) but not by nothing.
    got = np.stack([f for _, _, f in iter_frames(files[0])])
    err = np.abs(got.astype(int) - frames).mean()
    assert 0.3 < err < 3.0, err
