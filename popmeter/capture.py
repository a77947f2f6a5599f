"""Live capture at the test tank: device stream, bounded queue, writer and analysis threads.

The capture is built so that no sample already heard is ever lost::

    sounddevice callback  --copy-->  bounded queue  -->  writer thread  -->  WAV on disk
      (counts overflow flags,                               |  header kept current,
       counts a full queue as                               |  flushed every 0.5 s
       dropped frames, never blocks)                        v
                                                      analysis thread  -->  live state
                                                      (ClickDetector, the same
                                                       streaming core as ``analyze``)

:class:`CaptureSession` is the core. It is driven exactly like a sounddevice
callback (``callback(indata, frames, time, status)``) plus a stop request, so it
runs (and is tested) without any audio stack. :func:`listen` wires it to a
PortAudio input stream through sounddevice, shows the live view, and when the
capture ends (silence after the run, ``--max-seconds``, Ctrl-C, a fault) it
finalises the file and runs the offline analysis on it, the same as
``popmeter analyze``.

The live click list is the streaming detector's clicks, completed about once
a second by the detection module's whole-recording passes on the run so far
(a second look at rejected candidates that ring like a family of clicks, the
atypical-click filter, one or two clicks per cycle): the same code the
offline analysis runs after the last block, so at the end of a capture the
live list is the offline one. Clicks the streaming detector accepts reach the
live state about 40 ms after their onset; clicks promoted by a pass, at the
next pass.

Every duration that ends a capture (the silence timeout, ``max_seconds``)
counts audio time: frames received divided by the sample rate, never the wall
clock. The wall clock is only used for flushing the file, redrawing the view,
and noticing a device that stopped delivering audio altogether.

The recording is written with libsndfile as 32-bit float samples in an RF64
container with automatic downgrade: while the data stays under 4 GiB the file
on disk is a plain WAV (WAVE_FORMAT_EXTENSIBLE), above it libsndfile writes
RF64 (EBU Tech 3306). After every flush the header is rewritten with the
current sizes (libsndfile's ``SFC_UPDATE_HEADER_NOW`` command), so a process
killed at any moment leaves a file that any WAV reader opens, missing at most
the samples of the last flush interval. Without that command libsndfile leaves
the RIFF and data sizes at zero until the file is closed. Checked with
libsndfile 1.2.2 by SIGKILL: below 4 GiB (tests/test_capture.py) and above it
(a 4.06 GiB file came back as RF64 with every flushed frame).
"""

from __future__ import annotations

import errno
import json
import math
import os
import queue
import sys
import threading
import time as _time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from popmeter.errors import DependencyError, DeviceError, PopmeterError, UsageError

#: Sample rate asked of the device when the user gives none (Hz). 48 kHz is
#: the native rate of most USB and laptop inputs (common practice, no source).
DEFAULT_SAMPLE_RATE_HZ = 48000

#: Audio held in the bounded queue between the callback and the writer (s).
#: Ten seconds rides out a slow disk or a busy machine; a full queue is
#: counted as dropped frames and reported, never silently lost.
QUEUE_SECONDS = 10.0

#: Longest wall time between two flushes of the recording to disk (s). The
#: issue asks for at least one flush a second; half a second leaves margin.
FLUSH_INTERVAL_S = 0.5

#: Wall time without a single callback after which the device counts as lost
#: (s). A working stream calls back every few milliseconds; two seconds is far
#: beyond any scheduling hiccup (common practice, no source).
DEVICE_SILENT_TIMEOUT_S = 2.0

#: Audio between two whole-run passes on the live clicks (s), and the largest
#: share of the analysis thread's time they may take (a slow pass on a long
#: run is spaced out accordingly).
PASS_EVERY_S = 1.0
PASS_CPU_SHARE = 0.05

#: Most audio the writer thread writes in one call when it has fallen behind
#: (s); a full disk then loses at most this much of what was queued.
WRITE_BATCH_S = 0.25

#: Most audio the analysis thread hands the detector in one call when it has
#: fallen behind (s); a second bounds the delay of the live view.
ANALYSIS_BATCH_S = 1.0

#: Interval at which Python hands the GIL between threads during a capture
#: (s), so that the audio callback waits at most about this long for it.
GIL_SWITCH_INTERVAL_S = 0.0005

#: Peak level at or above which a block counts as clipped (full scale = 1.0).
CLIP_LEVEL = 0.999

#: RMS level below which the input counts as too quiet (dBFS, AES17 RMS): well
#: below the room noise of any working microphone and preamp (common practice,
#: no source).
TOO_QUIET_DBFS = -70.0

#: Length of the rate trace kept for the live view (cycles).
RATE_TRACE_LEN = 60

# libsndfile commands (sndfile.h): rewrite the header now; write RF64 only
# when the data exceeds 4 GiB, else a plain WAV.
_SFC_UPDATE_HEADER_NOW = 0x1060
_SFC_RF64_AUTO_DOWNGRADE = 0x1210

_STOP = object()


# --- devices -------------------------------------------------------------------


@dataclass
class InputDevice:
    """One audio input device as PortAudio reports it.

    ``index`` is what ``--device`` accepts; ``default_samplerate_hz`` is the
    device's preferred rate (Hz); ``is_default`` marks the system default input.
    """

    index: int
    name: str
    max_input_channels: int
    default_samplerate_hz: float
    is_default: bool
    hostapi: str = ""


def import_sounddevice() -> Any:
    """Import sounddevice, turning a missing PortAudio into a one-line DependencyError."""
    try:
        import sounddevice
    except OSError as exc:  # sounddevice raises OSError when libportaudio is absent
        raise DependencyError(
            "PortAudio library not found, needed for live capture: install it "
            "(Debian/Ubuntu: apt-get install libportaudio2; macOS: brew install portaudio)"
            f" [{exc}]"
        ) from None
    except ImportError as exc:
        raise DependencyError(
            f"the sounddevice package is missing ({exc}): pip install sounddevice"
        ) from None
    if getattr(sounddevice, "_initialized", 1) == 0:  # released by an earlier listen()
        sounddevice._initialize()
    return sounddevice


