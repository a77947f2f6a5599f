"""Tests of popmeter.audio_io: formats, rates, channels, streaming, bad and damaged input.

Reference for lossless formats: the samples as decoded by soundfile (libsndfile)
directly, and the numpy arrays written (within one quantisation step). For lossy
formats (Vorbis, MP3, AAC): correlation and RMS level against the numpy original.
All signals are generated here: a few seconds, fixed seeds, written under tmp_path.
"""

from __future__ import annotations

import shutil
import struct
import subprocess
import tracemalloc

import numpy as np
import pytest
import soundfile as sf
from scipy import signal, stats

from popmeter import audio_io
from popmeter.audio_io import (
    AudioInfo,
    Recording,
    click_to_noise_db,
    load_recording,
    open_stream,
    probe,
    read_segment,
    write_audio,
)
from popmeter.errors import DependencyError, InputError, UsageError

HAVE_FFMPEG = shutil.which("ffmpeg") is not None and shutil.which("ffprobe") is not None
needs_ffmpeg = pytest.mark.skipif(not HAVE_FFMPEG, reason="ffmpeg/ffprobe not installed")


def clicks(duration_s: float, rate_hz: int, *, seed: int = 0, period_s: float = 0.1,
           ring_hz: float = 1800.0, level: float = 0.5, noise: float = 0.003) -> np.ndarray:
    """Decaying-sine clicks every ``period_s`` in white noise (1-D float64)."""
    rng = np.random.default_rng(seed)
    n = round(duration_s * rate_hz)
    x = noise * rng.standard_normal(n)
    ring_hz = min(ring_hz, 0.3 * rate_hz)
    t = np.arange(int(0.02 * rate_hz)) / rate_hz
    pulse = level * np.sin(2 * np.pi * ring_hz * t) * np.exp(-t / 0.004)
    for start in np.arange(0.05, duration_s - 0.03, period_s):
        k = int(start * rate_hz)
        x[k: k + len(pulse)] += pulse
    return x


def noise_only(duration_s: float, rate_hz: int, *, seed: int, level: float = 0.01) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return level * rng.standard_normal(round(duration_s * rate_hz))


def lag_corr(a: np.ndarray, b: np.ndarray, max_lag: int) -> tuple[int, float]:
    """Lag of b against a (|lag| <= max_lag, found by FFT cross-correlation) and the
    correlation coefficient there."""
    n = min(len(a), len(b)) - 2 * max_lag
    ref = a[max_lag: max_lag + n]
    xc = signal.correlate(b[: n + 2 * max_lag], ref, mode="valid", method="fft")
    lag = int(np.argmax(xc)) - max_lag
    seg = b[max_lag + lag: max_lag + lag + n]
    return lag, float(np.corrcoef(ref, seg)[0, 1])


def rms_db(x: np.ndarray) -> float:
    return 20 * np.log10(np.sqrt(np.mean(np.square(x, dtype=np.float64))))


def ffmpeg_encode(src, dst, *args: str) -> None:
    subprocess.run(["ffmpeg", "-nostdin", "-v", "error", "-y", "-i", str(src), *args, str(dst)],
                   check=True)


# ---------------------------------------------------------------- round trips


LOSSLESS = [
    ("wav", "PCM_16", 1 / 32768),
    ("wav", "PCM_24", 1 / 2**23),
    ("wav", "FLOAT", 1e-7),
    ("flac", "PCM_16", 1 / 32768),
    ("flac", "PCM_24", 1 / 2**23),
    ("aiff", "PCM_16", 1 / 32768),
]


@pytest.mark.parametrize(("ext", "subtype", "step"), LOSSLESS)
def test_lossless_round_trip_matches_soundfile_and_numpy(tmp_path, ext, subtype, step):
    x = clicks(2.0, 48000, seed=1)
    path = tmp_path / f"rt.{ext}"
    write_audio(path, x, 48000, subtype=subtype)
    rec = load_recording(path)
    # reference 1: libsndfile's own decoding through soundfile
    ref, ref_rate = sf.read(path, dtype="float32")
    assert isinstance(rec, Recording)
    assert rec.samples.dtype == np.float32 and rec.samples.ndim == 1
    assert rec.sample_rate_hz == ref_rate == 48000
    assert rec.frames == len(ref) == len(x)
    np.testing.assert_array_equal(rec.samples, ref)
    # reference 2: the numpy signal written, within one quantisation step
    assert np.max(np.abs(rec.samples - x)) <= step
    assert rec.duration_s == pytest.approx(2.0)
    assert rec.channel_used == 0 and rec.channels == 1
    assert rec.warnings == []
    info = probe(path)
    assert isinstance(info, AudioInfo)
    assert (info.frames, info.channels, info.subtype) == (len(x), 1, subtype)


