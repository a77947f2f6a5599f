"""Unit tests of the live-capture pipeline, fed with numpy blocks: no audio stack needed.

The session is driven exactly like a sounddevice InputStream callback
(``callback(indata, frames, time, status)`` with real ``sounddevice.CallbackFlags``).
"""

from __future__ import annotations

import builtins
import errno
import io
import math
import os
import signal
import subprocess
import sys
import threading
import time

import numpy as np
import pytest
import soundfile as sf

from popmeter import capture, live_view
from popmeter.capture import CaptureSession, WavSink
from popmeter.errors import DependencyError, DeviceError, UsageError

SR = 48000


class ThresholdDetector:
    """Trivial stand-in with the ClickDetector interface: |x| >= threshold, 20 ms dead time."""

    def __init__(self, sample_rate_hz: int, threshold: float = 0.5, dead_s: float = 0.02):
        self.sr = sample_rate_hz
        self.threshold = threshold
        self.dead = int(dead_s * sample_rate_hz)
        self.offset = 0
        self.last = -10**12

    def process(self, block):
        out = []
        for i in np.flatnonzero(np.abs(block) >= self.threshold):
            s = self.offset + int(i)
            if s - self.last >= self.dead:
                self.last = s
                out.append(_Click(sample=s, time_s=s / self.sr, level_dbfs=0.0))
        self.offset += len(block)
        return out

    def flush(self):
        return []


class _Click:
    def __init__(self, sample, time_s, level_dbfs):
        self.sample, self.time_s, self.level_dbfs = sample, time_s, level_dbfs


class MemorySink:
    """Keeps every written frame; optionally fails with ENOSPC after ``fail_after`` frames,
    or waits on ``gate`` before each write (a slow disk)."""

    def __init__(self, fail_after: int | None = None, gate: threading.Event | None = None):
        self.parts: list[np.ndarray] = []
        self.frames_written = 0
        self.fail_after = fail_after
        self.gate = gate
        self.flushes = 0
        self.closed = False
        self.entered = threading.Event()  # the writer is inside write()

    def write(self, frames):
        if self.gate is not None:
            self.entered.set()
            self.gate.wait()
        if self.fail_after is not None and self.frames_written + len(frames) > self.fail_after:
            raise OSError(errno.ENOSPC, "No space left on device")
        self.parts.append(frames.copy())
        self.frames_written += len(frames)

    def flush(self):
        self.flushes += 1

    def close(self):
        self.closed = True

    @property
    def data(self):
        return np.concatenate(self.parts) if self.parts else np.zeros((0, 1), np.float32)


def _flags(overflow=False):
    import sounddevice as sd

    f = sd.CallbackFlags()
    if overflow:
        f.input_overflow = True
    return f


def _blocks(x: np.ndarray, rng: np.random.Generator, lo=64, hi=2048):
    """Split (frames, channels) into blocks of random sizes, like a device would."""
    i = 0
    while i < len(x):
        n = int(rng.integers(lo, hi))
        yield x[i:i + n]
        i += n


def _feed(session, x, rng, *, flags=None, wait_analysis=False):
    for k, b in enumerate(_blocks(x, rng)):
        session.callback(b, len(b), None, flags(k) if flags else _flags())
        if wait_analysis:
            _wait_caught_up(session)
        if session.stopping:
            break


def _wait_caught_up(session, timeout_s=10.0):
    t0 = time.monotonic()
    while session.frames_analysed < session.frames_received - session.dropped_frames:
        if session.stopping and session.faults:
            return
        if time.monotonic() - t0 > timeout_s:
            raise AssertionError("analysis thread did not catch up")
        time.sleep(0.0005)


def _clicks_signal(times_s, duration_s, channels=1, seed=0):
    rng = np.random.default_rng(seed)
    x = (0.01 * rng.standard_normal((int(duration_s * SR), channels))).astype(np.float32)
    for t in times_s:
        n = round(t * SR)
        x[n:n + 200, 0] += (0.8 * np.exp(-np.arange(200) / 40.0)).astype(np.float32)
    return x


def _session(sink, channels=1, **kw):
    kw.setdefault("detector", ThresholdDetector(SR))
    s = CaptureSession(sink=sink, sample_rate_hz=SR, channels=channels, **kw)
    s.start()
    return s


# --- every sample reaches the disk -------------------------------------------