def list_devices() -> list[InputDevice]:
    """The audio input devices ``listen`` can use (devices with at least one input)."""
    sd = import_sounddevice()
    try:
        devices = sd.query_devices()
        hostapis = sd.query_hostapis()
    except sd.PortAudioError as exc:
        raise DeviceError(f"cannot list audio devices: {exc}") from None
    default_in = _default_input_index(sd)
    out = []
    for index, dev in enumerate(devices):
        if int(dev["max_input_channels"]) < 1:
            continue
        out.append(
            InputDevice(
                index=index,
                name=str(dev["name"]),
                max_input_channels=int(dev["max_input_channels"]),
                default_samplerate_hz=float(dev["default_samplerate"]),
                is_default=index == default_in,
                hostapi=str(hostapis[dev["hostapi"]]["name"]),
            )
        )
    return out


def _default_input_index(sd: Any) -> int | None:
    try:
        idx = sd.default.device[0]
    except Exception:  # noqa: BLE001 - no default configured
        return None
    if idx is None or int(idx) < 0:
        return None
    return int(idx)


def resolve_device(device: str | int | None) -> InputDevice:
    """The input device named by ``--device``: an index, or a part of a name.

    ``None`` means the system default input. Raises DeviceError naming the
    device when it is missing, ambiguous or has no inputs.
    """
    devices = list_devices()
    if not devices:
        raise DeviceError("no audio input device found (see `popmeter devices`)")
    if device is None or str(device).strip() == "":
        for d in devices:
            if d.is_default:
                return d
        return devices[0]
    text = str(device).strip()
    if text.lstrip("-").isdigit():
        index = int(text)
        for d in devices:
            if d.index == index:
                return d
        raise DeviceError(f"input device {index}: no such input device (see `popmeter devices`)")
    matches = [d for d in devices if text.lower() in d.name.lower()]
    exact = [d for d in matches if d.name.lower() == text.lower()]
    if len(exact) == 1:
        return exact[0]
    if len(matches) == 1:
        return matches[0]
    if not matches:
        raise DeviceError(f"input device {text!r}: not found (see `popmeter devices`)")
    names = ", ".join(f"{d.index}: {d.name}" for d in matches)
    raise DeviceError(f"input device {text!r} is ambiguous ({names}); give the index")


# --- the recording on disk -----------------------------------------------------


class Sink(Protocol):
    """Where the writer thread puts frames. ``write`` takes (frames, channels) float32."""

    frames_written: int

    def write(self, frames: np.ndarray) -> None: ...

    def flush(self) -> None: ...

    def close(self) -> None: ...


class WavSink:
    """A float32 WAV file that stays readable if the process dies.

    Parameters
    ----------
    path : path-like
        File to create. Its parent folders are created; an existing file is
        never overwritten (a recording already made is worth more than a new
        one), it raises UsageError instead.
    sample_rate_hz : int
    channels : int

    Notes
    -----
    Samples are 32-bit float (``FLOAT``), so what the device delivered is
    stored bit for bit. The container is RF64 with libsndfile's automatic
    downgrade: a plain WAV below 4 GiB (about 6 h of one channel at 48 kHz),
    RF64 (EBU Tech 3306) above. :meth:`flush` writes the buffered frames and
    rewrites the header with the current sizes.
    """

    def __init__(self, path: str | os.PathLike[str], sample_rate_hz: int, channels: int):
        import soundfile as sf
        from soundfile import _ffi, _snd

        self.path = Path(path)
        if self.path.exists():
            raise UsageError(f"{self.path}: already exists; choose another --out (recordings are "
                             "never overwritten)")
        self.path.parent.mkdir(parents=True, exist_ok=True)
        try:
            self._file = sf.SoundFile(str(self.path), "w", samplerate=int(sample_rate_hz),
                                      channels=int(channels), format="RF64", subtype="FLOAT")
        except (RuntimeError, OSError) as exc:  # soundfile raises LibsndfileError (RuntimeError)
            raise UsageError(f"{self.path}: cannot create the recording ({exc})") from None
        self._snd = _snd
        self._ffi = _ffi
        self._snd.sf_command(self._file._file, _SFC_RF64_AUTO_DOWNGRADE, _ffi.NULL, 1)
        self.channels = int(channels)
        self.frames_written = 0
        self.closed = False
        self.flush()

    def write(self, frames: np.ndarray) -> None:
        """Append frames, shape (n, channels) float32. OSError when the disk refuses."""
        frames = np.ascontiguousarray(frames, dtype=np.float32)
        try:
            self._file.write(frames)
        except Exception as exc:
            raise _as_oserror(exc, self.path) from exc
        self.frames_written += int(frames.shape[0])

    def flush(self) -> None:
        """Push buffered frames to the OS and rewrite the header sizes."""
        try:
            self._file.flush()
            self._snd.sf_command(self._file._file, _SFC_UPDATE_HEADER_NOW, self._ffi.NULL, 0)
        except Exception as exc:
            raise _as_oserror(exc, self.path) from exc

    def close(self) -> None:
        """Finalise the header and close the file (safe to call twice)."""
        if not self.closed:
            self.closed = True
            try:
                self._file.close()
            except Exception as exc:
                raise _as_oserror(exc, self.path) from exc


def _as_oserror(exc: Exception, path: Path) -> OSError:
    if isinstance(exc, OSError):
        return exc
    # libsndfile does not pass errno on; a full disk is by far the usual cause
    # of a failed write to a file that opened fine, so check the free space.
    try:
        import shutil

        if shutil.disk_usage(path.parent).free < 1 << 20:
            return OSError(errno.ENOSPC, f"no space left on device ({exc})")
    except OSError:
        pass
    return OSError(errno.EIO, str(exc))


# --- the live state --------------------------------------------------------------


@dataclass
class LiveClick:
    """A click as seen live: sample index and time from the start of the file."""

    sample: int
    time_s: float
    level_dbfs: float
    seen_wall_s: float  # wall clock (session clock) when it reached the live state
    frames_received: int  # frames the callback had received by then


@dataclass
class LiveState:
    """A snapshot of the capture for the live view (all times in audio seconds)."""

    sample_rate_hz: int
    channels: int
    channel: int
    elapsed_s: float = 0.0  # audio received by the callback
    analysed_s: float = 0.0  # audio processed by the detector
    written_s: float = 0.0  # audio written to disk
    peak_dbfs: float = -math.inf  # peak of the last ~0.25 s
    rms_dbfs: float = -math.inf  # RMS of the last ~0.25 s (AES17: full-scale sine = 0)
    clipped_blocks: int = 0
    clipping_now: bool = False
    too_quiet: bool = False
    clicks: int = 0
    first_click_s: float | None = None
    last_click_s: float | None = None
    rate_hz: float | None = None
    clicks_per_cycle: int = 1
    rate_trace_hz: list[float] = field(default_factory=list)
    phase: str = "heating"  # heating, startup, steady, fade, silent (live labels)
    stalls: int = 0
    overflows: int = 0  # PortAudio input-overflow flags
    dropped_frames: int = 0  # frames lost because the queue was full
    queue_fill: float = 0.0  # 0..1
    stop_reason: str | None = None
    faults: list[str] = field(default_factory=list)
    silence_stop_s: float | None = None
    max_seconds: float | None = None