@pytest.mark.parametrize("ext", ["ogg", "mp3"])
def test_lossy_round_trip_correlates_with_original(tmp_path, ext):
    # reference: the numpy original; tolerance for a lossy codec (correlation >= 0.95,
    # RMS within 1 dB), common practice, no source
    x = clicks(3.0, 44100, seed=2, noise=0.01)
    path = tmp_path / f"rt.{ext}"
    write_audio(path, x, 44100)
    rec = load_recording(path)
    assert rec.sample_rate_hz == 44100
    assert abs(rec.frames - len(x)) <= 2304
    lag, r = lag_corr(x, rec.samples.astype(np.float64), 1200)
    assert r >= 0.95, (lag, r)
    assert abs(rms_db(rec.samples) - rms_db(x)) < 1.0
    assert not [w for w in rec.warnings if "truncated" in w or "damaged" in w]


@needs_ffmpeg
def test_m4a_through_ffmpeg_round_trip(tmp_path):
    x = clicks(3.0, 48000, seed=3, noise=0.01)
    wav = tmp_path / "src.wav"
    write_audio(wav, x, 48000, subtype="FLOAT")
    m4a = tmp_path / "phone.m4a"
    ffmpeg_encode(wav, m4a, "-c:a", "aac", "-b:a", "192k")
    info = probe(m4a)
    assert info.format.startswith("ffmpeg:") and info.subtype == "aac"
    assert info.sample_rate_hz == 48000 and info.channels == 1
    rec = load_recording(m4a)
    # reference: numpy original; AAC tolerance as for the other lossy codecs
    assert abs(rec.frames - len(x)) <= 2048
    lag, r = lag_corr(x, rec.samples.astype(np.float64), 2100)
    assert r >= 0.95, (lag, r)
    assert abs(rms_db(rec.samples) - rms_db(x)) < 1.0


@needs_ffmpeg
def test_write_audio_m4a_reads_back(tmp_path):
    x = clicks(2.0, 44100, seed=4)
    path = tmp_path / "out.m4a"
    write_audio(path, x, 44100)
    rec = load_recording(path)
    assert rec.sample_rate_hz == 44100
    assert lag_corr(x, rec.samples.astype(np.float64), 2100)[1] >= 0.95


@pytest.mark.parametrize("rate_hz", [8000, 44100, 48000, 96000, 192000])
@pytest.mark.parametrize("ext", ["wav", "flac"])
def test_sample_rates(tmp_path, rate_hz, ext):
    x = clicks(1.2, rate_hz, seed=5)
    path = tmp_path / f"r{rate_hz}.{ext}"
    write_audio(path, x, rate_hz, subtype="PCM_24")
    rec = load_recording(path)
    assert rec.sample_rate_hz == rate_hz
    assert rec.frames == len(x)
    assert rec.duration_s == pytest.approx(len(x) / rate_hz)
    assert np.max(np.abs(rec.samples - x)) <= 1 / 2**23