def test_every_sample_fed_is_written_exactly_to_the_wav(tmp_path):
    rng = np.random.default_rng(1)
    x = rng.uniform(-1, 1, (3 * SR + 17, 2)).astype(np.float32)
    out = tmp_path / "run.wav"
    s = _session(WavSink(out, SR, 2), channels=2, channel=1)
    _feed(s, x, rng)
    res = s.finish()
    got, rate = sf.read(out, dtype="float32", always_2d=True)
    assert rate == SR
    assert res.frames_written == res.frames_received == len(x)
    np.testing.assert_array_equal(got, x)  # bit for bit (float32 WAV)
    assert res.faults == [] and res.overflows == 0 and res.dropped_frames == 0


def test_wav_refuses_to_overwrite_an_existing_recording(tmp_path):
    out = tmp_path / "old.wav"
    out.write_bytes(b"precious")
    with pytest.raises(UsageError, match="old.wav: already exists"):
        WavSink(out, SR, 1)
    assert out.read_bytes() == b"precious"


def test_sigkilled_writer_leaves_a_readable_wav_with_all_flushed_frames(tmp_path):
    # libsndfile leaves the RIFF/data sizes at 0 until close unless told to
    # rewrite the header; WavSink.flush does so. Checked with a second reader
    # (scipy.io.wavfile), which trusts the header sizes.
    out = tmp_path / "killed.wav"
    code = (
        "import sys, time, numpy as np\n"
        "from popmeter.capture import WavSink\n"
        f"s = WavSink({str(out)!r}, {SR}, 1)\n"
        "for i in range(5):\n"
        f"    s.write(np.full(({SR}, 1), i / 10, np.float32))\n"
        "    s.flush()\n"
        "print('ready', flush=True)\n"
        "time.sleep(60)\n"
    )
    p = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    try:
        assert p.stdout.readline().strip() == "ready"
    finally:
        os.kill(p.pid, signal.SIGKILL)
        p.wait()
    x, rate = sf.read(out, dtype="float32")
    assert rate == SR and len(x) == 5 * SR
    assert x[-1] == np.float32(0.4)
    from scipy.io import wavfile

    rate2, y = wavfile.read(out)
    assert rate2 == SR and len(y) == 5 * SR


# --- status flags, full queue, faults ----------------------------------------


def test_input_overflow_flags_are_counted_and_data_kept():
    rng = np.random.default_rng(2)
    x = rng.uniform(-0.1, 0.1, (SR, 1)).astype(np.float32)
    sink = MemorySink()
    s = _session(sink)
    _feed(s, x, rng, flags=lambda k: _flags(overflow=k in (1, 4, 7)))
    res = s.finish()
    assert res.overflows == 3
    np.testing.assert_array_equal(sink.data, x)
    assert "overflows 3" in live_view.plain_line(s.snapshot())


def test_full_queue_counts_dropped_frames_and_keeps_the_timeline():
    gate = threading.Event()  # a disk that stalls until released
    sink = MemorySink(gate=gate)
    s = _session(sink, queue_seconds=0.01)  # capacity: the minimum of 8 blocks
    capacity = s._capacity_blocks
    block = np.full((256, 1), 0.25, np.float32)
    s.callback(block, 256, None, _flags())
    assert sink.entered.wait(5)  # the writer now holds that block, stuck on the disk
    n_blocks = capacity + 20
    for _ in range(n_blocks - 1):
        s.callback(block, 256, None, _flags())
    # the queue holds `capacity` blocks; the rest are dropped and counted
    assert s.dropped_frames == (n_blocks - 1 - capacity) * 256
    gate.set()
    s.callback(block, 256, None, _flags())  # next block after the gap
    res = s.finish()
    assert res.dropped_frames == s.dropped_frames
    data = sink.data[:, 0]
    # the file is as long as the audio received: the lost frames are silence
    assert len(data) == res.frames_received == (n_blocks + 1) * 256
    assert int(np.sum(data == 0)) == res.dropped_frames
    assert int(np.sum(data == 0.25)) == res.frames_received - res.dropped_frames
    line = live_view.plain_line(s.snapshot())
    assert f"dropped {res.dropped_frames} frames" in line


def test_exception_inside_the_callback_is_a_fault_and_keeps_earlier_audio():
    sink = MemorySink()
    s = _session(sink)
    good = np.full((512, 1), 0.1, np.float32)
    s.callback(good, 512, None, _flags())
    s.callback(np.zeros((512, 3), np.float32), 512, None, _flags())  # wrong channel count
    assert s.stopping
    s.callback(good, 512, None, _flags())  # after the fault: ignored
    res = s.finish()
    assert len(res.faults) == 1 and "audio callback failed" in res.faults[0]
    np.testing.assert_array_equal(sink.data, good)