@dataclass
class CaptureResult:
    """What a finished capture leaves behind."""

    frames_received: int
    frames_written: int
    dropped_frames: int
    overflows: int
    underflows: int
    callbacks: int
    sample_rate_hz: int
    channels: int
    stop_reason: str | None
    faults: list[str]
    clicks: list[Any]  # the live click list at the end (after the last whole-run pass)
    live_clicks: list[LiveClick]  # every click as the streaming detector gave it, when
    clicks_per_cycle: int | None = None  # the last pass's decision (None: no passes)

    @property
    def written_s(self) -> float:
        return self.frames_written / self.sample_rate_hz


class _RateTracker:
    """A light running estimate of the cycle rate, stalls and phase, for display only.

    The final figures come from the offline timeline. Here the cycle period is
    the median over the last 8 cycles of ``t[i] - t[i - clicks_per_cycle]``
    (so a two-click engine shows its cycle rate, not twice it). One or two
    clicks per cycle comes from the detection module's decision on the run so
    far (:meth:`rebase`, after each whole-run pass), used from the 64th click
    on: on fewer clicks (an irregular startup) the decision flips, so one
    click per cycle is shown until then. A gap longer than 4 click intervals
    that ends with a new click counts as a stall. Phases from the trend of the
    rate: rising by over 5 % is startup, falling by over 8 % after steady
    running is fade, an interquartile spread under 8 % is steady (common
    practice, no source).
    """

    def __init__(self, *, clicks_per_cycle: int | None = None) -> None:
        self.times: list[float] = []
        self.trace: list[float] = []
        self.stalls = 0
        self.phase = "heating"
        self.rate_hz: float | None = None
        self.fixed_cpc = clicks_per_cycle
        self.clicks_per_cycle = clicks_per_cycle or 1

    def add(self, time_s: float) -> None:
        """A click just found by the streaming detector."""
        interval = self._click_interval()
        if self.times and interval is not None and time_s - self.times[-1] > 4.0 * interval:
            self.stalls += 1
        self.times.append(time_s)
        if len(self.times) > 64:
            del self.times[:-64]
        self._update_rate()

    def rebase(self, times_s: list[float], *, clicks_per_cycle: int, total_clicks: int) -> None:
        """After a whole-run pass: the last clicks of the current list and its decision."""
        self.times = list(times_s[-64:])
        if self.fixed_cpc is None:
            self.clicks_per_cycle = int(clicks_per_cycle) if total_clicks >= 64 else 1
        self._update_rate()

    def _update_rate(self) -> None:
        period = self._period()
        if period:
            self.rate_hz = 1.0 / period
            self.trace.append(self.rate_hz)
            if len(self.trace) > RATE_TRACE_LEN:
                del self.trace[:-RATE_TRACE_LEN]
        self._update_phase()

    def _period(self) -> float | None:
        k = self.clicks_per_cycle
        if len(self.times) < k + 2:
            return None
        t = np.asarray(self.times[-(8 + k):])
        spans = t[k:] - t[:-k]
        return float(np.median(spans)) if np.all(spans > 0) else None

    def _click_interval(self) -> float | None:
        if len(self.times) < 3:
            return None
        return float(np.median(np.diff(self.times[-9:])))

    def _update_phase(self) -> None:
        if len(self.trace) < 6:
            self.phase = "startup"
            return
        recent = np.asarray(self.trace[-6:])
        older = np.asarray(self.trace[-12:-6]) if len(self.trace) >= 12 else recent
        change = (np.median(recent) - np.median(older)) / max(np.median(older), 1e-9)
        spread = (np.percentile(recent, 75) - np.percentile(recent, 25)) / np.median(recent)
        if change > 0.05:
            self.phase = "startup"
        elif change < -0.08 and self.phase in ("steady", "fade"):
            self.phase = "fade"
        elif spread < 0.08:
            self.phase = "steady"

    def silent_for(self, now_s: float) -> None:
        """No click for over 4 click intervals: show no rate, phase ``silent``."""
        interval = self._click_interval()
        if self.times and interval and now_s - self.times[-1] > 4.0 * interval:
            self.phase = "silent"
            self.rate_hz = None


# --- the session -----------------------------------------------------------------


def _rms_dbfs(sum_of_squares: float, n: int) -> float:
    """RMS level in dBFS as AES17 defines it: a full-scale sine reads 0 dBFS
    (so 3.01 dB above ``10 log10(mean square)``)."""
    if n <= 0 or sum_of_squares <= 0:
        return -math.inf
    return 10.0 * math.log10(2.0 * sum_of_squares / n)