@pytest.mark.parametrize("nch,click_ch", [(2, 1), (4, 2)])
def test_channel_auto_choice_picks_the_clicks(tmp_path, nch, click_ch):
    rate = 48000
    cols = [noise_only(3.0, rate, seed=10 + c, level=0.02) for c in range(nch)]
    cols[click_ch] = clicks(3.0, rate, seed=20, level=0.3, noise=0.02)
    # a louder hum on channel 0: level alone must not win
    t = np.arange(len(cols[0])) / rate
    cols[0] = cols[0] + 0.4 * np.sin(2 * np.pi * 50 * t)
    x = np.stack(cols, axis=1)
    path = tmp_path / f"multi{nch}.wav"
    write_audio(path, x, rate, subtype="PCM_24")
    rec = load_recording(path)
    assert rec.channels == nch
    assert rec.channel_used == click_ch
    ref, _ = sf.read(path, dtype="float32")
    np.testing.assert_array_equal(rec.samples, ref[:, click_ch])
    with open_stream(path) as stream:
        scores = stream.channel_scores_db
        assert scores is not None and len(scores) == nch
        assert int(np.argmax(scores)) == click_ch
        assert scores[click_ch] > max(s for i, s in enumerate(scores) if i != click_ch) + 10
    assert not any(w.startswith("channel choice") for w in rec.warnings)
    # an explicit channel is honoured exactly
    for c in range(nch):
        np.testing.assert_array_equal(load_recording(path, channel=c).samples, ref[:, c])


def test_unclear_channel_choice_is_reported(tmp_path):
    x = np.stack([noise_only(3.0, 48000, seed=50 + c) for c in range(3)], axis=1)
    write_audio(tmp_path / "hiss.wav", x, 48000)
    rec = load_recording(tmp_path / "hiss.wav")
    warning = next(w for w in rec.warnings if w.startswith("channel choice"))
    assert "first 3 s" in warning and "--channel" in warning


def test_click_to_noise_of_gaussian_noise_matches_order_statistics():
    # Reference: for white Gaussian noise the measure is the 90th percentile of the
    # maximum of n = rate |N(0,1)| samples over the MAD noise estimate (which equals
    # sigma, Donoho & Johnstone 1994). The distribution of that maximum comes from
    # scipy.stats.norm: P(max < m) = (2 Phi(m) - 1)^n.
    rate = 16000
    x = noise_only(60.0, rate, seed=30, level=0.05)
    got = float(click_to_noise_db(x, rate)[0])
    m90 = stats.norm.ppf((1 + 0.9 ** (1 / rate)) / 2)
    assert got == pytest.approx(20 * np.log10(m90), abs=0.5)
    # clicks 30 dB above the noise score far higher
    y = clicks(10.0, rate, seed=31, level=0.3, noise=0.01)
    assert float(click_to_noise_db(y, rate)[0]) > got + 15


# ----------------------------------------------------------------- streaming


@pytest.mark.parametrize("ext,subtype", [("wav", "PCM_16"), ("flac", "PCM_24"), ("mp3", None),
                                         ("ogg", None)])