def test_device_lost_mid_run_keeps_what_was_recorded():
    sink = MemorySink()
    s = _session(sink)
    x = np.full((4096, 1), 0.2, np.float32)
    s.callback(x, 4096, None, _flags())
    s.stream_finished()  # PortAudio ended the stream without being asked
    res = s.finish()
    assert "input device stopped during the run" in res.faults[0]
    np.testing.assert_array_equal(sink.data, x)


def test_stop_request_ends_cleanly_like_ctrl_c():
    sink = MemorySink()
    s = _session(sink)
    x = np.full((1000, 1), 0.3, np.float32)
    s.callback(x, 1000, None, _flags())
    t = threading.Thread(target=s.request_stop, args=("stopped by Ctrl-C",))
    t.start()
    t.join()
    s.callback(x, 1000, None, _flags())
    res = s.finish()
    assert res.stop_reason == "stopped by Ctrl-C" and res.faults == []
    assert res.frames_written == 1000 and sink.closed


def test_disk_full_stops_and_keeps_what_was_written():
    sink = MemorySink(fail_after=10_000)
    s = _session(sink)
    rng = np.random.default_rng(3)
    x = rng.uniform(-0.1, 0.1, (SR, 1)).astype(np.float32)
    _feed(s, x, rng, wait_analysis=True)
    deadline = time.monotonic() + 5
    while not s.stopping and time.monotonic() < deadline:
        time.sleep(0.001)
    res = s.finish()
    assert any(f.startswith("disk full") and "kept" in f for f in res.faults)
    assert 0 < res.frames_written <= 10_000
    np.testing.assert_array_equal(sink.data, x[: res.frames_written])


def test_disk_full_on_a_real_file_leaves_a_readable_wav(tmp_path):
    class FullDisk(WavSink):
        def write(self, frames):
            if self.frames_written + len(frames) > 2 * SR:
                raise OSError(errno.ENOSPC, "No space left on device")
            super().write(frames)

    out = tmp_path / "full.wav"
    rng = np.random.default_rng(4)
    x = rng.uniform(-1, 1, (3 * SR, 1)).astype(np.float32)
    s = _session(FullDisk(out, SR, 1))
    for b in _blocks(x, rng):
        s.callback(b, len(b), None, _flags())
        _wait_caught_up(s)
        if s.stopping:
            break
    res = s.finish()
    assert "disk full" in res.faults[0]
    got, _ = sf.read(out, dtype="float32", always_2d=True)
    assert len(got) == res.frames_written > SR
    np.testing.assert_array_equal(got, x[: len(got)])


def test_a_real_short_write_stops_the_capture_and_the_file_stays_readable(tmp_path):
    # A real failing write from libsndfile, not a stand-in: the file size
    # limit (RLIMIT_FSIZE, with SIGXFSZ ignored) makes write(2) fail part-way,
    # as a full disk does (EFBIG instead of ENOSPC).
    out = tmp_path / "limited.wav"
    code = (
        "import resource, signal, types, numpy as np\n"
        "from popmeter.capture import CaptureSession, WavSink\n"
        "signal.signal(signal.SIGXFSZ, signal.SIG_IGN)\n"
        "resource.setrlimit(resource.RLIMIT_FSIZE, (400_000, 400_000))\n"
        "x = np.arange(3 * 48000, dtype=np.float32)[:, None] / 1e6\n"
        f"s = CaptureSession(sink=WavSink({str(out)!r}, 48000, 1), sample_rate_hz=48000,\n"
        "                   channels=1,\n"
        "                   detector=types.SimpleNamespace(process=lambda b: [], flush=list))\n"
        "s.start()\n"
        "for i in range(0, len(x), 4800):\n"
        "    s.callback(x[i:i + 4800], 4800, None, None)\n"
        "    while s.frames_written + 4800 * s._queue.qsize() < i + 4800 and not s.stopping:\n"
        "        pass\n"
        "r = s.finish()\n"
        "print(r.frames_written)\n"
        "print(r.faults[0] if r.faults else '')\n"
    )
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60,
                       check=False)
    assert p.returncode == 0, p.stderr
    written, fault = p.stdout.strip().splitlines()
    assert fault.startswith(f"cannot write {out}") and "first" in fault and "kept" in fault
    got, _ = sf.read(out, dtype="float32")
    x = np.arange(3 * 48000, dtype=np.float32) / 1e6
    assert 0 < int(written) <= len(got) < len(x)  # what was counted is in the file, and more
    np.testing.assert_array_equal(got, x[:len(got)])


# --- audio time, not wall time -------------------------------------------------


class FrozenClock:
    """A wall clock that never moves: only audio time can end the capture."""

    def __call__(self):
        return 1000.0