class CaptureSession:
    """The capture pipeline, independent of any audio stack.

    Drive it like a sounddevice input callback: :meth:`start`, then
    ``callback(indata, frames, time, status)`` for each block (``indata`` of
    shape (frames, channels), float32), and :meth:`finish` to drain the queue,
    close the recording and get the :class:`CaptureResult`.

    Parameters
    ----------
    sink : Sink
        Where every frame goes (normally a :class:`WavSink`).
    sample_rate_hz : int
    channels : int
        Channels per block (all are saved).
    channel : int, optional
        Channel analysed live, from 0. Default 0.
    detector : object with ``process(block) -> list`` and ``flush() -> list``, optional
        Default: ``popmeter.detection.ClickDetector(sample_rate_hz)``, the
        streaming core that ``analyze`` uses.
    max_seconds : float, optional
        Stop after this much audio (s); the recording then holds exactly
        ``round(max_seconds * sample_rate_hz)`` frames. Default: no limit.
    silence_stop_s : float, optional
        Once the first click has been heard, stop when no click has come for
        this much audio (s). Default None: no automatic stop.
    clicks_per_cycle : {1, 2}, optional
        For the live rate display only; default None takes the detection
        module's decision on the run so far.
    whole_run_passes : callable ``(detector, clicks) -> DetectionResult``, None or "auto"
        The passes that the offline analysis runs once the whole file is read
        (rejection of atypical clicks, second look at rejected candidates
        that ring like a family of clicks, clicks per cycle). Run on the
        clicks so far about once a second of audio (less often when a pass
        gets slow: never more than 5 % of the time) and once more at the end,
        so the live click list converges on the offline one. "auto" (the
        default): :func:`detection_passes` for a
        ``popmeter.detection.ClickDetector``, none for anything else.
    queue_seconds : float
        Capacity of the bounded queue in seconds of audio (default
        :data:`QUEUE_SECONDS`).
    flush_interval_s : float
        Longest wall time between flushes (default :data:`FLUSH_INTERVAL_S`).
    clock : callable
        Wall clock in seconds (default ``time.monotonic``); used for flushing,
        the live-state timestamps and nothing that ends a capture.
    """

    def __init__(
        self,
        *,
        sink: Sink,
        sample_rate_hz: int,
        channels: int,
        channel: int = 0,
        detector: Any = None,
        max_seconds: float | None = None,
        silence_stop_s: float | None = None,
        clicks_per_cycle: int | None = None,
        whole_run_passes: Any = "auto",
        queue_seconds: float = QUEUE_SECONDS,
        flush_interval_s: float = FLUSH_INTERVAL_S,
        clock: Callable[[], float] = _time.monotonic,
    ) -> None:
        if not 0 <= channel < channels:
            raise UsageError(f"--channel {channel}: the input has {channels} channel(s) (0..{channels - 1})")
        self.sink = sink
        self.sample_rate_hz = int(sample_rate_hz)
        self.channels = int(channels)
        self.channel = int(channel)
        if detector is None:
            from popmeter.detection import ClickDetector

            detector = ClickDetector(self.sample_rate_hz)
        self.detector = detector
        if isinstance(whole_run_passes, str) and whole_run_passes == "auto":
            from popmeter.detection import ClickDetector

            whole_run_passes = detection_passes if isinstance(detector, ClickDetector) else None
        self._passes = whole_run_passes
        self._pass_result: Any = None
        self._pass_upto = 0  # streaming clicks covered by the last pass
        self._next_pass_frames = 0
        self.pass_seconds: list[float] = []  # wall time of each pass (s)
        self.max_frames = (
            None if max_seconds is None else round(max_seconds * self.sample_rate_hz)
        )
        self.max_seconds = max_seconds
        self.silence_stop_s = silence_stop_s
        self.flush_interval_s = float(flush_interval_s)
        self.clock = clock
        # Capacity in blocks: blocks are usually 256..2048 frames; count on 256.
        self._capacity_blocks = max(8, int(queue_seconds * self.sample_rate_hz / 256))
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=self._capacity_blocks)
        self._analysis_queue: queue.Queue[Any] = queue.Queue()
        self.stop_event = threading.Event()
        self._lock = threading.Lock()
        self._threads: list[threading.Thread] = []
        self._finished = False
        # counters written by the callback only
        self.frames_received = 0
        self.callbacks = 0
        self.overflows = 0
        self.underflows = 0
        self.dropped_frames = 0
        self._pending_gap = 0
        self.last_callback_wall_s: float | None = None
        # written by the threads
        self.frames_written = 0
        self.frames_analysed = 0
        self._write_failed = False
        self.stop_reason: str | None = None
        self.faults: list[str] = []
        self.clicks: list[Any] = []
        self.live_clicks: list[LiveClick] = []
        self._rate = _RateTracker(clicks_per_cycle=clicks_per_cycle)
        self._level_window: list[tuple[float, float, int]] = []  # (peak, sumsq, n)
        self._clipped_blocks = 0
        self._quiet_frames = 0

    # -- control ------------------------------------------------------------

    def start(self) -> None:
        """Start the writer and analysis threads."""
        self._threads = [
            threading.Thread(target=self._writer_loop, name="popmeter-writer", daemon=True),
            threading.Thread(target=self._analysis_loop, name="popmeter-analysis", daemon=True),
        ]
        for t in self._threads:
            t.start()

    def request_stop(self, reason: str) -> None:
        """Ask the capture to end (the first reason given is kept)."""
        with self._lock:
            if self.stop_reason is None:
                self.stop_reason = reason
        self.stop_event.set()

    def report_fault(self, message: str) -> None:
        """Record a fault (one line for the user) and stop the capture."""
        with self._lock:
            self.faults.append(message)
        self.request_stop(message)

    @property
    def stopping(self) -> bool:
        return self.stop_event.is_set()

    # -- the audio callback ----------------------------------------------------

    def callback(self, indata: np.ndarray, frames: int, time: Any, status: Any) -> None:
        """The sounddevice InputStream callback: copy, count, enqueue; never block.

        ``status`` is a ``sounddevice.CallbackFlags`` (or anything with
        ``input_overflow``/``input_underflow`` attributes, or None). Any
        exception is caught, recorded as a fault and stops the capture.
        """
        try:
            self.callbacks += 1
            self.last_callback_wall_s = self.clock()
            if status is not None:
                if getattr(status, "input_overflow", False):
                    self.overflows += 1
                if getattr(status, "input_underflow", False):
                    self.underflows += 1
            if self.stop_event.is_set():
                return
            block = np.array(indata, dtype=np.float32, copy=True)
            if block.ndim == 1:
                block = block[:, None]
            if block.ndim != 2 or block.shape[1] != self.channels or block.shape[0] != frames:
                raise ValueError(
                    f"callback got a block of shape {block.shape}, expected ({frames}, {self.channels})"
                )
            reached_max = False
            if self.max_frames is not None:
                room = self.max_frames - self.frames_received
                if room <= block.shape[0]:
                    block = block[: max(room, 0)]
                    reached_max = True
            n = block.shape[0]
            try:
                self._queue.put_nowait((block, self._pending_gap))
                self._pending_gap = 0
            except queue.Full:
                self.dropped_frames += n
                self._pending_gap += n
            self.frames_received += n
            if reached_max:
                self.request_stop(f"reached --max-seconds ({self.max_seconds:g} s of audio)")
        except Exception as exc:  # noqa: BLE001 - never let an exception escape into PortAudio
            self.report_fault(f"audio callback failed: {type(exc).__name__}: {exc}")

    def stream_finished(self) -> None:
        """sounddevice ``finished_callback``: a stream ending unasked means the device is gone."""
        if not self.stop_event.is_set():
            self.report_fault("input device stopped during the run (unplugged or lost)")

    # -- threads -----------------------------------------------------------------

    def _writer_loop(self) -> None:
        # Blocks waiting in the queue are written together (up to
        # WRITE_BATCH_S of audio): one write per device block at the real-time
        # pace, fewer and larger writes when the writer has fallen behind.
        max_batch = max(1, int(WRITE_BATCH_S * self.sample_rate_hz))
        last_flush = self.clock()
        done = False
        while not done:
            try:
                items = [self._queue.get(timeout=0.1)]
            except queue.Empty:
                items = []
            size = 0
            while items and items[-1] is not _STOP and size < max_batch:
                size += items[-1][0].shape[0] + items[-1][1]
                try:
                    items.append(self._queue.get_nowait())
                except queue.Empty:
                    break
            if items and items[-1] is _STOP:
                items.pop()
                done = True
            if items and not self._write_failed:
                parts = []
                for block, gap in items:
                    if gap:
                        parts.append(np.zeros((gap, self.channels), np.float32))
                    parts.append(block)
                try:
                    self._write(parts[0] if len(parts) == 1 else np.concatenate(parts))
                except OSError as exc:
                    self._write_failed = True
                    self._disk_fault(exc)
            now = self.clock()
            if now - last_flush >= self.flush_interval_s and not self._write_failed:
                last_flush = now
                try:
                    self.sink.flush()
                except OSError as exc:
                    self._write_failed = True
                    self._disk_fault(exc)
        self._analysis_queue.put(_STOP)

    def _write(self, frames: np.ndarray) -> None:
        if frames.shape[0] == 0:
            return
        self.sink.write(frames)
        with self._lock:
            self.frames_written += frames.shape[0]
        self._analysis_queue.put(frames[:, self.channel])

    def _disk_fault(self, exc: OSError) -> None:
        where = getattr(self.sink, "path", "the recording")
        kept = self.frames_written / self.sample_rate_hz
        if exc.errno == errno.ENOSPC:
            msg = f"disk full writing {where}: capture stopped, the first {kept:.1f} s are kept"
        else:
            msg = f"cannot write {where} ({exc}): capture stopped, the first {kept:.1f} s are kept"
        self.report_fault(msg)

    def _analysis_loop(self) -> None:
        # Blocks waiting in the queue are analysed together (up to
        # ANALYSIS_BATCH_S of audio): at the real-time pace that is one block
        # at a time (lowest latency); when the thread falls behind, fewer and
        # larger calls let it catch up. The detector gives the same clicks
        # whatever the block size.
        max_batch = max(1, int(ANALYSIS_BATCH_S * self.sample_rate_hz))
        done = False
        while not done:
            parts = [self._analysis_queue.get()]
            size = 0 if parts[0] is _STOP else parts[0].shape[0]
            while parts[-1] is not _STOP and size < max_batch:
                try:
                    nxt = self._analysis_queue.get_nowait()
                except queue.Empty:
                    break
                parts.append(nxt)
                if nxt is not _STOP:
                    size += nxt.shape[0]
            if parts[-1] is _STOP:
                parts.pop()
                done = True
            try:
                if parts:
                    x = parts[0] if len(parts) == 1 else np.concatenate(parts)
                    self._levels(x)
                    found = self.detector.process(x)
                    with self._lock:
                        self.frames_analysed += x.shape[0]
                    self._add_clicks(found)
                    self._maybe_pass(final=False)
                    self._check_silence()
                if done:
                    self._add_clicks(self.detector.flush())
                    self._maybe_pass(final=True)
            except Exception as exc:  # noqa: BLE001
                self._analysis_fault(exc)
                # keep draining so the writer never blocks; recording continues
                while not done and self._analysis_queue.get() is not _STOP:
                    pass
                return

    def _analysis_fault(self, exc: Exception) -> None:
        with self._lock:
            self.faults.append(
                f"live click detection failed ({type(exc).__name__}: {exc}); recording continued"
            )

    def _levels(self, x: np.ndarray) -> None:
        if x.size == 0:
            return
        peak = float(np.max(np.abs(x)))
        sumsq = float(np.dot(x, x))
        with self._lock:
            self._level_window.append((peak, sumsq, x.size))
            n = sum(w[2] for w in self._level_window)
            while len(self._level_window) > 1 and n - self._level_window[0][2] >= 0.25 * self.sample_rate_hz:
                n -= self._level_window.pop(0)[2]
            if peak >= CLIP_LEVEL:
                self._clipped_blocks += 1
            rms_db = _rms_dbfs(sumsq, x.size)
            self._quiet_frames = self._quiet_frames + x.size if rms_db < TOO_QUIET_DBFS else 0

    def _add_clicks(self, found: list[Any]) -> None:
        if not found:
            return
        now = self.clock()
        with self._lock:
            for c in found:
                self.clicks.append(c)
                sample = int(getattr(c, "sample", round(c.time_s * self.sample_rate_hz)))
                time_s = float(getattr(c, "time_s", sample / self.sample_rate_hz))
                self.live_clicks.append(LiveClick(sample=sample, time_s=time_s,
                                                  level_dbfs=float(getattr(c, "level_dbfs", math.nan)),
                                                  seen_wall_s=now,
                                                  frames_received=self.frames_received))
                self._rate.add(time_s)

    def _maybe_pass(self, *, final: bool) -> None:
        if self._passes is None or not self.clicks:
            return
        if not final and self.frames_analysed < self._next_pass_frames:
            return
        t0 = _time.perf_counter()
        result = self._passes(self.detector, list(self.clicks))
        cost_s = _time.perf_counter() - t0
        self.pass_seconds.append(cost_s)
        interval_s = max(PASS_EVERY_S, cost_s / PASS_CPU_SHARE)
        self._next_pass_frames = self.frames_analysed + int(interval_s * self.sample_rate_hz)
        with self._lock:
            self._pass_result = result
            self._pass_upto = len(self.clicks)
            self._rate.rebase([c.time_s for c in result.clicks],
                              clicks_per_cycle=result.clicks_per_cycle,
                              total_clicks=len(result.clicks))

    def _current_clicks(self) -> list[Any]:
        """The live click list: the last whole-run pass, then the streaming clicks since
        (call with the lock held)."""
        if self._pass_result is None:
            return list(self.clicks)
        return list(self._pass_result.clicks) + self.clicks[self._pass_upto:]

    def _last_click_s(self) -> float | None:
        last = self.clicks[-1].time_s if self.clicks else None
        if self._pass_result is not None and self._pass_result.clicks:
            passed = self._pass_result.clicks[-1].time_s
            last = passed if last is None else max(last, passed)
        return last

    def _check_silence(self) -> None:
        now_s = self.frames_analysed / self.sample_rate_hz
        with self._lock:
            self._rate.silent_for(now_s)
            last = self._last_click_s()
        if self.silence_stop_s is not None and last is not None and now_s - last >= self.silence_stop_s:
            self.request_stop(f"no click for {self.silence_stop_s:g} s of audio after the run")

    # -- results ---------------------------------------------------------------------

    def _click_count(self) -> int:
        if self._pass_result is None:
            return len(self.clicks)
        return len(self._pass_result.clicks) + len(self.clicks) - self._pass_upto

    def _first_click_s(self) -> float | None:
        first = self.clicks[0].time_s if self.clicks else None
        if self._pass_result is not None and self._pass_result.clicks:
            passed = self._pass_result.clicks[0].time_s
            first = passed if first is None else min(first, passed)
        return first

    def snapshot(self) -> LiveState:
        """A consistent copy of the live state (cheap; called by the view a few times a second)."""
        sr = self.sample_rate_hz
        with self._lock:
            n = sum(w[2] for w in self._level_window)
            peak = max((w[0] for w in self._level_window), default=0.0)
            sumsq = sum(w[1] for w in self._level_window)
            recent_clip = any(w[0] >= CLIP_LEVEL for w in self._level_window)
            return LiveState(
                sample_rate_hz=sr,
                channels=self.channels,
                channel=self.channel,
                elapsed_s=self.frames_received / sr,
                analysed_s=self.frames_analysed / sr,
                written_s=self.frames_written / sr,
                peak_dbfs=20 * math.log10(peak) if peak > 0 else -math.inf,
                rms_dbfs=_rms_dbfs(sumsq, n),
                clipped_blocks=self._clipped_blocks,
                clipping_now=recent_clip,
                too_quiet=self._quiet_frames >= sr,
                clicks=self._click_count(),
                first_click_s=self._first_click_s(),
                last_click_s=self._last_click_s(),
                rate_hz=self._rate.rate_hz,
                clicks_per_cycle=self._rate.clicks_per_cycle,
                rate_trace_hz=list(self._rate.trace),
                phase=self._rate.phase,
                stalls=self._rate.stalls,
                overflows=self.overflows,
                dropped_frames=self.dropped_frames,
                queue_fill=self._queue.qsize() / self._capacity_blocks,
                stop_reason=self.stop_reason,
                faults=list(self.faults),
                silence_stop_s=self.silence_stop_s,
                max_seconds=self.max_seconds,
            )

    def finish(self, *, timeout_s: float = 60.0) -> CaptureResult:
        """End the capture: drain the queue, flush the detector, close the file.

        Call after the stream has stopped (no more callbacks). Safe to call
        once; the result lists every fault met on the way.
        """
        if not self._finished:
            self._finished = True
            self.stop_event.set()
            if self._pending_gap and not self._write_failed:
                # frames dropped at the very end: still recorded as silence so
                # that the file's timeline matches the frames received
                self._queue.put((np.zeros((0, self.channels), np.float32), self._pending_gap))
                self._pending_gap = 0
            self._queue.put(_STOP)
            for t in self._threads:
                t.join(timeout_s)
                if t.is_alive():
                    self.faults.append(f"{t.name} did not finish within {timeout_s:g} s")
            try:
                self.sink.close()
            except OSError as exc:
                if not self._write_failed:
                    self._disk_fault(exc)
        return CaptureResult(
            frames_received=self.frames_received,
            frames_written=self.frames_written,
            dropped_frames=self.dropped_frames,
            overflows=self.overflows,
            underflows=self.underflows,
            callbacks=self.callbacks,
            sample_rate_hz=self.sample_rate_hz,
            channels=self.channels,
            stop_reason=self.stop_reason,
            faults=list(self.faults),
            clicks=self._current_clicks(),
            live_clicks=list(self.live_clicks),
            clicks_per_cycle=(self._pass_result.clicks_per_cycle
                              if self._pass_result is not None else None),
        )


