"""Reading and writing recordings: any format, any channel count, bounded memory.

popmeter reads a recording in blocks so that a two-hour file never has to fit
in memory: :func:`open_stream` yields 1-D ``float32`` blocks of one channel
(full scale = 1.0) and the click detector consumes them one by one.
:func:`load_recording` is the same reader gathered into one array, for short
files and tests; :func:`read_segment` reads a short stretch for a figure.

Formats
    WAV (PCM 8/16/24/32, float, A-law, mu-law), FLAC, OGG/Vorbis, MP3, AIFF and
    the other formats of libsndfile are read through ``soundfile``. Anything
    else (phone recordings: M4A/AAC, 3GP, WMA, WebM...) is decoded by
    ``ffmpeg`` (raw float32 piped in blocks) when it is installed; without it
    such files raise :class:`~popmeter.errors.DependencyError`.

Checks (each a one-line :class:`~popmeter.errors.InputError` naming the file)
    missing file, a directory, empty file (0 bytes), not audio, unreadable
    (no audio could be decoded), zero-length audio, shorter than
    ``min_duration_s``, sample rate outside 8-192 kHz, channel out of range,
    NaN or infinite samples in the channel used, all-silent channel used
    (every sample below :data:`SILENCE_LEVEL_FS`). Checks that need every
    sample (NaN/Inf, silence, the true length) are made while streaming: the
    error comes from the iteration, at the offending block or at the end.

Damaged files are read as far as they can be and the rest is reported, never
padded with silence:

- a WAV whose writer died (data-chunk size 0 or 0xFFFFFFFF, or larger than
  the file, or cut mid-frame): the RIFF chunks are parsed here and the data
  present is read up to the end of the file, with a warning;
- a FLAC or MP3 whose decoder fails part-way (lost sync, garbage): the file is
  re-opened at the last good frame and read in smaller pieces up to the
  damage, then reading stops with a warning giving the time;
- a file that ends before its header says (AIFF, MP3, FLAC) or an Ogg stream
  without its end-of-stream page: a "truncated" warning;
- stretches of exact digital silence inside the recording (decoder gaps,
  dropouts): a warning.

DC offset and clipping are measured on the channel used and reported as
warnings (thresholds below; they are common practice, no source). The samples
are passed on unchanged: the detector high-passes them anyway.
"""

from __future__ import annotations

import io
import json
import math
import os
import re
import shutil
import struct
import subprocess
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Self

import numpy as np
import soundfile as sf
from scipy import signal

from popmeter.errors import DependencyError, InputError, UsageError, output_error

__all__ = [
    "CLIP_LEVEL_FS",
    "CLIP_RUN_SAMPLES",
    "DC_OFFSET_LIMIT_FS",
    "GAP_MIN_S",
    "MAX_SAMPLE_RATE_HZ",
    "MIN_SAMPLE_RATE_HZ",
    "SILENCE_LEVEL_FS",
    "WRITE_FORMATS",
    "AudioInfo",
    "AudioStream",
    "Recording",
    "click_to_noise_db",
    "load_recording",
    "open_stream",
    "probe",
    "read_segment",
    "write_audio",
]

#: Lowest and highest accepted sample rates (Hz). 8 kHz still holds rings up
#: to 4 kHz (physics.md: a few hundred Hz to a few kHz); 192 kHz is the top of
#: common recorders.
MIN_SAMPLE_RATE_HZ = 8_000
MAX_SAMPLE_RATE_HZ = 192_000

#: A channel whose every sample has a magnitude below this (full scale = 1)
#: is "silent": -120 dBFS, below one step of 16-bit audio (3.05e-5), so an
#: 8- or 16-bit channel is silent only when every sample is exactly 0.
SILENCE_LEVEL_FS = 1e-6

#: A mean above this magnitude (1 % of full scale, -40 dBFS) is reported as a
#: DC offset. Common practice, no source.
DC_OFFSET_LIMIT_FS = 0.01

#: Samples at or above this magnitude count as full scale (within 0.009 dB of
#: it), and :data:`CLIP_RUN_SAMPLES` or more of them in a row count as one
#: clipping event. Common practice, no source. 8-bit and companded data use
#: ``1 - 1/128`` instead (their largest code).
CLIP_LEVEL_FS = 0.999
CLIP_RUN_SAMPLES = 3

#: Interior runs of exact zeros at least this long (s) are reported as
#: dropouts. Runs at the very start or end are not (recorders often pad
#: those). Common practice, no source.
GAP_MIN_S = 0.02

#: Default length of the stretch judged when choosing the channel (s).
CHANNEL_CHOICE_WINDOW_S = 60.0

#: High-pass corner used by the channel-choice measure (Hz): removes mains hum,
#: flame roar and sloshing, keeps the diaphragm ring (several hundred Hz to a
#: few kHz, physics.md).
CHOICE_HIGHPASS_HZ = 300.0

#: Below this best click-to-noise ratio (dB) the channel choice is reported as
#: unclear: white noise alone scores 12-14 dB on the measure (8-192 kHz, see
#: :func:`click_to_noise_db`), so 15 dB leaves 1-3 dB of margin. Common
#: practice, no source.
CHOICE_UNCLEAR_DB = 15.0

#: Output formats of :func:`write_audio`, by file extension:
#: (libsndfile major format or "ffmpeg", default subtype or codec).
WRITE_FORMATS: dict[str, tuple[str, str]] = {
    ".wav": ("WAV", "PCM_16"),
    ".flac": ("FLAC", "PCM_16"),
    ".ogg": ("OGG", "VORBIS"),
    ".oga": ("OGG", "VORBIS"),
    ".mp3": ("MP3", "MPEG_LAYER_III"),
    ".aiff": ("AIFF", "PCM_16"),
    ".aif": ("AIFF", "PCM_16"),
    ".m4a": ("ffmpeg", "aac"),
}

# Extensions and magic numbers of containers that need ffmpeg.
_FFMPEG_EXTENSIONS = {
    ".m4a", ".mp4", ".aac", ".3gp", ".3g2", ".mov", ".wma", ".asf", ".webm",
    ".mka", ".mkv", ".amr", ".opus", ".m4b", ".ac3", ".wv", ".ape",
}
_DEFAULT_BLOCK_FRAMES = 65536
_FFMPEG_TIMEOUT_S = 60.0


