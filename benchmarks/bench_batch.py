"""Batch throughput: wall time of ``popmeter batch`` with --jobs 1 and --jobs 2.

Generates a production batch of synthetic one-minute recordings of the
invented demo boat (popmeter.synth; a spread of diaphragm gauges, a few
defective units and one unreadable file), then runs the whole batch job
(analysis, verdicts, statistics, per-unit run reports, batch report, history)
once per worker count and prints the wall times and the speed-up over one
worker. The verdicts of every run must agree; the script says so.

    python benchmarks/bench_batch.py                 # 100 units x 60 s, jobs 1 and 2
    python benchmarks/bench_batch.py --quick         # 6 units x 15 s: a smoke run
    python benchmarks/bench_batch.py --jobs 1 2 4 --no-reports

Recordings are cached in --workdir (default: a folder under the system
temporary directory) and reused when the same settings are asked again.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import tempfile
import time
from pathlib import Path


def make_batch(folder: Path, *, units: int, duration_s: float, sample_rate_hz: int) -> Path:
    """Write ``units`` recordings (FLAC) and one corrupt WAV into ``folder``."""
    import numpy as np

    from popmeter.profile import parse_profile, write_profile
    from popmeter.synth import (
        DEMO_BOAT_RAW,
        DEMO_SPEC_TOML,
        scenario_from_profile,
        write_header_only_wav,
        write_run,
    )

    stamp = folder / "settings.json"
    settings = {"units": units, "duration_s": duration_s, "sample_rate_hz": sample_rate_hz,
                "version": 1}
    if stamp.exists() and json.loads(stamp.read_text()) == settings:
        return folder
    if folder.exists():
        shutil.rmtree(folder)
    recordings = folder / "recordings"
    recordings.mkdir(parents=True)
    boat = folder / "boat.toml"
    write_profile(dict(DEMO_BOAT_RAW), boat, comment="invented demo boat (benchmark)")
    (folder / "spec.toml").write_text(DEMO_SPEC_TOML, encoding="utf-8")
    profile = parse_profile(json.loads(json.dumps(DEMO_BOAT_RAW)), source=str(boat))
    rng = np.random.default_rng(2026)
    scale = min(1.0, duration_s / 60.0)
    started = time.perf_counter()
    for i in range(units - 1):
        factor = float(rng.normal(1.0, 0.04))
        extra: dict = {}
        if i % 25 == 7:
            factor = 0.8  # thin diaphragm
        elif i % 25 == 13:
            factor = 1.25  # thick diaphragm
        elif i % 25 == 19:
            extra = {"stalls": 3}
        scenario = scenario_from_profile(
            profile, thickness_factor=factor, sample_rate_hz=sample_rate_hz,
            duration_s=duration_s, heating_s=4.0 * scale, startup_s=8.0 * scale,
            fade_s=8.0 * scale, after_s=3.0 * scale, click_to_noise_db=float(rng.uniform(20, 35)),
            seed=1000 + i, **extra,
        )
        write_run(recordings / f"BM-{i + 1:04d}.flac", scenario)
    # a recorder that died after the header: 30 s promised, no audio follows
    write_header_only_wav(recordings / f"BM-{units:04d}.wav", sample_rate_hz=sample_rate_hz,
                          promised_s=30.0)
    stamp.write_text(json.dumps(settings))
    print(f"generated {units} recordings in {time.perf_counter() - started:.1f} s")
    return folder


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=100, help="units in the batch (default 100)")
    parser.add_argument("--duration", type=float, default=60.0,
                        help="length of each recording in s (default 60)")
    parser.add_argument("--samplerate", type=int, default=48000,
                        help="sample rate in Hz (default 48000)")
    parser.add_argument("--jobs", type=int, nargs="+", default=[1, 2],
                        help="worker counts to time (default 1 2)")
    parser.add_argument("--no-reports", action="store_true",
                        help="skip the per-unit run reports (analysis and batch report only)")
    parser.add_argument("--quick", action="store_true", help="6 units of 15 s (smoke run)")
    parser.add_argument("--workdir", type=Path,
                        default=Path(tempfile.gettempdir()) / "popmeter_bench_batch",
                        help="where recordings and outputs go (default: under the temp folder)")
    args = parser.parse_args()
    if args.quick:
        args.units, args.duration = 6, 15.0

    from popmeter.batch import run_batch

    folder = make_batch(args.workdir / f"batch_{args.units}x{args.duration:g}s_{args.samplerate}",
                        units=args.units, duration_s=args.duration,
                        sample_rate_hz=args.samplerate)
    rows = []
    verdicts: dict[int, dict[str, str]] = {}
    for jobs in args.jobs:
        out = folder / f"out_jobs{jobs}"
        if out.exists():
            shutil.rmtree(out)
        started = time.perf_counter()
        result = run_batch(folder / "recordings", spec=folder / "spec.toml",
                           boat=folder / "boat.toml", out_dir=out, jobs=jobs, progress=False,
                           unit_reports=not args.no_reports)
        wall_s = time.perf_counter() - started
        verdicts[jobs] = {u.serial: u.status for u in result.units}
        rows.append((jobs, wall_s, result.counts))

    print()
    print(f"batch of {args.units} recordings x {args.duration:g} s at {args.samplerate} Hz, "
          f"unit reports {'off' if args.no_reports else 'on'}")
    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} logical "
          f"cores, Python {platform.python_version()}")
    print()
    base = next((wall for jobs, wall, _ in rows if jobs == 1), rows[0][1])
    print(f"{'jobs':>4}  {'wall s':>8}  {'s/unit':>7}  {'audio x real time':>17}  "
          f"{'speed-up':>8}  verdicts")
    audio_s = args.units * args.duration
    for jobs, wall_s, counts in rows:
        print(f"{jobs:>4}  {wall_s:8.1f}  {wall_s / args.units:7.2f}  {audio_s / wall_s:17.1f}  "
              f"{base / wall_s:8.2f}  PASS {counts['PASS']} FAIL {counts['FAIL']} "
              f"ERROR {counts['ERROR']}")
    same = all(v == verdicts[args.jobs[0]] for v in verdicts.values())
    print()
    print("verdicts identical across worker counts" if same
          else "WARNING: verdicts differ between worker counts")


if __name__ == "__main__":
    main()