# --- listen -----------------------------------------------------------------------


def detection_passes(detector: Any, clicks: list[Any]) -> Any:
    """The detection module's whole-recording passes on the clicks of a stream so far.

    :func:`popmeter.detection.finish_detection`: what
    ``detect_clicks_in_blocks`` does after the last block (atypical clicks set
    aside, rejected candidates that ring like a family taken back, one or two
    clicks per cycle), run on the live ClickDetector's state -- the same code,
    so the live click list becomes the offline one. Returns a
    ``DetectionResult``; the detector is not changed.
    """
    from popmeter.detection import finish_detection

    return finish_detection(detector, clicks)


def choose_sample_rate(sd: Any, device: InputDevice, channels: int,
                       requested_hz: int | None) -> tuple[int, str | None]:
    """The rate to open the device at, and a note when it differs from the one asked for.

    Tries ``requested_hz`` (or :data:`DEFAULT_SAMPLE_RATE_HZ`), then the
    device's default rate. Raises DeviceError if neither is accepted.
    """
    want = int(requested_hz or DEFAULT_SAMPLE_RATE_HZ)
    tried = []
    for rate in (want, round(device.default_samplerate_hz)):
        if rate in tried:
            continue
        tried.append(rate)
        try:
            sd.check_input_settings(device=device.index, channels=channels, samplerate=rate,
                                    dtype="float32")
        except Exception as exc:  # noqa: BLE001 - PortAudioError or ValueError
            last = exc
            continue
        note = None
        if rate != want:
            note = (f"input device {device.index} ({device.name}) does not take {want} Hz; "
                    f"using its default rate {rate} Hz")
        return rate, note
    raise DeviceError(f"input device {device.index} ({device.name}): no usable sample rate "
                      f"(tried {', '.join(map(str, tried))} Hz: {last})")