# --------------------------------------------------------------------------- data


@dataclass(frozen=True)
class AudioInfo:
    """What a recording's header says.

    ``frames`` is the number of frames the reader expects to deliver (for a
    damaged WAV, the frames actually present; for ffmpeg sources an estimate
    from the container's duration). ``duration_s = frames / sample_rate_hz``.
    ``format`` is the libsndfile major format ("WAV", "FLAC"...) or
    ``"ffmpeg:<container>"``; ``subtype`` the encoding ("PCM_16", "aac"...).
    """

    path: str
    sample_rate_hz: int
    channels: int
    frames: int
    duration_s: float
    format: str
    subtype: str


@dataclass
class Recording:
    """One channel of a recording, whole, in memory.

    ``samples`` is 1-D float32 at full scale 1.0; ``channel_used`` counts from
    0; ``frames == len(samples)``; ``warnings`` lists problems found while
    reading (truncation, damage, DC offset, clipping, dropouts).
    """

    samples: np.ndarray
    sample_rate_hz: int
    channels: int
    channel_used: int
    path: str | None
    frames: int
    warnings: list[str] = field(default_factory=list)
    info: AudioInfo | None = None

    @property
    def duration_s(self) -> float:
        """Length of the samples in seconds."""
        return self.frames / float(self.sample_rate_hz)


# ----------------------------------------------------------------- header parsing


@dataclass
class _RiffLayout:
    format_tag: int
    channels: int
    sample_rate_hz: int
    block_align: int
    bits: int
    data_offset: int
    data_declared: int  # bytes, as written in the header
    data_present: int  # bytes actually in the file after data_offset


def _parse_riff(path: str) -> _RiffLayout | None:
    """Walk the chunks of a RIFF/WAVE file; ``None`` if it is not one."""
    size = os.path.getsize(path)
    with open(path, "rb") as f:
        head = f.read(12)
        if len(head) < 12 or head[:4] != b"RIFF" or head[8:12] != b"WAVE":
            return None
        pos = 12
        fmt = None
        while pos + 8 <= size:
            f.seek(pos)
            cid, csize = struct.unpack("<4sI", f.read(8))
            if cid == b"fmt ":
                body = f.read(min(csize, 40))
                if len(body) < 16:
                    return None
                tag, ch, rate, _, align, bits = struct.unpack("<HHIIHH", body[:16])
                if tag == 0xFFFE and len(body) >= 26:
                    tag = struct.unpack("<H", body[24:26])[0]
                fmt = (tag, ch, rate, align, bits)
            elif cid == b"data":
                if fmt is None:
                    return None
                return _RiffLayout(*fmt, data_offset=pos + 8, data_declared=csize,
                                   data_present=size - (pos + 8))
            pos += 8 + csize + (csize & 1)
    return None


def _raw_subtype(layout: _RiffLayout) -> str | None:
    """libsndfile RAW subtype for a WAV format tag, or None when unsupported."""
    if layout.format_tag == 1:
        return {8: "PCM_U8", 16: "PCM_16", 24: "PCM_24", 32: "PCM_32"}.get(layout.bits)
    if layout.format_tag == 3:
        return {32: "FLOAT", 64: "DOUBLE"}.get(layout.bits)
    return {6: "ALAW", 7: "ULAW"}.get(layout.format_tag)


def _aiff_declared_frames(path: str) -> int | None:
    """numSampleFrames from an AIFF/AIFC COMM chunk, or None."""
    size = os.path.getsize(path)
    with open(path, "rb") as f:
        head = f.read(12)
        if len(head) < 12 or head[:4] != b"FORM" or head[8:12] not in (b"AIFF", b"AIFC"):
            return None
        pos = 12
        while pos + 8 <= size:
            f.seek(pos)
            cid, csize = struct.unpack(">4sI", f.read(8))
            if cid == b"COMM":
                body = f.read(6)
                if len(body) < 6:
                    return None
                return struct.unpack(">hI", body)[1]
            pos += 8 + csize + (csize & 1)
    return None


def _ogg_has_end(path: str) -> bool:
    """True when the last Ogg page carries the end-of-stream flag (RFC 3533)."""
    size = os.path.getsize(path)
    with open(path, "rb") as f:
        f.seek(max(0, size - 65536))
        tail = f.read()
    k = tail.rfind(b"OggS")
    return k >= 0 and k + 5 < len(tail) and bool(tail[k + 5] & 0x04)


class _Window(io.RawIOBase):
    """A read-only view of a file from ``offset`` to its end (for RAW decoding)."""

    def __init__(self, path: str, offset: int, length: int):
        self._f = open(path, "rb")  # noqa: SIM115 - closed by close()
        self._offset = offset
        self._length = length
        self._f.seek(offset)

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def seek(self, pos: int, whence: int = 0) -> int:
        base = {0: 0, 1: self.tell(), 2: self._length}[whence]
        target = min(max(base + pos, 0), self._length)
        self._f.seek(self._offset + target)
        return target

    def tell(self) -> int:
        return self._f.tell() - self._offset

    def read(self, n: int = -1) -> bytes:
        left = self._length - self.tell()
        n = left if n is None or n < 0 else min(n, left)
        return self._f.read(n)

    def readinto(self, b) -> int:  # type: ignore[override]
        data = self.read(len(b))
        b[: len(data)] = data
        return len(data)

    def close(self) -> None:
        self._f.close()
        super().close()


# ----------------------------------------------------------------------- readers