@pytest.mark.parametrize("block_frames", [777, 4096, 65536])
def test_blocks_equal_whole_file(tmp_path, ext, subtype, block_frames):
    x = np.stack([clicks(2.5, 44100, seed=40), noise_only(2.5, 44100, seed=41)], axis=1)
    path = tmp_path / f"s.{ext}"
    write_audio(path, x, 44100, subtype=subtype)
    ref, _ = sf.read(path, dtype="float32")  # reference: soundfile, whole file at once
    with open_stream(path, block_frames=block_frames) as stream:
        assert stream.channel_used == 0
        blocks = list(stream)
        assert stream.frames_read == len(ref)
    assert all(b.dtype == np.float32 and b.ndim == 1 for b in blocks)
    assert all(len(b) <= block_frames for b in blocks)
    assert len(blocks) == -(-len(ref) // block_frames)
    np.testing.assert_array_equal(np.concatenate(blocks), ref[:, 0])


@pytest.mark.parametrize("ext,fmt", [("wav", "WAV"), ("aiff", "AIFF"), ("flac", "FLAC")])
def test_pcm16_stream_equals_libsndfile_float_decoding_at_every_code(tmp_path, ext, fmt):
    # 16-bit PCM is read as integers and scaled by the stream; reference:
    # libsndfile's own float32 decoding (soundfile, dtype="float32"), for
    # every one of the 65536 codes, both byte orders (AIFF is big-endian)
    codes = np.arange(-32768, 32768, dtype=np.int16)
    codes = np.concatenate([codes, np.random.default_rng(44).permutation(codes)])
    path = tmp_path / f"codes.{ext}"
    sf.write(path, np.stack([codes, codes[::-1]], axis=1), 48000, format=fmt,
             subtype="PCM_16")
    ref, _ = sf.read(path, dtype="float32")
    for ch in (0, 1):
        with open_stream(path, channel=ch, block_frames=4096) as stream:
            got = np.concatenate(list(stream))
        assert got.dtype == np.float32
        np.testing.assert_array_equal(got, ref[:, ch])


@needs_ffmpeg
def test_ffmpeg_blocks_equal_ffmpeg_whole_decode(tmp_path):
    x = np.stack([noise_only(2.0, 48000, seed=42), clicks(2.0, 48000, seed=43)], axis=1)
    wav = tmp_path / "src.wav"
    write_audio(wav, x, 48000)
    m4a = tmp_path / "s.m4a"
    ffmpeg_encode(wav, m4a, "-c:a", "aac")
    # reference: ffmpeg's own whole-file decode to float WAV, read by soundfile
    ref_wav = tmp_path / "ref.wav"
    ffmpeg_encode(m4a, ref_wav, "-c:a", "pcm_f32le")
    ref, _ = sf.read(ref_wav, dtype="float32")
    with open_stream(m4a, block_frames=1000) as stream:
        assert stream.channel_used == 1
        got = np.concatenate(list(stream))
    np.testing.assert_array_equal(got, ref[:, 1])


def test_stream_memory_is_bounded(tmp_path):
    # 40 s of 4-channel 48 kHz audio: 30.7 MB as float32; the stream must stay far below
    rate, nch = 48000, 4
    path = tmp_path / "long.wav"
    with sf.SoundFile(path, "w", rate, nch, subtype="PCM_16") as f:
        for k in range(40):
            f.write(np.stack([noise_only(1.0, rate, seed=100 + 4 * k + c) for c in range(nch)], 1))
    tracemalloc.start()
    try:
        with open_stream(path) as stream:
            n = sum(len(b) for b in stream)
        _, peak_bytes = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert n == 40 * rate
    assert peak_bytes < 8e6, peak_bytes


def test_stream_can_be_iterated_once(tmp_path):
    path = tmp_path / "a.wav"
    write_audio(path, clicks(1.5, 8000, seed=6), 8000)
    with open_stream(path) as stream:
        list(stream)
        with pytest.raises(UsageError):
            iter(stream)


def test_block_s_option(tmp_path):
    path = tmp_path / "a.wav"
    write_audio(path, clicks(2.0, 8000, seed=7), 8000)
    with open_stream(path, block_s=0.5) as stream:
        sizes = [len(b) for b in stream]
    assert sizes == [4000] * 4


@pytest.mark.parametrize("ext", ["wav", "flac"])
def test_read_segment_matches_slice(tmp_path, ext):
    x = np.stack([clicks(3.0, 48000, seed=8), noise_only(3.0, 48000, seed=9)], axis=1)
    path = tmp_path / f"seg.{ext}"
    write_audio(path, x, 48000, subtype="PCM_24")
    ref, _ = sf.read(path, dtype="float32")
    seg = read_segment(path, start_s=1.25, stop_s=1.5, channel=0)
    np.testing.assert_array_equal(seg, ref[60000:72000, 0])
    tail = read_segment(path, start_s=2.9, stop_s=5.0, channel=1)
    np.testing.assert_array_equal(tail, ref[139200:, 1])
    assert read_segment(path, start_s=1.0, stop_s=1.1).size == 4800  # channel auto-chosen


@needs_ffmpeg
def test_read_segment_through_ffmpeg(tmp_path):
    x = clicks(3.0, 48000, seed=11)
    wav = tmp_path / "src.wav"
    write_audio(wav, x, 48000)
    m4a = tmp_path / "seg.m4a"
    ffmpeg_encode(wav, m4a, "-c:a", "aac", "-b:a", "192k")
    full = load_recording(m4a).samples
    seg = read_segment(m4a, start_s=1.0, stop_s=1.5, channel=0)
    assert len(seg) == 24000
    lag, r = lag_corr(full[48000 - 500: 72000 + 500].astype(np.float64),
                      np.concatenate([np.zeros(500), seg, np.zeros(500)]), 300)
    assert abs(lag) <= 64 and r > 0.95


# ---------------------------------------------------------------- bad input


def _wav(path, x, rate=48000, subtype="PCM_16"):
    sf.write(path, x, rate, subtype=subtype)
    return path


def _bad_inputs(tmp_path):
    """(name, path, kwargs, words expected in the message)."""
    cases = []
    cases.append(("missing", tmp_path / "nothing.wav", {}, "no such file"))
    (tmp_path / "empty.wav").write_bytes(b"")
    cases.append(("empty", tmp_path / "empty.wav", {}, "empty (0 bytes)"))
    (tmp_path / "notes.wav").write_text("this is a shopping list, not a recording\n" * 20)
    cases.append(("not audio", tmp_path / "notes.wav", {}, "not an audio file"))
    hdr = tmp_path / "header_only.wav"
    _wav(hdr, np.zeros(0))
    cases.append(("zero-length", hdr, {}, "no audio (0 frames)"))
    cases.append(("short", _wav(tmp_path / "short.wav", clicks(0.5, 48000, seed=12)), {},
                  "only 0.50 s of audio"))
    cases.append(("silent", _wav(tmp_path / "silent.wav", np.zeros(96000)), {}, "silent"))
    nan = clicks(2.0, 48000, seed=13)
    nan[50000] = np.nan
    cases.append(("NaN", _wav(tmp_path / "nan.wav", nan, subtype="FLOAT"), {},
                  "NaN or infinite samples (first at 1.042 s"))
    inf = clicks(2.0, 48000, seed=14)
    inf[70000] = np.inf
    cases.append(("Inf", _wav(tmp_path / "inf.wav", inf, subtype="FLOAT"), {},
                  "NaN or infinite"))
    good = _wav(tmp_path / "good.wav", clicks(2.0, 48000, seed=15))
    broken = bytearray(good.read_bytes())
    broken[16:20] = struct.pack("<I", 4)  # fmt chunk too small
    (tmp_path / "badfmt.wav").write_bytes(bytes(broken[:40]))
    cases.append(("unreadable header", tmp_path / "badfmt.wav", {}, "unreadable"))
    flac = tmp_path / "good.flac"
    sf.write(flac, clicks(2.0, 48000, seed=16), 48000)
    raw = flac.read_bytes()
    first_frame = raw.find(b"\xff\xf8", 42)
    (tmp_path / "nodata.flac").write_bytes(raw[:first_frame] + bytes(
        np.random.default_rng(17).integers(0, 256, 20000, dtype=np.uint8)))
    cases.append(("undecodable", tmp_path / "nodata.flac", {}, "unreadable, no audio"))
    cases.append(("channel", good, {"channel": 2}, "channel 2 does not exist"))
    cases.append(("negative channel", good, {"channel": -1}, "channel -1 does not exist"))
    cases.append(("low rate", _wav(tmp_path / "r4k.wav", clicks(2.0, 4000, seed=18), 4000), {},
                  "sample rate 4000 Hz is outside"))
    cases.append(("high rate", _wav(tmp_path / "r384k.wav", clicks(1.5, 384000, seed=19), 384000),
                  {}, "sample rate 384000 Hz is outside"))
    silent2 = np.stack([clicks(2.0, 48000, seed=20), np.zeros(96000)], axis=1)
    cases.append(("silent channel", _wav(tmp_path / "silent_ch.wav", silent2), {"channel": 1},
                  "channel 1 is silent"))
    (tmp_path / "folder.wav").mkdir()
    cases.append(("directory", tmp_path / "folder.wav", {}, "is a directory"))
    return cases


BAD_NAMES = ["missing", "empty", "not audio", "zero-length", "short", "silent", "NaN", "Inf",
             "unreadable header", "undecodable", "channel", "negative channel", "low rate",
             "high rate", "silent channel", "directory"]


@pytest.mark.parametrize("name", BAD_NAMES)
def test_bad_input_gets_one_line_input_error_naming_the_file(tmp_path, name):
    case = {c[0]: c for c in _bad_inputs(tmp_path)}[name]
    _, path, kwargs, words = case
    with pytest.raises(InputError) as caught:
        load_recording(path, **kwargs)
    message = str(caught.value)
    assert message.startswith(str(path) + ": ")
    assert words in message
    assert "\n" not in message
    # the stream API gives the same error, at open or while reading
    with pytest.raises(InputError) as again, open_stream(path, **kwargs) as stream:
        for _ in stream:
            pass
    assert str(again.value) == message


def test_min_duration_is_adjustable(tmp_path):
    path = _wav(tmp_path / "short.wav", clicks(0.5, 48000, seed=21))
    assert load_recording(path, min_duration_s=0.25).frames == 24000


def test_missing_ffmpeg_gives_dependency_error(tmp_path, monkeypatch):
    x = clicks(2.0, 48000, seed=22)
    m4a = tmp_path / "phone.m4a"
    if HAVE_FFMPEG:
        wav = tmp_path / "src.wav"
        write_audio(wav, x, 48000)
        ffmpeg_encode(wav, m4a, "-c:a", "aac")
    else:  # an MP4 header is enough: the format is recognised by its magic number
        m4a.write_bytes(b"\x00\x00\x00\x20ftypM4A \x00\x00\x00\x00" + bytes(64))
    text = tmp_path / "notes.dat"
    text.write_text("not audio at all\n" * 10)
    monkeypatch.setattr(audio_io.shutil, "which", lambda name: None)
    with pytest.raises(DependencyError) as caught:
        load_recording(m4a)
    assert str(caught.value).startswith(f"{m4a}: ") and "ffmpeg" in str(caught.value)
    assert "apt-get install ffmpeg" in str(caught.value)
    with pytest.raises(InputError) as caught:
        probe(text)
    assert str(caught.value).startswith(f"{text}: not an audio file")
    with pytest.raises(DependencyError):
        write_audio(tmp_path / "out.m4a", x, 48000)


# ------------------------------------------------------------ damaged files


def _patch_data_size(path, value):
    raw = bytearray(path.read_bytes())
    k = raw.find(b"data")
    raw[k + 4: k + 8] = struct.pack("<I", value)
    path.write_bytes(bytes(raw))


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "FLOAT", "PCM_U8"])
@pytest.mark.parametrize("size_field", [0, 0xFFFFFFFF])
def test_wav_whose_writer_died_is_recovered(tmp_path, subtype, size_field):
    x = np.stack([clicks(2.0, 44100, seed=23), noise_only(2.0, 44100, seed=24)], axis=1)
    path = tmp_path / "died.wav"
    sf.write(path, x, 44100, subtype=subtype)
    ref, _ = sf.read(path, dtype="float32")  # reference: the intact file
    _patch_data_size(path, size_field)
    if size_field == 0:  # what libsndfile alone makes of it: no audio at all
        assert sf.info(path).frames == 0
    rec = load_recording(path)
    np.testing.assert_array_equal(rec.samples, ref[:, 0])
    assert rec.frames == len(x)
    assert any(w.startswith("damaged header") and "2.00 s" in w for w in rec.warnings)
    assert probe(path).frames == len(x)
    # seeking works on the recovered data too
    np.testing.assert_array_equal(
        read_segment(path, start_s=1.0, stop_s=1.01, channel=1), ref[44100:44541, 1])