def write_live_sidecar(path: str | os.PathLike[str], result: CaptureResult, *,
                       device: InputDevice | None = None, recording: str | None = None) -> Path:
    """Write the live clicks and capture counters as JSON (schema ``popmeter.live/1``).

    Written beside the recording as ``NAME.live.json``; the final analysis is
    in the ``--json`` output as for ``analyze``.
    """
    doc = {
        "schema": "popmeter.live/1",
        "recording": recording,
        "device": asdict(device) if device is not None else None,
        "sample_rate_hz": result.sample_rate_hz,
        "channels": result.channels,
        "frames_received": result.frames_received,
        "frames_written": result.frames_written,
        "dropped_frames": result.dropped_frames,
        "input_overflows": result.overflows,
        "stop_reason": result.stop_reason,
        "faults": result.faults,
        "clicks_per_cycle": result.clicks_per_cycle,
        # the live click list at the end of the capture
        "clicks": [
            {"sample": int(c.sample), "time_s": float(c.time_s),
             "level_dbfs": _finite(getattr(c, "level_dbfs", None)),
             "kind": getattr(c, "kind", 0), "cycle": getattr(c, "cycle", None)}
            for c in result.clicks
        ],
        # every click as the streaming detector reported it, and how much
        # audio had arrived by then (frames): the detection latency
        "stream_clicks": [
            {"sample": c.sample, "time_s": c.time_s, "frames_received": c.frames_received}
            for c in result.live_clicks
        ],
    }
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    tmp.write_text(json.dumps(doc, indent=1) + "\n", encoding="utf-8")
    os.replace(tmp, path)
    return path