class _SndReader:
    """Multichannel float32 blocks from libsndfile, surviving decoder failures.

    When a read fails part-way (FLAC lost sync, MP3 garbage), the file is
    re-opened, positioned at the last frame delivered and read in ever smaller
    pieces (down to 64 frames) so that everything before the damage is kept;
    then reading stops and ``damage`` says where and why.
    """

    def __init__(self, opener: Callable[[], sf.SoundFile], name: str):
        self._opener = opener
        self._name = name
        self._f = opener()
        # 16-bit PCM is read as integers and scaled here: the same float32
        # values as libsndfile's (sample / 32768, exact), in a third of the time
        self._int16 = self._f.subtype == "PCM_16"
        self.pos = 0
        self.done = False
        self.damage: str | None = None

    def seek(self, frame: int) -> None:
        self._f.seek(frame)
        self.pos = frame

    def read(self, n: int) -> np.ndarray:
        if self.done:
            return np.zeros((0, self._f.channels), np.float32)
        try:
            if self._int16:
                y = np.multiply(self._f.read(n, dtype="int16", always_2d=True),
                                np.float32(1.0 / 32768.0), dtype=np.float32)
            else:
                y = self._f.read(n, dtype="float32", always_2d=True)
        except (sf.LibsndfileError, RuntimeError) as err:
            y = self._recover(n, err)
        self.pos += len(y)
        if len(y) == 0:
            self.done = True
        return y

    def _recover(self, n: int, err: Exception) -> np.ndarray:
        first_error = str(err).strip().removeprefix("Error :").strip() or "decoder error"
        pieces: list[np.ndarray] = []
        got = 0
        step = max(n // 4, 64)
        while got < n:
            try:
                self._f.close()
                self._f = self._opener()
                self._f.seek(self.pos + got)
                while got < n:
                    part = self._f.read(min(step, n - got), dtype="float32", always_2d=True)
                    if len(part) == 0:
                        break
                    pieces.append(part)
                    got += len(part)
                break
            except (sf.LibsndfileError, RuntimeError):
                if step <= 64:
                    self.done = True
                    self.damage = first_error.rstrip(".")
                    break
                step = max(step // 4, 64)
        if not pieces:
            return np.zeros((0, self._f.channels), np.float32)
        return np.concatenate(pieces)

    def close(self) -> None:
        self._f.close()


class _FfmpegReader:
    """Multichannel float32 blocks piped from ffmpeg (``-f f32le``)."""

    def __init__(self, path: str, channels: int, *, start_s: float = 0.0,
                 duration_s: float | None = None):
        self._path = path
        self._channels = channels
        cmd = ["ffmpeg", "-nostdin", "-hide_banner", "-v", "error"]
        if start_s > 0:
            cmd += ["-ss", f"{start_s:.6f}"]
        cmd += ["-i", path]
        if duration_s is not None:
            cmd += ["-t", f"{duration_s:.6f}"]
        cmd += ["-map", "0:a:0", "-vn", "-f", "f32le", "-acodec", "pcm_f32le", "pipe:1"]
        self._stderr = tempfile.TemporaryFile()  # noqa: SIM115 - closed by close()
        self._proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=self._stderr,
                                      stdin=subprocess.DEVNULL)
        self.pos = 0
        self.done = False
        self.damage: str | None = None
        self._carry = b""

    def read(self, n: int) -> np.ndarray:
        if self.done:
            return np.zeros((0, self._channels), np.float32)
        frame_bytes = 4 * self._channels
        want = n * frame_bytes
        buf = bytearray(self._carry)
        assert self._proc.stdout is not None
        while len(buf) < want:
            chunk = self._proc.stdout.read(want - len(buf))
            if not chunk:
                break
            buf += chunk
        usable = len(buf) - len(buf) % frame_bytes
        self._carry = bytes(buf[usable:])
        y = np.frombuffer(bytes(buf[:usable]), dtype="<f4").astype(np.float32)
        y = y.reshape(-1, self._channels)
        if len(y) < n:
            self._finish()
        self.pos += len(y)
        return y

    def _finish(self) -> None:
        self.done = True
        try:
            code = self._proc.wait(timeout=_FFMPEG_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            self._proc.kill()
            code = -1
        self._stderr.seek(0)
        text = _ffmpeg_said(self._stderr.read().decode("utf-8", "replace"))
        if code != 0 or text:
            self.damage = text or f"ffmpeg exited with code {code}"

    def close(self) -> None:
        if self._proc.poll() is None:
            self._proc.kill()
            self._proc.wait()
        if self._proc.stdout is not None:
            self._proc.stdout.close()
        self._stderr.close()


# ------------------------------------------------------------------------ opening


@dataclass
class _Source:
    info: AudioInfo
    open_reader: Callable[[], _SndReader | _FfmpegReader]
    warnings: list[str]
    declared_frames: int | None  # what the header promises (None: unknown)
    via_ffmpeg: bool = False
    clip_level_fs: float = CLIP_LEVEL_FS
    length_tolerance_frames: int = 0  # MP3 headers can be off by a frame or two


def _check_path(path: str) -> None:
    if not os.path.exists(path):
        raise InputError(f"{path}: no such file")
    if os.path.isdir(path):
        raise InputError(f"{path}: is a directory, not a recording")
    try:
        with open(path, "rb"):
            pass
    except OSError as err:
        raise InputError(f"{path}: cannot be read ({err.strerror or err})") from None
    if os.path.getsize(path) == 0:
        raise InputError(f"{path}: the file is empty (0 bytes)")


def _check_rate(path: str, rate_hz: int) -> None:
    if not MIN_SAMPLE_RATE_HZ <= rate_hz <= MAX_SAMPLE_RATE_HZ:
        raise InputError(
            f"{path}: sample rate {rate_hz} Hz is outside the supported "
            f"{MIN_SAMPLE_RATE_HZ}-{MAX_SAMPLE_RATE_HZ} Hz"
        )


def _looks_like_ffmpeg_container(path: str) -> bool:
    if Path(path).suffix.lower() in _FFMPEG_EXTENSIONS:
        return True
    with open(path, "rb") as f:
        head = f.read(16)
    return (
        head[4:8] == b"ftyp"  # MP4 / M4A / 3GP / MOV
        or head[:4] == b"\x1a\x45\xdf\xa3"  # Matroska / WebM
        or head[:5] == b"#!AMR"
        or head[:4] == b"\x30\x26\xb2\x75"  # ASF / WMA
        or (len(head) >= 2 and head[0] == 0xFF and (head[1] & 0xF6) == 0xF0)  # ADTS AAC
    )


def _ffmpeg_said(stderr_text: str) -> str:
    """ffmpeg's messages on one line, without the ``[demuxer @ 0x...]`` prefixes."""
    lines = [re.sub(r"\[[^\]]*@ 0x[0-9a-f]+\]\s*", "", ln).strip()
             for ln in stderr_text.splitlines()]
    lines = [ln for ln in lines if ln]
    return "; ".join(dict.fromkeys(lines))[:300]


def _fmt_s(frames: int, rate_hz: int) -> str:
    return f"{frames / rate_hz:.2f} s"


def _open_source(path: str) -> _Source:
    """Identify a recording and prepare a reader for it (no samples read yet)."""
    _check_path(path)
    try:
        with sf.SoundFile(path) as f:
            rate, ch, frames = int(f.samplerate), int(f.channels), int(f.frames)
            major, subtype = f.format, f.subtype
    except (sf.LibsndfileError, RuntimeError) as err:
        message = str(err)
        if "not recognised" in message or "unknown format" in message.lower():
            return _open_ffmpeg(path)
        detail = message.split(":", 1)[-1].strip() if "Error opening" in message else message
        raise InputError(f"{path}: unreadable audio file (libsndfile: {detail.rstrip('.')})") from None

    warnings: list[str] = []
    _check_rate(path, rate)
    declared: int | None = frames

    def opener() -> sf.SoundFile:
        return sf.SoundFile(path)

    if major in ("WAV", "WAVEX"):
        layout = _parse_riff(path)
        if layout is not None and layout.block_align > 0:
            present = layout.data_present // layout.block_align
            partial = layout.data_present % layout.block_align
            declared_bytes = layout.data_declared
            cut = " (the last frame was cut mid-way and is dropped)" if partial else ""
            if declared_bytes in (0, 0xFFFFFFFF) and present > 0:
                placeholder = "0" if declared_bytes == 0 else "0xFFFFFFFF"
                warnings.append(
                    f"damaged header: the data-chunk size is {placeholder} (the writer did not "
                    f"finish); read the {_fmt_s(present, rate)} of audio present{cut}"
                )
                declared = present
                if frames < present:
                    raw_subtype = _raw_subtype(layout)
                    if raw_subtype is None:
                        raise InputError(
                            f"{path}: the header's data size is {placeholder} and the "
                            f"{layout.data_present} bytes of encoded audio (format tag "
                            f"{layout.format_tag}) cannot be recovered; re-save the file"
                        )
                    offset, length = layout.data_offset, present * layout.block_align

                    def opener() -> sf.SoundFile:
                        return sf.SoundFile(_Window(path, offset, length), format="RAW",
                                            subtype=raw_subtype, channels=ch,
                                            samplerate=rate, endian="LITTLE")

                    frames = present
            elif declared_bytes > layout.data_present:
                want = declared_bytes // layout.block_align
                warnings.append(
                    f"truncated: the header declares {_fmt_s(want, rate)} of audio but the file "
                    f"holds {_fmt_s(present, rate)} (the writer probably stopped); "
                    f"using what is there{cut}"
                )
                declared = present
    elif major == "AIFF":
        comm = _aiff_declared_frames(path)
        if comm is not None and comm > frames:
            warnings.append(
                f"truncated: the header declares {_fmt_s(comm, rate)} of audio but the file "
                f"holds {_fmt_s(frames, rate)}; using what is there"
            )
    elif major == "OGG" and not _ogg_has_end(path):
        warnings.append(
            "truncated: the Ogg stream has no end-of-stream page (the file was cut off); "
            "using what is there"
        )

    info = AudioInfo(path=path, sample_rate_hz=rate, channels=ch, frames=frames,
                     duration_s=frames / rate, format=major, subtype=subtype)
    clip = CLIP_LEVEL_FS
    if subtype in ("PCM_U8", "PCM_S8", "ULAW", "ALAW"):
        clip = 1.0 - 1.0 / 128.0
    return _Source(info=info, open_reader=lambda: _SndReader(opener, path),
                   warnings=warnings, declared_frames=declared, clip_level_fs=clip,
                   length_tolerance_frames=2304 if major == "MP3" else 0)


def _open_ffmpeg(path: str) -> _Source:
    if shutil.which("ffmpeg") is None or shutil.which("ffprobe") is None:
        if _looks_like_ffmpeg_container(path):
            raise DependencyError(
                f"{path}: reading this format needs ffmpeg, which is not installed "
                "(Debian/Ubuntu: sudo apt-get install ffmpeg), or convert it to WAV or FLAC"
            )
        raise InputError(
            f"{path}: not an audio file that libsndfile recognises "
            "(ffmpeg, which reads more formats, is not installed)"
        )
    cmd = ["ffprobe", "-v", "error", "-select_streams", "a:0", "-show_entries",
           "stream=codec_name,sample_rate,channels,duration:format=format_name,duration",
           "-of", "json", path]
    try:
        done = subprocess.run(cmd, check=False, capture_output=True, timeout=_FFMPEG_TIMEOUT_S,
                              stdin=subprocess.DEVNULL)
    except subprocess.TimeoutExpired:
        raise InputError(f"{path}: ffprobe did not answer within {_FFMPEG_TIMEOUT_S:.0f} s") from None
    try:
        meta = json.loads(done.stdout.decode("utf-8", "replace") or "{}")
    except json.JSONDecodeError:
        meta = {}
    streams = meta.get("streams") or []
    if done.returncode != 0 or not streams:
        said = _ffmpeg_said(done.stderr.decode("utf-8", "replace"))
        if "moov atom not found" in said:
            raise InputError(
                f"{path}: unreadable MP4/M4A: its index (moov atom) is missing, as when the "
                "recorder stopped before finishing the file; no audio can be recovered"
            )
        if Path(path).suffix.lower() in _FFMPEG_EXTENSIONS and said and not streams:
            raise InputError(f"{path}: unreadable audio file (ffmpeg: {said})")
        raise InputError(f"{path}: not an audio file (neither libsndfile nor ffmpeg can read it)")
    st = streams[0]
    try:
        rate = int(st["sample_rate"])
        ch = int(st["channels"])
    except (KeyError, ValueError):
        raise InputError(f"{path}: ffmpeg finds no usable audio stream in it") from None
    _check_rate(path, rate)
    if ch < 1:
        raise InputError(f"{path}: the audio stream has no channels")
    duration = None
    for source in (st, meta.get("format") or {}):
        try:
            duration = float(source["duration"])
            break
        except (KeyError, ValueError, TypeError):
            continue
    frames = round(duration * rate) if duration is not None else 0
    container = (meta.get("format") or {}).get("format_name", "unknown")
    info = AudioInfo(path=path, sample_rate_hz=rate, channels=ch, frames=frames,
                     duration_s=frames / rate, format=f"ffmpeg:{container}",
                     subtype=str(st.get("codec_name", "unknown")))
    return _Source(info=info, open_reader=lambda: _FfmpegReader(path, ch), warnings=[],
                   declared_frames=None, via_ffmpeg=True)


def probe(path: str | os.PathLike) -> AudioInfo:
    """Read a recording's header without decoding its samples.

    Raises :class:`~popmeter.errors.InputError` for a missing, empty,
    unrecognised or unreadable file and for a sample rate outside
    8-192 kHz; :class:`~popmeter.errors.DependencyError` when the format needs
    ffmpeg and it is missing. A 0-frame file is returned as it is (frames=0);
    :func:`open_stream` rejects it.
    """
    return _open_source(os.fspath(path)).info


# ---------------------------------------------------------------- channel choice


class _ChoiceScorer:
    """Streaming click-to-noise ratio per channel (see :func:`click_to_noise_db`).

    Holds one second of high-passed float32 samples per channel and two numbers
    per second and channel: memory stays a few MB whatever the file's length.
    """

    _SLICE_FRAMES = 8192

    def __init__(self, sample_rate_hz: int, channels: int):
        fc = min(CHOICE_HIGHPASS_HZ, 0.45 * sample_rate_hz)
        self._sos = signal.butter(4, fc, btype="highpass", fs=sample_rate_hz, output="sos")
        self._zi = np.zeros((self._sos.shape[0], 2, channels))
        self._seg = np.zeros((int(sample_rate_hz), channels), np.float32)  # one second
        self._fill = 0
        self._peaks: list[np.ndarray] = []
        self._noise: list[np.ndarray] = []

    def update(self, block: np.ndarray) -> None:
        for k in range(0, len(block), self._SLICE_FRAMES):
            piece = block[k: k + self._SLICE_FRAMES]
            hp, self._zi = signal.sosfilt(self._sos, piece, axis=0, zi=self._zi)
            taken = 0
            while taken < len(hp):
                room = len(self._seg) - self._fill
                part = hp[taken: taken + room]
                self._seg[self._fill: self._fill + len(part)] = part
                self._fill += len(part)
                taken += len(part)
                if self._fill == len(self._seg):
                    self._add(self._seg)
                    self._fill = 0

    def _add(self, seg: np.ndarray) -> None:
        mag = np.abs(seg)
        self._peaks.append(mag.max(axis=0))
        # robust noise: median absolute value / 0.6745 (Donoho & Johnstone 1994)
        self._noise.append(np.median(mag, axis=0) / 0.6745)

    def result_db(self) -> np.ndarray:
        # a last partial second counts if it is at least a quarter second long
        if self._fill and (self._fill >= len(self._seg) // 4 or not self._peaks):
            self._add(self._seg[: self._fill])
            self._fill = 0
        if not self._peaks:
            return np.full(self._zi.shape[2], -np.inf)
        peak = np.percentile(np.vstack(self._peaks), 90, axis=0)
        noise = np.median(np.vstack(self._noise), axis=0)
        with np.errstate(divide="ignore"):
            return 20 * np.log10(np.maximum(peak, 1e-12) / np.maximum(noise, 1e-9))


def click_to_noise_db(samples: np.ndarray, sample_rate_hz: int) -> np.ndarray:
    """Click-to-noise ratio of each channel, in dB (the channel-choice measure).

    The signal is high-passed (Butterworth, 4th order, 300 Hz: removes hum,
    flame roar and sloshing, keeps the diaphragm ring) and cut into 1-s
    segments. For each segment the peak magnitude and a robust noise level
    (median absolute value / 0.6745, the MAD estimate of a Gaussian standard
    deviation, Donoho & Johnstone 1994) are taken. The ratio is the 90th
    percentile of the segment peaks over the median of the segment noise
    levels: a lone knock does not count, clicks present in more than one
    segment in ten do. Pure noise scores about 13 dB at 48 kHz.

    Args:
        samples: (frames,) or (frames, channels), full scale 1.0.
        sample_rate_hz: sample rate (Hz).

    Returns:
        one value per channel (dB); ``-inf`` for a silent channel.
    """
    x = np.asarray(samples, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    scorer = _ChoiceScorer(int(sample_rate_hz), x.shape[1])
    scorer.update(x)
    return scorer.result_db()


def _choose_channel(source: _Source, window_s: float, block_frames: int) -> np.ndarray:
    info = source.info
    limit = int(window_s * info.sample_rate_hz)
    if source.via_ffmpeg:
        reader: _SndReader | _FfmpegReader = _FfmpegReader(
            info.path, info.channels, duration_s=window_s)
    else:
        reader = source.open_reader()
    scorer = _ChoiceScorer(info.sample_rate_hz, info.channels)
    try:
        seen = 0
        while seen < limit:
            y = reader.read(min(block_frames, limit - seen))
            if len(y) == 0:
                break
            scorer.update(np.nan_to_num(y, nan=0.0, posinf=0.0, neginf=0.0))
            seen += len(y)
    finally:
        reader.close()
    return scorer.result_db()


# --------------------------------------------------------------- streaming checks


class _Runs:
    """Runs of True in a mask delivered block by block."""

    def __init__(self, min_len: int, *, skip_leading: bool):
        self.min_len = max(int(min_len), 1)
        self.skip_leading = skip_leading
        self.pos = 0
        self.open_start: int | None = None
        self.count = 0
        self.total = 0
        self.first_at: int | None = None
        self.longest = 0
        self.longest_at = 0

    def update(self, mask: np.ndarray) -> None:
        n = len(mask)
        if n == 0:
            return
        if (self.open_start is None and not mask[-1]
                and np.count_nonzero(mask) < self.min_len):
            # the usual block: no run long enough to count, none open at its end
            self.pos += n
            return
        carry = 1 if self.open_start is not None else 0
        d = np.diff(np.concatenate(([carry], mask.astype(np.int8), [0])))
        starts = np.flatnonzero(d == 1) + self.pos
        ends = np.flatnonzero(d == -1) + self.pos
        if carry:
            starts = np.concatenate(([self.open_start], starts))
        if len(ends) and ends[-1] == self.pos + n:  # still running at the block end
            self.open_start = int(starts[-1])
            starts, ends = starts[:-1], ends[:-1]
        else:
            self.open_start = None
        lengths = ends - starts
        keep = lengths >= self.min_len
        if self.skip_leading:
            keep &= starts > 0
        for s, ln in zip(starts[keep], lengths[keep]):
            self.count += 1
            self.total += int(ln)
            if self.first_at is None:
                self.first_at = int(s)
            if ln > self.longest:
                self.longest, self.longest_at = int(ln), int(s)
        self.pos += n

    def finish(self, *, count_open: bool) -> None:
        if count_open and self.open_start is not None:
            ln = self.pos - self.open_start
            if ln >= self.min_len and not (self.skip_leading and self.open_start == 0):
                self.count += 1
                self.total += ln
                if self.first_at is None:
                    self.first_at = self.open_start
                if ln > self.longest:
                    self.longest, self.longest_at = ln, self.open_start
        self.open_start = None


class AudioStream:
    """One channel of a recording, block by block, with bounded memory.

    Made by :func:`open_stream`. Use it as a context manager and iterate it
    once; each item is a 1-D float32 array of at most ``block_frames`` samples
    (full scale 1.0). Memory use is a few blocks of all channels, whatever the
    file's length.

    Attributes:
        info: the header (:class:`AudioInfo`).
        channel_used: the channel delivered, from 0.
        channel_scores_db: the click-to-noise ratio per channel that chose
            it (None when the channel was given or the file is mono).
        warnings: problems found so far; grows while reading (truncation,
            damage, and at the end DC offset, clipping, dropouts).
        frames_read: frames delivered so far.

    Errors found while reading (NaN/Inf samples, nothing decodable, a silent
    channel, shorter than ``min_duration_s``) raise
    :class:`~popmeter.errors.InputError` from the iteration; the silence and
    length checks run when the end is reached.
    """

    def __init__(self, source: _Source, *, channel: int | None, block_frames: int,
                 min_duration_s: float, choice_window_s: float):
        self.info = source.info
        self.warnings: list[str] = list(source.warnings)
        self.frames_read = 0
        self.channel_scores_db: list[float] | None = None
        self._source = source
        self._block_frames = int(block_frames)
        self._min_duration_s = float(min_duration_s)
        self._reader: _SndReader | _FfmpegReader | None = None
        self._started = False
        path = source.info.path
        nch = source.info.channels
        if channel is not None:
            if not 0 <= channel < nch:
                span = "0" if nch == 1 else f"0-{nch - 1}"
                raise InputError(
                    f"{path}: channel {channel} does not exist (the file has {nch} "
                    f"channel{'s' if nch != 1 else ''}: {span})"
                )
            self.channel_used = int(channel)
        elif nch == 1:
            self.channel_used = 0
        else:
            scores = _choose_channel(source, choice_window_s, self._block_frames)
            self.channel_scores_db = [float(s) for s in scores]
            self.channel_used = int(np.argmax(scores))
            best = float(scores[self.channel_used])
            if best < CHOICE_UNCLEAR_DB:
                judged_s = min(choice_window_s, self.info.duration_s)
                self.warnings.append(
                    f"channel choice: no channel shows clear clicks in the first "
                    f"{judged_s:.0f} s (best click-to-noise {best:.1f} dB, channel "
                    f"{self.channel_used}); pass --channel N to choose another"
                )
        if source.declared_frames is not None:
            if source.declared_frames == 0:
                raise InputError(f"{path}: holds no audio (0 frames)")
            if source.declared_frames < self._min_duration_s * self.info.sample_rate_hz:
                raise InputError(
                    f"{path}: only {source.declared_frames / self.info.sample_rate_hz:.2f} s of "
                    f"audio; at least {self._min_duration_s:g} s is needed"
                )

    @property
    def sample_rate_hz(self) -> int:
        """Sample rate of the blocks (Hz)."""
        return self.info.sample_rate_hz

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Release the file or the ffmpeg process."""
        if self._reader is not None:
            self._reader.close()
            self._reader = None

    def __iter__(self) -> Iterator[np.ndarray]:
        if self._started:
            raise UsageError(f"{self.info.path}: an AudioStream can be iterated only once")
        self._started = True
        return self._blocks()

    def _blocks(self) -> Iterator[np.ndarray]:
        info = self.info
        path, rate, ch = info.path, info.sample_rate_hz, self.channel_used
        self._reader = reader = self._source.open_reader()
        total = 0.0
        peak = 0.0
        clips = _Runs(CLIP_RUN_SAMPLES, skip_leading=False)
        gaps = _Runs(max(round(GAP_MIN_S * rate), 1), skip_leading=True)
        clip_level = self._source.clip_level_fs
        try:
            while True:
                y = reader.read(self._block_frames)
                if len(y) == 0:
                    break
                x = np.ascontiguousarray(y[:, ch], dtype=np.float32)
                if not np.isfinite(x).all():
                    bad = int(np.flatnonzero(~np.isfinite(x))[0]) + self.frames_read
                    raise InputError(
                        f"{path}: holds NaN or infinite samples (first at {bad / rate:.3f} s, "
                        f"channel {ch})"
                    )
                mag = np.abs(x)
                total += float(np.sum(x, dtype=np.float64))
                peak = max(peak, float(mag.max()))
                clips.update(mag >= clip_level)
                gaps.update(x == 0.0)
                self.frames_read += len(x)
                yield x
            damage = reader.damage
        finally:
            self.close()
        self._finish(damage, total, peak, clips, gaps)

    def _finish(self, damage: str | None, total: float, peak: float, clips: _Runs,
                gaps: _Runs) -> None:
        info = self.info
        path, rate, n = info.path, info.sample_rate_hz, self.frames_read
        if n == 0:
            if damage:
                raise InputError(f"{path}: unreadable, no audio could be decoded ({damage})")
            raise InputError(f"{path}: holds no audio (0 frames)")
        if damage and self._source.via_ffmpeg:
            rest = ""
            if info.frames > n + rate // 10:
                rest = f" of the {info.frames / rate:.2f} s the container declares"
            self.warnings.append(
                f"damaged: ffmpeg reported errors while decoding ({damage}); read "
                f"{n / rate:.2f} s{rest}; audio near the errors may be missing"
            )
        elif damage:
            rest = ""
            if info.frames > n:
                rest = f" of the {info.frames / rate:.2f} s declared"
            self.warnings.append(
                f"damaged: decoding failed at {n / rate:.2f} s{rest} ({damage}); "
                f"using the {n / rate:.2f} s before it"
            )
        elif (not self._source.via_ffmpeg and self._source.declared_frames is not None
              and n < self._source.declared_frames - self._source.length_tolerance_frames):
            self.warnings.append(
                f"truncated: the file ends at {n / rate:.2f} s but its header declares "
                f"{self._source.declared_frames / rate:.2f} s"
            )
        if peak < SILENCE_LEVEL_FS:
            where = "the recording" if info.channels == 1 else f"channel {self.channel_used}"
            raise InputError(
                f"{path}: {where} is silent (every sample below "
                f"{20 * math.log10(SILENCE_LEVEL_FS):.0f} dBFS)"
            )
        if n < self._min_duration_s * rate:
            raise InputError(
                f"{path}: only {n / rate:.2f} s of audio; at least "
                f"{self._min_duration_s:g} s is needed"
            )
        mean = total / n
        if abs(mean) > DC_OFFSET_LIMIT_FS:
            self.warnings.append(
                f"DC offset: the mean of channel {self.channel_used} is {mean:+.3f} of full "
                f"scale ({20 * math.log10(abs(mean)):.1f} dBFS); check the recorder's input"
            )
        clips.finish(count_open=True)
        if clips.count:
            self.warnings.append(
                f"clipping: {clips.count} run{'s' if clips.count != 1 else ''} of "
                f"{CLIP_RUN_SAMPLES} or more full-scale samples ({clips.total} samples, first at "
                f"{clips.first_at / rate:.3f} s); click levels there are unreliable, "
                "record with less gain"
            )
        gaps.finish(count_open=False)
        if gaps.count:
            self.warnings.append(
                f"dropouts: {gaps.count} stretch{'es' if gaps.count != 1 else ''} of exact "
                f"digital silence inside the recording ({gaps.total / rate:.3f} s in all, "
                f"longest {gaps.longest / rate:.3f} s at {gaps.longest_at / rate:.3f} s): "
                "a damaged file or recorder dropouts"
            )


def open_stream(
    path: str | os.PathLike,
    *,
    channel: int | None = None,
    block_frames: int | None = None,
    block_s: float | None = None,
    min_duration_s: float = 1.0,
    choice_window_s: float = CHANNEL_CHOICE_WINDOW_S,
) -> AudioStream:
    """Open a recording for block-by-block reading of one channel.

    Args:
        path: the recording (any format of :mod:`popmeter.audio_io`).
        channel: channel to deliver, from 0. Default None: a mono file's only
            channel, else the channel with the best click-to-noise ratio
            (:func:`click_to_noise_db`) over the first ``choice_window_s``.
        block_frames: frames per block. Default 65536 (1.4 s at 48 kHz: a
            few MB for any channel count).
        block_s: alternatively, the block length in seconds.
        min_duration_s: recordings shorter than this (s) are refused; default
            1 s, the shortest stretch that can hold a few engine cycles.
        choice_window_s: length (s) judged for the channel choice; default
            60 s, the file is read twice over this stretch.

    Returns:
        an :class:`AudioStream`; the header checks, the channel range and the
        channel choice are done before it is returned.
    """
    if block_frames is not None and block_s is not None:
        raise UsageError("open_stream: give block_frames or block_s, not both")
    source = _open_source(os.fspath(path))
    if block_s is not None:
        if not block_s > 0:
            raise UsageError(f"open_stream: block_s must be positive, got {block_s}")
        block_frames = max(round(block_s * source.info.sample_rate_hz), 1)
    if block_frames is None:
        block_frames = _DEFAULT_BLOCK_FRAMES
    if block_frames < 1:
        raise UsageError(f"open_stream: block_frames must be at least 1, got {block_frames}")
    return AudioStream(source, channel=channel, block_frames=block_frames,
                       min_duration_s=min_duration_s, choice_window_s=choice_window_s)


def load_recording(
    path: str | os.PathLike,
    *,
    channel: int | None = None,
    min_duration_s: float = 1.0,
) -> Recording:
    """Read one channel of a whole recording into memory.

    Same checks, channel choice and warnings as :func:`open_stream` (which it
    uses); meant for short files and tests: a long file needs
    ``4 * frames`` bytes.

    Args:
        path: the recording.
        channel: channel from 0; default None chooses as :func:`open_stream`.
        min_duration_s: shortest accepted recording (s); default 1 s.
    """
    with open_stream(path, channel=channel, min_duration_s=min_duration_s) as stream:
        blocks = list(stream)
        samples = np.concatenate(blocks) if blocks else np.zeros(0, np.float32)
        return Recording(samples=samples, sample_rate_hz=stream.info.sample_rate_hz,
                         channels=stream.info.channels, channel_used=stream.channel_used,
                         path=os.fspath(path), frames=len(samples),
                         warnings=list(stream.warnings), info=stream.info)


def read_segment(
    path: str | os.PathLike,
    *,
    start_s: float,
    stop_s: float,
    channel: int | None = None,
    max_duration_s: float = 600.0,
) -> np.ndarray:
    """Read one channel between two times (s), seeking rather than decoding all.

    For figures (a waveform detail around a click). ``stop_s`` past the end
    is cut to the end. No quality checks are run (they belong to the full
    read). ``channel`` None chooses as :func:`open_stream` does (costs one
    pass over the first minute); pass the analysis' ``channel_used``.
    ``max_duration_s`` (default 10 min, 115 MB at 48 kHz) bounds the memory.

    Returns:
        1-D float32, ``round((stop_s - start_s) * rate)`` samples or fewer.
    """
    p = os.fspath(path)
    if not 0 <= start_s < stop_s:
        raise UsageError(f"{p}: read_segment wants 0 <= start_s < stop_s, got {start_s}, {stop_s}")
    if stop_s - start_s > max_duration_s:
        raise UsageError(
            f"{p}: segment of {stop_s - start_s:.1f} s is longer than max_duration_s="
            f"{max_duration_s:g}"
        )
    source = _open_source(p)
    info = source.info
    if channel is None:
        if info.channels == 1:
            channel = 0
        else:
            channel = int(np.argmax(_choose_channel(source, CHANNEL_CHOICE_WINDOW_S,
                                                    _DEFAULT_BLOCK_FRAMES)))
    elif not 0 <= channel < info.channels:
        raise InputError(
            f"{p}: channel {channel} does not exist (the file has {info.channels} channels)"
        )
    rate = info.sample_rate_hz
    start = round(start_s * rate)
    want = round(stop_s * rate) - start
    if source.via_ffmpeg:
        reader: _SndReader | _FfmpegReader = _FfmpegReader(
            p, info.channels, start_s=start / rate, duration_s=want / rate)
    else:
        if start >= info.frames:
            return np.zeros(0, np.float32)
        reader = source.open_reader()
        try:
            reader.seek(start)
        except (sf.LibsndfileError, RuntimeError) as err:
            reader.close()
            raise InputError(f"{p}: cannot seek to {start_s:.3f} s ({err})") from None
    pieces = []
    got = 0
    try:
        while got < want:
            y = reader.read(min(want - got, _DEFAULT_BLOCK_FRAMES))
            if len(y) == 0:
                break
            pieces.append(np.ascontiguousarray(y[:, channel]))
            got += len(y)
    finally:
        reader.close()
    return np.concatenate(pieces) if pieces else np.zeros(0, np.float32)


# ------------------------------------------------------------------------ writing


def write_audio(
    path: str | os.PathLike,
    samples: np.ndarray,
    sample_rate_hz: int,
    *,
    subtype: str | None = None,
) -> None:
    """Write a recording; the format follows the extension.

    Extensions: .wav, .flac, .ogg/.oga (Vorbis), .mp3, .aiff/.aif through
    libsndfile, .m4a (AAC) through ffmpeg. The file appears complete or not
    at all (written beside it, then renamed).

    Args:
        path: output file.
        samples: (frames,) or (frames, channels), float, full scale 1.0.
            Integer subtypes refuse samples beyond full scale (they would wrap
            or clip); use ``subtype="FLOAT"`` for such data.
        sample_rate_hz: sample rate (Hz), 8-192 kHz.
        subtype: libsndfile subtype ("PCM_16", "PCM_24", "FLOAT"...);
            default: PCM_16 for WAV/FLAC/AIFF, the codec for OGG/MP3/M4A.
    """
    p = os.fspath(path)
    ext = Path(p).suffix.lower()
    if ext not in WRITE_FORMATS:
        known = ", ".join(sorted(WRITE_FORMATS))
        raise UsageError(f"{p}: cannot write '{ext or '(no extension)'}' files; use one of {known}")
    major, default_subtype = WRITE_FORMATS[ext]
    x = np.asarray(samples)
    if x.ndim not in (1, 2) or x.shape[0] == 0 or (x.ndim == 2 and x.shape[1] == 0):
        raise UsageError(f"{p}: samples must be (frames,) or (frames, channels), got {x.shape}")
    x = x.astype(np.float32 if x.dtype != np.float64 else np.float64, copy=False)
    if not np.isfinite(x).all():
        raise UsageError(f"{p}: samples hold NaN or infinite values")
    rate = int(sample_rate_hz)
    if not MIN_SAMPLE_RATE_HZ <= rate <= MAX_SAMPLE_RATE_HZ:
        raise UsageError(f"{p}: sample rate {rate} Hz is outside "
                         f"{MIN_SAMPLE_RATE_HZ}-{MAX_SAMPLE_RATE_HZ} Hz")
    sub = (subtype or default_subtype).upper() if major != "ffmpeg" else default_subtype
    peak = float(np.max(np.abs(x)))
    if peak > 1.0 and sub not in ("FLOAT", "DOUBLE"):
        raise UsageError(f"{p}: samples exceed full scale (peak {peak:.3f}); scale them "
                         "or write a FLOAT WAV")
    target_dir = os.path.dirname(os.path.abspath(p))
    try:  # name the user's path, not the temporary file beside it
        os.makedirs(target_dir, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".popmeter-", suffix=ext if major != "ffmpeg" else ".wav",
                                   dir=target_dir)
    except OSError as error:
        raise output_error(p, error) from None
    os.close(fd)
    # mkstemp makes the file private (0600); a recording gets the usual
    # permissions of a new file (owner writes, everyone reads).
    os.chmod(tmp, 0o644)
    try:
        if major == "ffmpeg":
            _write_ffmpeg(p, tmp, x, rate)
            return
        try:
            sf.write(tmp, x, rate, format=major, subtype=sub)
        except (sf.LibsndfileError, RuntimeError, ValueError, TypeError) as err:
            raise UsageError(f"{p}: cannot write {major}/{sub} at {rate} Hz ({err})") from None
        try:
            os.replace(tmp, p)
        except OSError as error:
            raise output_error(p, error) from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def _write_ffmpeg(path: str, tmp_wav: str, x: np.ndarray, rate: int) -> None:
    if shutil.which("ffmpeg") is None:
        raise DependencyError(f"{path}: writing .m4a needs ffmpeg, which is not installed "
                              "(Debian/Ubuntu: sudo apt-get install ffmpeg)")
    sf.write(tmp_wav, x, rate, format="WAV", subtype="FLOAT")
    out_tmp = tmp_wav[:-4] + ".m4a"
    cmd = ["ffmpeg", "-nostdin", "-hide_banner", "-v", "error", "-y", "-i", tmp_wav,
           "-c:a", "aac", "-b:a", "192k", out_tmp]
    try:
        done = subprocess.run(cmd, check=False, capture_output=True, timeout=_FFMPEG_TIMEOUT_S * 10,
                              stdin=subprocess.DEVNULL)
        if done.returncode != 0:
            msg = done.stderr.decode("utf-8", "replace").strip().splitlines()
            raise UsageError(f"{path}: ffmpeg could not write AAC ({msg[-1] if msg else 'error'})")
        os.replace(out_tmp, path)
    finally:
        if os.path.exists(out_tmp):
            os.unlink(out_tmp)
