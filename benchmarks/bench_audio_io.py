"""Memory and speed of popmeter.audio_io on long recordings.

Writes a long click recording (default: 2 hours, 48 kHz) in each requested
format, then streams it through :func:`popmeter.audio_io.open_stream` in a
fresh child process per format and prints, per format: the frames read, the
wall time, the speed as a multiple of real time, the peak of Python
allocations during the stream (tracemalloc) and the child's peak resident
memory (ru_maxrss) beside its resident memory before streaming (the
interpreter, numpy, scipy and libsndfile): the difference is what streaming
costs.

    python benchmarks/bench_audio_io.py                      # 120 min WAV + FLAC, 20 min MP3/M4A
    python benchmarks/bench_audio_io.py --minutes 10 --formats wav

The files go to a temporary folder that is removed afterwards.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
import tracemalloc

import numpy as np
import soundfile as sf


def write_long(path: str, minutes: float, rate_hz: int, channels: int) -> None:
    """Clicks at 12 Hz on channel 1 (or 0 when mono) in noise, written second by second."""
    rng = np.random.default_rng(0)
    t = np.arange(int(0.02 * rate_hz)) / rate_hz
    pulse = 0.4 * np.sin(2 * np.pi * 1800 * t) * np.exp(-t / 0.004)
    one_s = np.zeros(rate_hz)
    for k in range(12):
        start = int(k * rate_hz / 12)
        one_s[start: start + len(pulse)] += pulse
    click_ch = 1 if channels > 1 else 0
    major = {"wav": "WAV", "flac": "FLAC", "mp3": "MP3"}
    ext = os.path.splitext(path)[1][1:]
    target = path if ext in major else path + ".src.flac"
    with sf.SoundFile(target, "w", rate_hz, channels, format=major.get(ext, "FLAC")) as f:
        for _ in range(int(minutes * 60)):
            block = 0.01 * rng.standard_normal((rate_hz, channels))
            block[:, click_ch] += one_s
            f.write(block.astype(np.float32))
    if target != path:
        subprocess.run(["ffmpeg", "-nostdin", "-v", "error", "-y", "-i", target,
                        "-c:a", "aac", "-b:a", "128k", path], check=True)
        os.unlink(target)


def measure(path: str) -> dict:
    """Stream one file; runs in a child process so that ru_maxrss is its own."""
    from popmeter.audio_io import open_stream

    with open("/proc/self/status") as status:
        rss_start_kb = next((int(line.split()[1]) for line in status
                             if line.startswith("VmRSS:")), 0)
    tracemalloc.start()
    t0 = time.perf_counter()
    with open_stream(path) as stream:
        frames = 0
        for block in stream:
            frames += len(block)
        channel = stream.channel_used
        warnings = list(stream.warnings)
        rate = stream.sample_rate_hz
    wall_s = time.perf_counter() - t0
    _, peak_py = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return {"frames": frames, "rate_hz": rate, "channel_used": channel, "wall_s": wall_s,
            "peak_python_mb": peak_py / 1e6, "max_rss_mb": rss_kb / 1e3,
            "rss_start_mb": rss_start_kb / 1e3,
            "warnings": warnings}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=120.0,
                        help="length of the WAV and FLAC files (default 120)")
    parser.add_argument("--lossy-minutes", type=float, default=20.0,
                        help="length of the MP3 and M4A files (encoding is slow; default 20)")
    parser.add_argument("--rate", type=int, default=48000, help="sample rate, Hz (default 48000)")
    parser.add_argument("--channels", type=int, default=2, help="channel count (default 2)")
    parser.add_argument("--formats", default="wav,flac,mp3,m4a",
                        help="comma-separated list (default wav,flac,mp3,m4a)")
    parser.add_argument("--measure", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.measure:
        print(json.dumps(measure(args.measure)))
        return
    formats = [f.strip() for f in args.formats.split(",") if f.strip()]
    if "m4a" in formats and shutil.which("ffmpeg") is None:
        print("ffmpeg not installed: m4a skipped")
        formats.remove("m4a")
    rows = []
    with tempfile.TemporaryDirectory(prefix="popmeter-bench-") as tmp:
        for fmt in formats:
            minutes = args.minutes if fmt in ("wav", "flac") else args.lossy_minutes
            path = os.path.join(tmp, f"long.{fmt}")
            t0 = time.perf_counter()
            write_long(path, minutes, args.rate, args.channels)
            write_s = time.perf_counter() - t0
            out = subprocess.run([sys.executable, __file__, "--measure", path],
                                 check=True, capture_output=True, text=True)
            result = json.loads(out.stdout.strip().splitlines()[-1])
            audio_s = result["frames"] / result["rate_hz"]
            rows.append((fmt, minutes, os.path.getsize(path) / 1e6, write_s, result, audio_s))
            os.unlink(path)
    print(f"audio_io streaming benchmark: {args.rate} Hz, {args.channels} channels, "
          f"clicks on channel {1 if args.channels > 1 else 0}, default block 65536 frames")
    print(f"{'format':6} {'minutes':>7} {'file MB':>8} {'read s':>7} {'x real':>7} "
          f"{'py peak MB':>10} {'RSS start MB':>12} {'max RSS MB':>10} {'channel':>7}  warnings")
    for fmt, minutes, size_mb, _, r, audio_s in rows:
        print(f"{fmt:6} {audio_s / 60:7.1f} {size_mb:8.1f} {r['wall_s']:7.1f} "
              f"{audio_s / r['wall_s']:7.0f} {r['peak_python_mb']:10.1f} {r['rss_start_mb']:12.1f} "
              f"{r['max_rss_mb']:10.1f} "
              f"{r['channel_used']:7d}  {len(r['warnings'])}")


if __name__ == "__main__":
    main()