def _finite(x: Any) -> float | None:
    if x is None:
        return None
    f = float(x)
    return f if math.isfinite(f) else None


def sidecar_path(out: str | os.PathLike[str]) -> Path:
    """``X.live.json`` for a recording ``X.wav``."""
    out = Path(out)
    return out.with_name(out.stem + ".live.json")


def listen(
    *,
    out: str | os.PathLike[str],
    device: str | int | None = None,
    sample_rate_hz: int | None = None,
    channel: int | None = None,
    boat: Any = None,
    spec: Any = None,
    max_seconds: float | None = None,
    silence_stop_s: float | None = 5.0,
    json_path: str | os.PathLike[str] | None = None,
    csv_path: str | os.PathLike[str] | None = None,
    report_dir: str | os.PathLike[str] | None = None,
    view: bool = True,
    console: Any = None,
) -> int:
    """Record a run live, show it as it happens, then analyse it like ``analyze``.

    Parameters
    ----------
    out : path-like
        The recording to write (32-bit float WAV; RF64 beyond 4 GiB). Never
        overwritten. The live clicks go beside it as ``NAME.live.json``.
    device : str or int, optional
        Input device index or part of its name (see ``popmeter devices``).
        Default: the system default input.
    sample_rate_hz : int, optional
        Default 48000 Hz; if the device refuses the rate, its own default rate
        is used and a line says so.
    channel : int, optional
        Input channel analysed, from 0 (default 0). Channels 0..N are saved.
    boat, spec : path-like, optional
        Boat profile and QC spec, as for ``analyze``; checked before capture.
    max_seconds : float, optional
        Stop after this much audio (s of audio, not wall time).
    silence_stop_s : float, optional
        Once the run has started (first click), stop after this much audio
        without a click (s). Default 5 s. None: only Ctrl-C or max_seconds.
    json_path, csv_path, report_dir : path-like, optional
        Outputs of the final analysis, as for ``analyze``.
    view : bool
        Live view (default True); False prints a plain progress line every few
        seconds, for logs and scripts.
    console : rich.console.Console, optional

    Returns
    -------
    int
        0 when the capture went through (and, with ``spec``, the unit passed);
        1 when the unit failed its spec or could not be judged; 2 when a fault
        (device lost, disk full) cut the capture short, after analysing what
        was kept.
    """
    from rich.console import Console

    from popmeter import live_view

    console = console or Console()
    out = Path(out)
    channel = 0 if channel is None else int(channel)
    if channel < 0:
        raise UsageError(f"--channel {channel}: must be 0 or more")
    if out.suffix.lower() != ".wav":
        raise UsageError(f"{out}: --out must end in .wav (live recordings are saved as WAV, "
                         "32-bit float)")
    if out.exists():
        raise UsageError(f"{out}: already exists; choose another --out (recordings are never "
                         "overwritten)")
    profile, qc_spec = _load_inputs(boat, spec)

    sd = import_sounddevice()
    dev = resolve_device(device)
    channels = channel + 1
    if channels > dev.max_input_channels:
        raise UsageError(f"--channel {channel}: input device {dev.index} ({dev.name}) has "
                         f"{dev.max_input_channels} input channel(s)")
    rate, rate_note = choose_sample_rate(sd, dev, channels, sample_rate_hz)

    live_view.print_start(console, device=dev, sample_rate_hz=rate, out=out,
                          max_seconds=max_seconds, silence_stop_s=silence_stop_s)
    if rate_note:
        console.print(f"[yellow]note:[/] {rate_note}")

    sink = WavSink(out, rate, channels)
    try:
        session = CaptureSession(sink=sink, sample_rate_hz=rate, channels=channels,
                                 channel=channel, max_seconds=max_seconds,
                                 silence_stop_s=silence_stop_s)
    except BaseException:
        sink.close()
        out.unlink(missing_ok=True)  # nothing recorded yet: leave no empty file behind
        raise
    session.start()
    # The audio callback needs the GIL within one device period (10 ms at
    # 512 frames); Python hands the GIL between threads every 5 ms by default,
    # so a busy analysis thread can make the callback miss its deadline.
    switch_s = sys.getswitchinterval()
    sys.setswitchinterval(GIL_SWITCH_INTERVAL_S)
    try:
        # latency="high": the device's larger buffer. Capture needs no low
        # latency (clicks are timed by their sample position), and a bigger
        # buffer rides out moments when the analysis keeps the callback waiting.
        stream = sd.InputStream(device=dev.index, channels=channels, samplerate=rate,
                                dtype="float32", latency="high", callback=session.callback,
                                finished_callback=session.stream_finished)
    except Exception as exc:  # noqa: BLE001 - PortAudioError and friends
        session.finish()
        sys.setswitchinterval(switch_s)
        _remove_empty(out, session)
        raise DeviceError(f"input device {dev.index} ({dev.name}): cannot open it, busy or "
                          f"unavailable ({exc})") from None
    try:
        try:
            stream.start()
        except Exception as exc:  # noqa: BLE001
            session.report_fault(f"input device {dev.index} ({dev.name}): cannot start ({exc})")
        _wait_for_end(session, stream, console=console, view=view)
    finally:
        problem = _close_stream(sd, stream, abort=bool(session.faults))
        if problem and not session.faults:
            session.faults.append(f"input device {dev.index} ({dev.name}) {problem}")
        result = session.finish()
        sys.setswitchinterval(switch_s)
    return _after_capture(result, out=out, device=dev, channel=channel, profile=profile,
                          qc_spec=qc_spec, json_path=json_path, csv_path=csv_path,
                          report_dir=report_dir, console=console)