def test_silence_auto_stop_counts_audio_time():
    clicks = [1.0, 1.5, 2.0, 2.5]
    x = _clicks_signal(clicks, 8.0)
    sink = MemorySink()
    s = _session(sink, silence_stop_s=1.2, clock=FrozenClock())
    rng = np.random.default_rng(5)
    _feed(s, x, rng, wait_analysis=True)
    res = s.finish()
    assert res.stop_reason.startswith("no click for 1.2 s")
    stop_s = res.frames_written / SR
    # stops within one block (<= 2048 frames) after last click + 1.2 s of audio
    assert 2.5 + 1.2 <= stop_s <= 2.5 + 1.2 + 2048 / SR + 0.001
    assert [round(c.time_s, 3) for c in res.live_clicks] == clicks


def test_no_auto_stop_before_the_first_click():
    x = np.zeros((3 * SR, 1), np.float32)
    s = _session(MemorySink(), silence_stop_s=0.5, clock=FrozenClock())
    _feed(s, x, np.random.default_rng(6), wait_analysis=True)
    res = s.finish()
    assert res.stop_reason is None and res.frames_written == 3 * SR


def test_max_seconds_counts_audio_time_exactly():
    rng = np.random.default_rng(7)
    x = rng.uniform(-0.1, 0.1, (3 * SR, 1)).astype(np.float32)
    sink = MemorySink()
    s = _session(sink, max_seconds=1.2345, clock=FrozenClock())
    _feed(s, x, rng)  # fed far faster than real time
    res = s.finish()
    n = round(1.2345 * SR)
    assert res.frames_written == n and res.stop_reason.startswith("reached --max-seconds")
    np.testing.assert_array_equal(sink.data, x[:n])


# --- live clicks == offline clicks -----------------------------------------------


def _real_detector():
    try:
        from popmeter.detection import ClickDetector
    except ImportError as exc:  # pragma: no cover - only while the module is being written
        pytest.skip(f"popmeter.detection not available: {exc}")
    return ClickDetector


def test_live_clicks_equal_offline_detector_clicks():
    ClickDetector = _real_detector()
    from popmeter.synth import RunScenario, render

    scen = RunScenario(duration_s=12.0, heating_s=1.0, startup_s=3.0, fade_s=3.0, after_s=1.0,
                       seed=11)
    samples, _truth = render(scen)
    x = samples[:, :1].astype(np.float32)
    offline = ClickDetector(SR)
    ref = []
    for i in range(0, len(x), 4096):
        ref += offline.process(x[i:i + 4096, 0])
    ref += offline.flush()
    assert len(ref) > 50

    s = _session(MemorySink(), detector=ClickDetector(SR))
    _feed(s, x, np.random.default_rng(8))
    res = s.finish()
    live = np.array([c.time_s for c in res.live_clicks])
    ref_t = np.array([c.time_s for c in ref])
    # greedy one-to-one matching within 1 ms (the tolerance)
    matched = sum(np.min(np.abs(live - t)) <= 1e-3 for t in ref_t) if len(live) else 0
    assert matched >= 0.98 * len(ref_t) and abs(len(live) - len(ref_t)) <= 0.02 * len(ref_t)


# --- devices and set-up ---------------------------------------------------------


def test_missing_portaudio_is_a_one_line_dependency_error(monkeypatch):
    real_import = builtins.__import__

    def fake_import(name, *a, **kw):
        if name == "sounddevice":
            raise OSError("PortAudio library not found")
        return real_import(name, *a, **kw)

    monkeypatch.delitem(sys.modules, "sounddevice", raising=False)
    monkeypatch.setattr(builtins, "__import__", fake_import)
    with pytest.raises(DependencyError) as info:
        capture.list_devices()
    msg = str(info.value)
    assert "apt-get install libportaudio2" in msg and "\n" not in msg


class FakeSd:
    """Just enough of sounddevice for the device and rate choices."""

    class PortAudioError(Exception):
        pass

    def __init__(self, ok_rates):
        self.ok_rates = ok_rates

    def check_input_settings(self, *, device, channels, samplerate, dtype):
        if samplerate not in self.ok_rates:
            raise self.PortAudioError(f"Invalid sample rate [{samplerate}]")


def test_unsupported_rate_falls_back_to_the_device_default_and_says_so():
    dev = capture.InputDevice(3, "tank mic", 2, 44100.0, True)
    rate, note = capture.choose_sample_rate(FakeSd({44100}), dev, 1, None)
    assert rate == 44100 and "does not take 48000 Hz" in note and "44100" in note
    rate, note = capture.choose_sample_rate(FakeSd({44100, 48000}), dev, 1, None)
    assert rate == 48000 and note is None
    with pytest.raises(DeviceError, match="no usable sample rate"):
        capture.choose_sample_rate(FakeSd(set()), dev, 1, 96000)