@pytest.mark.parametrize("extra_bytes", [0, 3])
def test_truncated_wav_keeps_readable_part(tmp_path, extra_bytes):
    x = clicks(4.0, 48000, seed=25)
    path = tmp_path / "cut.wav"
    sf.write(path, x, 48000, subtype="PCM_16")
    ref, _ = sf.read(path, dtype="float32")
    raw = path.read_bytes()
    keep = 44 + 2 * 48000 * 2 + extra_bytes  # header + 2 s, maybe half a frame more
    path.write_bytes(raw[:keep])
    rec = load_recording(path)
    np.testing.assert_array_equal(rec.samples, ref[: 96000 + extra_bytes // 2])
    warning = next(w for w in rec.warnings if w.startswith("truncated"))
    assert "declares 4.00 s" in warning and "holds 2.00 s" in warning
    assert ("cut mid-way" in warning) == (extra_bytes % 2 == 1)


@pytest.mark.parametrize("damage", ["garbage", "zeros", "cut"])
def test_damaged_flac_keeps_readable_part(tmp_path, damage):
    x = clicks(4.0, 48000, seed=26)
    path = tmp_path / "bad.flac"
    sf.write(path, x, 48000, subtype="PCM_16")
    ref, _ = sf.read(path, dtype="float32")
    raw = path.read_bytes()
    mid = len(raw) // 2
    filler = {"garbage": bytes(np.random.default_rng(27).integers(0, 256, 3000, dtype=np.uint8)),
              "zeros": bytes(3000), "cut": b""}[damage]
    rest = b"" if damage == "cut" else raw[mid + 3000:]
    path.write_bytes(raw[:mid] + filler + rest)
    rec = load_recording(path)
    # Everything up to the damage is kept: for this stationary signal the frames before
    # byte `mid` are about mid/len(raw) of the whole; the loss may be at most the FLAC
    # frame hit (4096 samples, libsndfile's block size) and a frame of slack.
    header = raw.find(b"\xff\xf8", 42)
    before = (mid - header) / (len(raw) - header) * len(x)
    assert before - 2 * 4096 < rec.frames <= before + 4096, (rec.frames, before)
    np.testing.assert_array_equal(rec.samples, ref[: rec.frames])
    warning = next(w for w in rec.warnings if w.startswith("damaged"))
    assert "of the 4.00 s declared" in warning and "lost sync" in warning


def test_truncated_mp3_ogg_aiff_are_reported(tmp_path):
    x = clicks(4.0, 44100, seed=28, noise=0.01)
    for ext in ("mp3", "ogg", "aiff"):
        path = tmp_path / f"t.{ext}"
        write_audio(path, x, 44100)
        raw = path.read_bytes()
        path.write_bytes(raw[: len(raw) // 2])
        rec = load_recording(path)
        assert 1.2 < rec.duration_s < 2.8, ext
        assert any(w.startswith("truncated") for w in rec.warnings), (ext, rec.warnings)
        # what is kept is not padded with silence: the second half still holds clicks
        half = rec.samples[rec.frames // 2:]
        assert np.max(np.abs(half)) > 0.2, ext


@needs_ffmpeg
def test_cut_off_m4a(tmp_path):
    x = clicks(4.0, 48000, seed=51)
    wav = tmp_path / "src.wav"
    write_audio(wav, x, 48000)
    # index at the end (ffmpeg's default, like many recorders): nothing can be recovered
    late = tmp_path / "late_index.m4a"
    ffmpeg_encode(wav, late, "-c:a", "aac")
    late.write_bytes(late.read_bytes()[:20000])
    with pytest.raises(InputError) as caught:
        load_recording(late)
    assert str(caught.value).startswith(f"{late}: unreadable MP4/M4A")
    # index at the front: the audio before the cut is read, with a warning
    early = tmp_path / "early_index.m4a"
    ffmpeg_encode(wav, early, "-c:a", "aac", "-movflags", "+faststart")
    raw = early.read_bytes()
    early.write_bytes(raw[: int(len(raw) * 0.7)])
    rec = load_recording(early)
    assert 1.5 < rec.duration_s < 3.6
    assert any(w.startswith("damaged: ffmpeg reported errors") for w in rec.warnings)
    ref = load_recording(wav).samples
    assert lag_corr(ref[: rec.frames].astype(np.float64),
                    rec.samples.astype(np.float64), 2100)[1] > 0.95


# ------------------------------------------------------- DC, clipping, dropouts


def test_dc_offset_warning(tmp_path):
    x = clicks(2.0, 48000, seed=29)
    write_audio(tmp_path / "dc.wav", x + 0.05, 48000)
    write_audio(tmp_path / "small_dc.wav", x + 0.005, 48000)
    rec = load_recording(tmp_path / "dc.wav")
    # reference: numpy mean of the samples as decoded
    mean = float(np.mean(rec.samples, dtype=np.float64))
    assert any(w.startswith("DC offset") and f"{mean:+.3f}" in w for w in rec.warnings)
    assert not any("DC offset" in w for w in load_recording(tmp_path / "small_dc.wav").warnings)


def test_clipping_warning_counts_runs(tmp_path):
    x = clicks(2.0, 48000, seed=30, level=0.5)
    loud = np.clip(3.0 * x, -1.0, 1.0)  # the clicks now hit full scale
    write_audio(tmp_path / "clip.wav", loud, 48000)
    rec = load_recording(tmp_path / "clip.wav")
    # reference: runs of >= 3 samples at |x| >= 0.999 counted with numpy on the decoded data
    mask = np.abs(rec.samples) >= 0.999
    d = np.diff(np.concatenate(([0], mask.astype(int), [0])))
    lengths = np.flatnonzero(d == -1) - np.flatnonzero(d == 1)
    expected = int(np.sum(lengths >= 3))
    assert expected > 10
    warning = next(w for w in rec.warnings if w.startswith("clipping"))
    assert warning.startswith(f"clipping: {expected} runs")
    # the same count whatever the block boundaries
    with open_stream(tmp_path / "clip.wav", block_frames=101) as stream:
        list(stream)
    assert next(w for w in stream.warnings if w.startswith("clipping")) == warning
    write_audio(tmp_path / "clean.wav", x, 48000)
    assert not any("clipping" in w for w in load_recording(tmp_path / "clean.wav").warnings)
    # 8-bit, clipped on the positive side only: the largest code, 127/128, is full scale
    write_audio(tmp_path / "clip8.wav", np.clip(3.0 * x, -0.5, 1.0), 48000, subtype="PCM_U8")
    rec8 = load_recording(tmp_path / "clip8.wav")
    assert np.max(rec8.samples) == pytest.approx(127 / 128)
    assert any(w.startswith("clipping") for w in rec8.warnings)


def test_dropout_warning_for_interior_digital_silence(tmp_path):
    x = clicks(3.0, 48000, seed=31)
    gap = x.copy()
    gap[72000:74400] = 0.0  # 50 ms of exact zeros at 1.5 s
    write_audio(tmp_path / "gap.wav", gap, 48000)
    rec = load_recording(tmp_path / "gap.wav")
    warning = next(w for w in rec.warnings if w.startswith("dropouts"))
    assert "1 stretch" in warning and "at 1.500 s" in warning and "0.050 s" in warning
    with open_stream(tmp_path / "gap.wav", block_frames=1000) as stream:  # gap spans blocks
        list(stream)
    assert warning in stream.warnings
    lead = x.copy()
    lead[:24000] = 0.0  # leading digital silence is not a dropout
    lead[-4800:] = 0.0
    write_audio(tmp_path / "lead.wav", lead, 48000)
    assert not any("dropouts" in w for w in load_recording(tmp_path / "lead.wav").warnings)


# ------------------------------------------------------------------- writing


def test_write_audio_rejects_unknown_extension_and_overload(tmp_path):
    x = clicks(1.5, 48000, seed=32)
    with pytest.raises(UsageError) as caught:
        write_audio(tmp_path / "x.xyz", x, 48000)
    assert str(caught.value).startswith(str(tmp_path / "x.xyz"))
    assert ".wav" in str(caught.value)
    with pytest.raises(UsageError) as caught:
        write_audio(tmp_path / "loud.wav", 2 * x + 0.5, 48000)
    assert "exceed full scale" in str(caught.value)
    assert not (tmp_path / "loud.wav").exists()
    write_audio(tmp_path / "loud.wav", 2 * x + 0.5, 48000, subtype="FLOAT")
    assert sf.info(tmp_path / "loud.wav").subtype == "FLOAT"
    assert list(tmp_path.glob(".popmeter-*")) == []


def test_write_audio_multichannel_any_count(tmp_path):
    x = np.stack([clicks(1.5, 16000, seed=40 + c) for c in range(6)], axis=1)
    write_audio(tmp_path / "six.flac", x, 16000, subtype="PCM_24")
    ref, rate = sf.read(tmp_path / "six.flac")
    assert ref.shape == x.shape and rate == 16000
    assert np.max(np.abs(ref - x)) <= 1 / 2**23


def test_write_audio_creates_folder_and_ordinary_permissions(tmp_path):
    """A new folder is created, and the file is readable by others like any new
    file (not the private 0600 of a temporary file)."""
    import stat

    target = tmp_path / "new" / "deeper" / "rec.flac"
    x = 0.1 * np.sin(2 * np.pi * 440 * np.arange(48000) / 48000)
    write_audio(target, x, 48000)
    assert target.exists()
    mode = stat.S_IMODE(target.stat().st_mode)
    assert mode & stat.S_IROTH and mode & stat.S_IRUSR and mode & stat.S_IWUSR
