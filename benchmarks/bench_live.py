"""Figures of the live capture path: throughput, detection latency, what a SIGKILL loses.

Run: ``python benchmarks/bench_live.py`` (about a minute; the latency and
kill measurements run on a real clock). Prints:

1. **Throughput** of the live pipeline on one CPU core (the process is pinned
   to one core): the callback, the bounded queue, the writer thread (float32
   WAV on disk, header rewritten at every flush), the analysis thread (the
   streaming ClickDetector) and the live view rendered into a null console
   four times per second of *audio* (at 20x real time that is 80 redraws per
   wall second, far more than the real view's 4) -- as x real time on a 60 s,
   48 kHz generated run. Target >= 20x.
2. **Detection latency**: blocks of 512 frames fed at the real-time pace; for
   each click, the wall time at which it reached the live state minus the
   wall time at which its first sample "arrived" (start + sample / rate).
   Includes the block wait (10.7 ms). Target <= 50 ms + one block.
3. **SIGKILL**: ``python -m popmeter listen`` records a run played into a
   private JACK dummy server and is killed with SIGKILL at several moments;
   the file must open, match the source sample for sample, and lose at most
   the last second: lost = samples played before the kill - samples in the file.
   Without jackd it uses a subprocess that paces blocks into a CaptureSession.
4. **Live vs offline clicks** on the bundled synthetic recordings: the live
   click list at the end of the capture (streaming detector on 512-frame
   blocks, plus the detection module's whole-run passes run as the capture
   goes) and the streaming clicks alone, against the clicks of
   ``analyze_file`` on the saved recording, matched within 1 ms. The issue
   asks for >= 98 %.
"""

from __future__ import annotations

import io
import os
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import soundfile as sf

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from popmeter import live_view
from popmeter.capture import CaptureSession, WavSink
from popmeter.synth import RunScenario, render

SR = 48000
BLOCK = 512


def _run(duration_s: float, seed: int = 1) -> np.ndarray:
    if duration_s >= 40:
        scen = RunScenario(duration_s=duration_s, seed=seed)
    else:  # a short run keeps every phase
        scen = RunScenario(duration_s=duration_s, heating_s=1.0, startup_s=3.0, fade_s=3.0,
                           after_s=1.0, seed=seed)
    samples, _ = render(scen)
    return samples[:, 0].astype(np.float32)


def throughput(tmp: Path) -> None:
    from rich.console import Console

    try:
        os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})
        pinned = "pinned to one core"
    except (AttributeError, OSError):
        pinned = "not pinned (no sched_setaffinity)"
    x = _run(60.0)
    null = Console(file=io.StringIO(), width=100, color_system="truecolor", force_terminal=True)
    results = []
    for trial in range(3):
        out = tmp / f"tp{trial}.wav"
        session = CaptureSession(sink=WavSink(out, SR, 1), sample_rate_hz=SR, channels=1)
        session.start()
        view_every = SR // 4  # four redraws per second of audio
        next_view = 0
        redraw_s = []
        t0 = time.perf_counter()
        for i in range(0, len(x), BLOCK):
            b = x[i:i + BLOCK, None]
            session.callback(b, len(b), None, None)
            while session._queue.qsize() > session._capacity_blocks // 2:
                time.sleep(0.0005)  # let the writer catch up, as a real device would wait
            if i >= next_view:
                next_view += view_every
                r0 = time.perf_counter()
                null.print(live_view.render(session.snapshot()))
                null.file.seek(0)
                null.file.truncate()
                redraw_s.append(time.perf_counter() - r0)
        res = session.finish()
        wall = time.perf_counter() - t0
        assert res.frames_written == len(x) and res.dropped_frames == 0, res
        results.append((len(x) / SR / wall, len(res.clicks), statistics.median(redraw_s),
                        len(redraw_s)))
        out.unlink()
    best = max(r[0] for r in results)
    worst = min(r[0] for r in results)
    print("1. Throughput of the live pipeline (callback + queue + WAV writer + ClickDetector + view),")
    print(f"   60 s run at {SR} Hz, blocks of {BLOCK}, {pinned}, 3 trials")
    print(f"   x real time: {worst:.1f} (slowest) .. {best:.1f} (fastest)   target >= 20")
    print("   machine load average (1 min) at the end: "
          f"{os.getloadavg()[0]:.2f} on {os.cpu_count()} cores (shared machines slow the slowest)")
    print(f"   clicks found: {results[0][1]}; view redraws: {results[0][3]} "
          f"(median {1000 * results[0][2]:.2f} ms each)")
    try:
        os.sched_setaffinity(0, set(range(os.cpu_count() or 1)))
    except (AttributeError, OSError):
        pass