def test_device_choice_by_index_or_name(monkeypatch):
    devs = [capture.InputDevice(0, "system", 2, 48000.0, True),
            capture.InputDevice(4, "USB tank mic", 1, 44100.0, False)]
    monkeypatch.setattr(capture, "list_devices", lambda: devs)
    assert capture.resolve_device(None).index == 0
    assert capture.resolve_device("4").name == "USB tank mic"
    assert capture.resolve_device("usb").index == 4
    with pytest.raises(DeviceError, match="input device 7: no such input device"):
        capture.resolve_device("7")
    with pytest.raises(DeviceError, match="'lab': not found"):
        capture.resolve_device("lab")


# --- the view ---------------------------------------------------------------------


def _render_text(state) -> str:
    from rich.console import Console

    buf = io.StringIO()
    Console(file=buf, width=120, color_system=None).print(live_view.render(state))
    return buf.getvalue()


def test_view_shows_clipping_quiet_rate_and_counters():
    x = _clicks_signal([0.2 + 0.1 * k for k in range(15)], 2.0)
    x[SR:SR + 10, 0] = 1.0  # a few full-scale samples at 1.0 s
    s = _session(MemorySink(), clock=FrozenClock())
    _feed(s, x, np.random.default_rng(9), flags=lambda k: _flags(overflow=k == 0),
          wait_analysis=True)
    st = s.snapshot()
    assert st.clicks == 15 and st.clipped_blocks >= 1
    assert st.rate_hz == pytest.approx(10.0, rel=1e-3)  # clicks every 0.1 s
    text = _render_text(st)
    assert "10.00 Hz" in text and "clicks 15" in text and "overflows 1" in text
    assert "clipped blocks so far" in text
    # now a clipping block, then silence: the warnings follow the input
    s.callback(np.ones((2048, 1), np.float32), 2048, None, _flags())
    _wait_caught_up(s)
    assert "CLIPPING" in _render_text(s.snapshot())
    for _ in range(40):
        s.callback(np.zeros((2048, 1), np.float32), 2048, None, _flags())
    _wait_caught_up(s)
    assert "too quiet" in _render_text(s.snapshot())
    s.finish()


def test_sparkline_and_big_verdict_letters():
    assert live_view.sparkline([1.0, 2.0, 3.0]) == "▁▅█"
    assert live_view.sparkline([]) == ""
    steady = live_view.sparkline([12.3, 12.4, 12.35, 12.5, 12.2])  # 2 % jitter: mid-height
    assert len(steady) == 5 and not set(steady) & {"▁", "█"}
    lopsided = live_view.sparkline([10.0, 10.0, 10.0, 10.9])  # range < 10 %, off-centre
    assert len(lopsided) == 4 and lopsided[-1] > lopsided[0]
    rows = live_view.big_text("PASS").split("\n")
    assert len(rows) == 5 and rows[0].startswith("████")
    from rich.console import Console

    buf = io.StringIO()
    live_view.print_big_verdict(Console(file=buf, width=100, color_system=None), "FAIL",
                                ["steady_rate_hz 9.1 below min 10"])
    out = buf.getvalue()
    assert "steady_rate_hz 9.1 below min 10" in out and "█████" in out


def test_caution_line_names_flame_steam_children_and_mains():
    text = live_view.SAFETY_LINE.lower()
    for word in ("flame", "steam", "children", "mains", "does not certify"):
        assert word in text


def test_live_rate_is_the_cycle_rate_for_one_and_two_click_engines():
    rng = np.random.default_rng(5)
    for cpc in (1, 2):
        times = []
        for k in range(80):  # 10 cycles per second; a second click 30 ms after the first
            t = 0.5 + 0.1 * k + rng.normal(0, 2e-4)
            times.append(t)
            if cpc == 2:
                times.append(t + 0.03 + rng.normal(0, 2e-4))
        tracker = capture._RateTracker()
        for t in times[:70]:
            tracker.add(t)
        # as the whole-run pass reports it: the clicks so far and the decision
        tracker.rebase(times[:70], clicks_per_cycle=cpc, total_clicks=70)
        for t in times[70:]:
            tracker.add(t)
        assert tracker.clicks_per_cycle == cpc
        assert tracker.rate_hz == pytest.approx(10.0, rel=0.01)
        assert tracker.phase == "steady" and tracker.stalls == 0
        tracker.silent_for(20.0)
        assert tracker.phase == "silent" and tracker.rate_hz is None
    # fewer than 64 clicks: one click per cycle is shown whatever the pass says
    tracker = capture._RateTracker()
    tracker.rebase([0.1 * k for k in range(30)], clicks_per_cycle=2, total_clicks=30)
    assert tracker.clicks_per_cycle == 1
    # a pause of 1 s inside a run is a stall
    tracker = capture._RateTracker(clicks_per_cycle=1)
    for t in [0.1 * k for k in range(20)] + [3.0 + 0.1 * k for k in range(5)]:
        tracker.add(t)
    assert tracker.stalls == 1