#: Wall time allowed for PortAudio to stop a stream (s). Stopping a stream
#: whose device has vanished can block forever (seen with the JACK host API
#: after the server died), so it runs in a helper thread with this deadline.
STREAM_CLOSE_TIMEOUT_S = 3.0


def _close_stream(sd: Any, stream: Any, *, abort: bool) -> str | None:
    """Stop and close the stream without ever hanging; returns a problem or None."""
    errors: list[str] = []

    def work() -> None:
        try:
            if abort:
                stream.abort()
            else:
                stream.stop()
            stream.close()
        except Exception as exc:  # noqa: BLE001 - a device that is gone may refuse to stop
            errors.append(f"failed while stopping ({exc})")
            return
        # Release PortAudio now, while the device is surely still there:
        # sounddevice would otherwise do it at interpreter exit, and a device
        # (or JACK server) gone by then makes PortAudio abort the process,
        # replacing listen's exit code. import_sounddevice() initialises it
        # again if it is needed later in this process.
        terminate = getattr(sd, "_terminate", None)
        try:
            while terminate is not None and getattr(sd, "_initialized", 0) > 0:
                terminate()
        except Exception:  # noqa: BLE001, S110 - nothing left to release
            pass

    t = threading.Thread(target=work, name="popmeter-stream-close", daemon=True)
    t.start()
    t.join(STREAM_CLOSE_TIMEOUT_S)
    if t.is_alive():
        # PortAudio is stuck on a dead device; its exit handler (Pa_Terminate)
        # would block the interpreter's exit the same way, so drop it.
        import atexit

        handler = getattr(sd, "_exit_handler", None)
        if handler is not None:
            atexit.unregister(handler)
        return f"did not stop within {STREAM_CLOSE_TIMEOUT_S:g} s (device lost)"
    return errors[0] if errors else None


def _load_inputs(boat: Any, spec: Any) -> tuple[Any, Any]:
    profile = qc = None
    if boat is not None:
        if isinstance(boat, (str, os.PathLike)):
            from popmeter.profile import load_profile

            profile = load_profile(boat)
        else:
            profile = boat
    if spec is not None:
        if isinstance(spec, (str, os.PathLike)):
            from popmeter.qc_spec import load_spec

            qc = load_spec(spec)
        else:
            qc = spec
    return profile, qc


def _remove_empty(out: Path, session: CaptureSession) -> None:
    if session.frames_written == 0 and out.exists():
        try:
            out.unlink()
        except OSError:
            pass


def _wait_for_end(session: CaptureSession, stream: Any, *, console: Any, view: bool) -> None:
    from popmeter import live_view

    started_wall = session.clock()
    display = live_view.LiveDisplay(session.snapshot, console=console, live=view)
    with display:
        try:
            while not session.stop_event.wait(0.05):
                display.tick()
                now = session.clock()
                last = session.last_callback_wall_s
                if not stream.active and not session.stopping:
                    session.report_fault("input device stopped during the run (unplugged or lost)")
                elif (now - (last if last is not None else started_wall)) > DEVICE_SILENT_TIMEOUT_S:
                    what = "stopped delivering audio" if last is not None else "delivered no audio"
                    session.report_fault(f"input device {what} for {DEVICE_SILENT_TIMEOUT_S:g} s "
                                         "(unplugged or lost)")
        except KeyboardInterrupt:
            session.request_stop("stopped by Ctrl-C")
        display.tick()


def _after_capture(result: CaptureResult, *, out: Path, device: InputDevice, channel: int,
                   profile: Any, qc_spec: Any, json_path: Any, csv_path: Any, report_dir: Any,
                   console: Any) -> int:
    from popmeter import live_view

    live_view.print_capture_end(console, result, out=out)
    if result.frames_written == 0:
        _remove_quiet(out)
        raise DeviceError(f"input device {device.index} ({device.name}): no audio was received"
                          + (f" ({result.faults[0]})" if result.faults else ""))
    try:
        write_live_sidecar(sidecar_path(out), result, device=device, recording=str(out))
    except OSError as exc:
        result.faults.append(f"cannot write {sidecar_path(out)} ({exc})")
    try:
        return _final_analysis(result, out=out, channel=channel, profile=profile,
                               qc_spec=qc_spec, json_path=json_path, csv_path=csv_path,
                               report_dir=report_dir, console=console)
    finally:
        # The faults again, last, one line each on stderr: what a script or a
        # log keeps, and what the operator reads after the summary.
        for fault in result.faults:
            kept = "" if "kept" in fault else f"; the {result.written_s:.1f} s recorded are kept in {out}"
            print(f"popmeter listen: {fault}{kept}", file=sys.stderr)


def _final_analysis(result: CaptureResult, *, out: Path, channel: int, profile: Any,
                    qc_spec: Any, json_path: Any, csv_path: Any, report_dir: Any,
                    console: Any) -> int:
    from popmeter import live_view
    from popmeter.analysis import analyze_file, write_outputs

    fault_code = 2 if result.faults else 0
    try:
        analysis = analyze_file(out, boat=profile, spec=qc_spec, channel=channel)
    except PopmeterError as exc:
        print(f"popmeter listen: analysis of {out} failed: {exc}", file=sys.stderr)
        if qc_spec is not None:
            live_view.print_big_verdict(console, "ERROR", [str(exc)])
            return max(1, fault_code)
        return max(fault_code, exc.exit_code)
    write_outputs(analysis, json_path=json_path, csv_path=csv_path, report_dir=report_dir,
                  quiet=False, console=console)
    code = fault_code
    verdict = getattr(analysis, "verdict", None)
    if verdict is not None:
        live_view.print_big_verdict(console, str(verdict.status),
                                    [str(r) for r in getattr(verdict, "reasons", [])])
        if verdict.status != "PASS":
            code = max(code, 1)
    return code


def _remove_quiet(out: Path) -> None:
    try:
        if out.exists() and out.stat().st_size < 1024:
            out.unlink()
    except OSError:
        pass