def latency(tmp: Path) -> None:
    x = _run(12.0, seed=2)
    out = tmp / "lat.wav"
    session = CaptureSession(sink=WavSink(out, SR, 1), sample_rate_hz=SR, channels=1,
                             clock=time.perf_counter)
    session.start()
    t0 = time.perf_counter()
    for k, i in enumerate(range(0, len(x), BLOCK)):
        due = t0 + (i + BLOCK) / SR  # the block is complete when its last sample has arrived
        while True:
            left = due - time.perf_counter()
            if left <= 0:
                break
            time.sleep(min(left, 0.002))
        b = x[i:i + BLOCK, None]
        session.callback(b, len(b), None, None)
    res = session.finish()
    lat_ms = np.array([1000 * (c.seen_wall_s - (t0 + c.sample / SR)) for c in res.live_clicks])
    audio_ms = np.array([1000 * (c.frames_received - c.sample) / SR for c in res.live_clicks])
    print("2. Detection latency, real-time pace, blocks of 512 (10.7 ms), "
          f"{len(lat_ms)} clicks of a 12 s run")
    print(f"   wall: median {np.median(lat_ms):.1f} ms, 95th pct {np.percentile(lat_ms, 95):.1f} "
          f"ms, max {lat_ms.max():.1f} ms   target <= {50 + 1000 * BLOCK / SR:.1f} ms")
    print(f"   of which audio the detector waits for (onset -> audio received): median "
          f"{np.median(audio_ms):.1f} ms, max {audio_ms.max():.1f} ms")