def test_live_click_list_after_the_whole_run_passes_equals_the_offline_clicks():
    # The offline analysis runs the detection module's whole-recording passes
    # after the last block (second look at rejected candidates, atypical
    # clicks, clicks per cycle); the live session runs them as it goes and
    # once more at the end, so its final list must be the offline one.
    from popmeter.detection import ClickDetector, detect_clicks
    from popmeter.synth import RunScenario, render

    scen = RunScenario(duration_s=14.0, heating_s=1.0, startup_s=3.0, fade_s=3.0, after_s=1.0,
                       clicks_per_cycle=2, click_to_noise_db=18.0, seed=12)
    samples, _truth = render(scen)
    x = samples[:, :1].astype(np.float32)
    offline = detect_clicks(x[:, 0], SR)
    s = _session(MemorySink(), detector=ClickDetector(SR))
    _feed(s, x, np.random.default_rng(13))
    res = s.finish()
    assert len(s.pass_seconds) >= 5  # passes ran during the capture, not only at the end
    assert [c.sample for c in res.clicks] == [c.sample for c in offline.clicks]
    assert [c.kind for c in res.clicks] == [c.kind for c in offline.clicks]
    assert res.clicks_per_cycle == offline.clicks_per_cycle
    # the passes matter here: many weak second clicks fail the streaming
    # tests and are promoted by the second look
    promoted = {c.sample for c in res.clicks} - {c.sample for c in res.live_clicks}
    assert len(promoted) >= 10


# --- listen() wired to a stand-in sounddevice (no audio stack) ---------------------


class FakeStream:
    """Plays ``source`` into the callback from a thread, faster than real time.

    ``lose_after`` frames: the device vanishes (callbacks stop, ``active`` turns False).
    ``interrupt_after`` frames: Ctrl-C reaches the main thread.
    """

    def __init__(self, sd, *, device, channels, samplerate, dtype, callback, finished_callback,
                 latency=None):
        self.sd, self.callback, self.finished = sd, callback, finished_callback
        # capture asks for the device's larger buffer (no need for low latency)
        assert latency == "high"
        self.latency = latency
        self.channels, self.samplerate = channels, samplerate
        self.active = False
        self._stop = threading.Event()
        if sd.open_error:
            raise sd.PortAudioError(sd.open_error)

    def start(self):
        self.active = True
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self):
        import _thread

        import sounddevice

        x = self.sd.source
        for i in range(0, len(x), 480):
            if self._stop.is_set():
                return
            if self.sd.lose_after is not None and i >= self.sd.lose_after:
                self.active = self.sd.stays_active  # a driver may not even notice
                return
            if self.sd.interrupt_after is not None and i >= self.sd.interrupt_after:
                _thread.interrupt_main()
                return
            b = np.repeat(x[i:i + 480, None], self.channels, axis=1)
            self.callback(b, len(b), None, sounddevice.CallbackFlags())
            time.sleep(0.0002)
        # the source is over: the device keeps delivering silence until stopped
        while not self._stop.is_set():
            self.callback(np.zeros((480, self.channels), np.float32), 480, None,
                          sounddevice.CallbackFlags())
            time.sleep(0.0002)

    def stop(self):
        self._stop.set()
        self.active = False

    abort = stop

    def close(self):
        pass


class FakeSounddevice:
    class PortAudioError(Exception):
        pass

    def __init__(self, source, *, rates=(48000,), default_rate=48000.0):
        self.source = source
        self.rates = set(rates)
        self.default_rate = default_rate
        self.open_error = None
        self.lose_after = None
        self.stays_active = False
        self.interrupt_after = None
        self.default = type("D", (), {"device": [0, 0]})()

    def query_devices(self):
        return [{"name": "bench mic", "max_input_channels": 2, "default_samplerate":
                 self.default_rate, "hostapi": 0}]

    def query_hostapis(self):
        return [{"name": "stand-in"}]

    def check_input_settings(self, *, device, channels, samplerate, dtype):
        if samplerate not in self.rates:
            raise self.PortAudioError(f"Invalid sample rate [{samplerate}]")

    def InputStream(self, **kw):
        return FakeStream(self, **kw)


@pytest.fixture
def fake_sd(monkeypatch):
    from popmeter.synth import RunScenario, render

    samples, _ = render(RunScenario(duration_s=8.0, heating_s=0.5, startup_s=2.0, fade_s=2.0,
                                    after_s=1.0, seed=21))
    sd = FakeSounddevice(samples[:, 0].astype(np.float32))
    monkeypatch.setattr(capture, "import_sounddevice", lambda: sd)
    return sd


def _run_listen(tmp_path, capsys, **kw):
    from rich.console import Console

    buf = io.StringIO()
    kw.setdefault("silence_stop_s", 1.5)
    code = capture.listen(out=tmp_path / "take.wav", view=False, json_path=tmp_path / "take.json",
                          console=Console(file=buf, width=200), **kw)
    return code, buf.getvalue(), capsys.readouterr().err


def test_listen_records_analyses_and_keeps_every_sample(fake_sd, tmp_path, capsys):
    import json

    code, out, err = _run_listen(tmp_path, capsys)
    assert code == 0, err
    assert live_view.SAFETY_LINE[:40] in out and "no click for 1.5 s" in out
    saved, rate = sf.read(tmp_path / "take.wav", dtype="float32")
    assert rate == 48000
    n = min(len(saved), len(fake_sd.source))
    np.testing.assert_array_equal(saved[:n], fake_sd.source[:n])
    analysis = json.loads((tmp_path / "take.json").read_text())
    live = json.loads((tmp_path / "take.live.json").read_text())
    off_t = np.array([c["time_s"] for c in analysis["clicks"]])
    live_t = np.array([c["time_s"] for c in live["clicks"]])
    assert len(off_t) > 30
    assert sum(bool(np.min(np.abs(live_t - t)) <= 1e-3) for t in off_t) >= 0.98 * len(off_t)


def test_listen_falls_back_to_the_device_rate_and_says_so(fake_sd, tmp_path, capsys):
    fake_sd.rates = {44100}
    fake_sd.default_rate = 44100.0
    code, out, err = _run_listen(tmp_path, capsys, max_seconds=2.0)
    assert code == 0, err
    assert "does not take 48000 Hz; using its default rate 44100 Hz" in out
    assert sf.info(tmp_path / "take.wav").samplerate == 44100


def test_listen_busy_device_is_one_line_and_leaves_no_file(fake_sd, tmp_path, capsys):
    fake_sd.open_error = "Device unavailable [PaErrorCode -9985]"
    with pytest.raises(DeviceError, match=r"input device 0 \(bench mic\): cannot open it, busy"):
        _run_listen(tmp_path, capsys)
    assert not (tmp_path / "take.wav").exists()


def test_listen_device_lost_keeps_the_audio_and_exits_2(fake_sd, tmp_path, capsys):
    fake_sd.lose_after = 3 * 48000
    code, _out, err = _run_listen(tmp_path, capsys)
    assert code == 2
    assert "input device stopped during the run (unplugged or lost)" in err
    assert "recorded are kept in" in err
    saved, _ = sf.read(tmp_path / "take.wav", dtype="float32")
    assert len(saved) == 3 * 48000
    np.testing.assert_array_equal(saved, fake_sd.source[:len(saved)])


def test_listen_disk_full_keeps_what_was_written_and_exits_2(fake_sd, tmp_path, capsys,
                                                             monkeypatch):
    class FullDisk(WavSink):
        def write(self, frames):
            if self.frames_written + len(frames) > 2 * SR:
                raise OSError(errno.ENOSPC, "No space left on device")
            super().write(frames)

    monkeypatch.setattr(capture, "WavSink", FullDisk)
    code, _out, err = _run_listen(tmp_path, capsys)
    assert code == 2
    lines = [ln for ln in err.splitlines() if "disk full" in ln]
    assert len(lines) == 1 and "take.wav" in lines[0] and "kept" in lines[0]
    saved, _ = sf.read(tmp_path / "take.wav", dtype="float32")
    assert 0 < len(saved) <= 2 * SR
    np.testing.assert_array_equal(saved, fake_sd.source[:len(saved)])


def test_listen_ctrl_c_ends_cleanly_and_analyses(fake_sd, tmp_path, capsys):
    import json

    fake_sd.interrupt_after = 4 * 48000
    code, _out, err = _run_listen(tmp_path, capsys, silence_stop_s=None)
    assert code == 0, err
    live = json.loads((tmp_path / "take.live.json").read_text())
    assert live["stop_reason"] == "stopped by Ctrl-C"
    saved, _ = sf.read(tmp_path / "take.wav", dtype="float32")
    assert len(saved) == 4 * 48000
    assert (tmp_path / "take.json").exists()