def sigkill(tmp: Path) -> None:
    from live_feeder import DummyJackServer, JackUnavailable, Player, align

    src = _run(12.0, seed=3)
    kill_after_s = [1.3, 2.05, 2.9, 3.55, 4.2]
    rows = []
    try:
        server = DummyJackServer(f"popmeter-bench-{os.getpid()}", sample_rate_hz=SR)
        server.start()
    except JackUnavailable as exc:
        print(f"3. SIGKILL through JACK skipped ({exc}); using a paced subprocess")
        return _sigkill_paced(tmp, src, kill_after_s)
    try:
        for k, after in enumerate(kill_after_s):
            out = tmp / f"kill{k}.wav"
            player = Player(server, src, name=f"feeder{k}")
            proc = subprocess.Popen([sys.executable, "-m", "popmeter", "listen", "--out", str(out),
                                     "--no-view", "--max-seconds", "30"], env=server.env,
                                    stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            try:
                player.connect_when_ready()
                t_play = time.monotonic()
                while time.monotonic() - t_play < after:
                    time.sleep(0.005)
                played = player.pos
                os.kill(proc.pid, signal.SIGKILL)
                proc.wait()
            finally:
                player.close()
            saved, _ = sf.read(out, dtype="float32")
            offset, skipped = align(saved, src)
            kept = len(saved) - offset
            exact = np.array_equal(saved[offset:], src[skipped:skipped + kept])
            rows.append((after, played / SR, kept / SR, (played - skipped - kept) / SR, exact))
    finally:
        server.stop()
    _print_kill(rows, "JACK dummy server -> popmeter listen subprocess")


def _print_kill(rows, how):
    print(f"3. SIGKILL of a capture ({how}): file readable and lost audio")
    print("   killed after  played (s)  in file (s)  lost (s)  samples exact")
    for after, played, kept, lost, exact in rows:
        print(f"   {after:11.2f}  {played:10.3f}  {kept:11.3f}  {lost:8.3f}  {exact}")
    print(f"   worst loss: {max(r[3] for r in rows):.3f} s   target <= 1 s")


def _sigkill_paced(tmp: Path, src: np.ndarray, kill_after_s: list[float]) -> None:
    rows = []
    np.save(tmp / "src.npy", src)
    for k, after in enumerate(kill_after_s):
        out = tmp / f"pkill{k}.wav"
        code = (
            "import sys, time, numpy as np\n"
            "from popmeter.capture import CaptureSession, WavSink\n"
            f"x = np.load({str(tmp / 'src.npy')!r})\n"
            f"s = CaptureSession(sink=WavSink({str(out)!r}, {SR}, 1), sample_rate_hz={SR}, channels=1)\n"
            "s.start(); t0 = time.monotonic()\n"
            f"for i in range(0, len(x), {BLOCK}):\n"
            f"    while time.monotonic() < t0 + (i + {BLOCK}) / {SR}: time.sleep(0.001)\n"
            f"    b = x[i:i + {BLOCK}, None]; s.callback(b, len(b), None, None)\n"
            "    print(i + len(b), flush=True)\n"
        )
        proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
        t0 = time.monotonic()
        fed = 0
        while time.monotonic() - t0 < after + 0.3:  # + interpreter start
            fed = int(proc.stdout.readline())
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        saved, _ = sf.read(out, dtype="float32")
        exact = np.array_equal(saved, src[:len(saved)])
        rows.append((after, fed / SR, len(saved) / SR, (fed - len(saved)) / SR, exact))
    _print_kill(rows, "paced CaptureSession subprocess")


def agreement(tmp: Path) -> None:
    """Live clicks (streaming, 512-frame blocks) against the offline analysis of the saved file."""
    from popmeter.analysis import analyze_file

    print("4. Live clicks vs the offline analysis of the saved file (within 1 ms)")
    print("   recording            clicks       offline  live  offline found live  "
          "live not offline")
    for name in ("clean_run.flac", "noisy_run.flac", "two_click_run.flac"):
        src = ROOT / "synthetic_audio" / name
        x, rate = sf.read(src, dtype="float32", always_2d=True)
        out = tmp / (src.stem + ".wav")
        session = CaptureSession(sink=WavSink(out, rate, x.shape[1]), sample_rate_hz=rate,
                                 channels=x.shape[1])
        session.start()
        for i in range(0, len(x), BLOCK):
            b = x[i:i + BLOCK]
            session.callback(b, len(b), None, None)
            while session._queue.qsize() > session._capacity_blocks // 2:
                time.sleep(0.0005)
        res = session.finish()
        off = np.array([c.time_s for c in analyze_file(out, channel=0).detection.clicks])
        for label, clicks in (("live list", res.clicks), ("stream only", res.live_clicks)):
            live = np.array([c.time_s for c in clicks])
            found = sum(bool(len(live) and np.min(np.abs(live - t)) <= 1e-3) for t in off)
            extra = sum(bool(len(off) == 0 or np.min(np.abs(off - t)) > 1e-3) for t in live)
            share = 100 * found / max(len(off), 1)
            print(f"   {name:<20} {label:<12} {len(off):7d} {len(live):5d} {found:6d} "
                  f"({share:5.1f} %) {extra:8d}")
        print(f"   {'':<20} whole-run passes: {len(session.pass_seconds)}, median "
              f"{1000 * np.median(session.pass_seconds):.1f} ms, max "
              f"{1000 * max(session.pass_seconds):.1f} ms")


def main() -> None:
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        throughput(tmp)
        latency(tmp)
        sigkill(tmp)
        agreement(tmp)


if __name__ == "__main__":
    main()