def test_listen_refuses_other_formats_and_existing_files(fake_sd, tmp_path, capsys):
    with pytest.raises(UsageError, match=r"take.flac: --out must end in .wav"):
        capture.listen(out=tmp_path / "take.flac", view=False)
    (tmp_path / "take.wav").write_bytes(b"an earlier run")
    with pytest.raises(UsageError, match="take.wav: already exists"):
        _run_listen(tmp_path, capsys)
    assert (tmp_path / "take.wav").read_bytes() == b"an earlier run"


def test_level_meter_reads_dbfs_as_aes17_defines_it():
    # AES17 (measurement of digital audio equipment): a full-scale sine has an
    # RMS level of 0 dBFS (from memory); its peak is 1.0 = 0 dBFS. A sine at
    # half amplitude: -6.02 dBFS both ways.
    t = np.arange(SR) / SR
    for amp, want in ((1.0, 0.0), (0.5, -6.0206)):
        x = (amp * np.sin(2 * np.pi * 997 * t)).astype(np.float32)[:, None]
        s = _session(MemorySink(), clock=FrozenClock())
        s.callback(x, len(x), None, _flags())
        _wait_caught_up(s)
        st = s.snapshot()
        s.finish()
        assert st.rms_dbfs == pytest.approx(want, abs=0.01)
        assert st.peak_dbfs == pytest.approx(want, abs=0.01)


def test_listen_device_that_stops_calling_back_is_lost_after_2_s(fake_sd, tmp_path, capsys):
    fake_sd.lose_after = 2 * 48000
    fake_sd.stays_active = True  # no error, no end of stream: the audio just stops
    t0 = time.monotonic()
    code, _out, err = _run_listen(tmp_path, capsys)
    assert code == 2
    assert "input device stopped delivering audio for 2 s (unplugged or lost)" in err
    assert time.monotonic() - t0 < 10
    saved, _ = sf.read(tmp_path / "take.wav", dtype="float32")
    np.testing.assert_array_equal(saved, fake_sd.source[:2 * 48000])


def test_a_failing_view_never_stops_the_capture():
    from rich.console import Console

    def broken():
        raise ValueError("bad state")

    buf = io.StringIO()
    display = live_view.LiveDisplay(broken, console=Console(file=buf), live=False)
    with display:
        display.tick()
    assert "progress line failed (ValueError: bad state); recording continues" in buf.getvalue()
    assert "recording continues" in display.renderable().plain


def test_view_renders_any_state_it_can_be_given():
    from rich.console import Console

    rng = np.random.default_rng(17)
    console = Console(file=io.StringIO(), width=80)
    odd = [-math.inf, math.inf, math.nan, 0.0, -200.0, 3.0]
    for _ in range(200):
        trace = list(rng.choice([rng.uniform(0, 40), *odd], size=int(rng.integers(0, 70))))
        st = capture.LiveState(
            sample_rate_hz=48000, channels=1, channel=0,
            elapsed_s=float(rng.uniform(0, 1e5)), analysed_s=float(rng.uniform(0, 1e5)),
            peak_dbfs=float(rng.choice(odd)), rms_dbfs=float(rng.choice([*odd, -30.0])),
            clicks=int(rng.integers(0, 10**6)),
            first_click_s=None if rng.random() < 0.3 else float(rng.uniform(0, 100)),
            last_click_s=None if rng.random() < 0.3 else float(rng.uniform(0, 100)),
            rate_hz=None if rng.random() < 0.3 else float(rng.uniform(0, 40)),
            clicks_per_cycle=int(rng.integers(1, 3)), rate_trace_hz=trace,
            clipping_now=bool(rng.random() < 0.5), too_quiet=bool(rng.random() < 0.5),
            queue_fill=float(rng.uniform(0, 1)), max_seconds=None if rng.random() < 0.5 else 60.0,
            silence_stop_s=None if rng.random() < 0.5 else 5.0)
        if st.first_click_s is None:
            st.last_click_s = None
        console.file.seek(0)
        console.file.truncate()
        console.print(live_view.render(st))  # must not raise, whatever the numbers
        assert "popmeter listen" in console.file.getvalue()
        assert "clicks" in live_view.plain_line(st)


def test_listen_at_a_rate_the_detector_refuses_leaves_no_file(fake_sd, tmp_path, capsys):
    fake_sd.rates = {4000}
    fake_sd.default_rate = 4000.0
    with pytest.raises(UsageError, match="8 kHz or more"):
        _run_listen(tmp_path, capsys)
    assert not (tmp_path / "take.wav").exists()
