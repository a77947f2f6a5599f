"""Regenerate the bundled demo recordings in synthetic_audio/ (deterministic seeds).

Run:  python benchmarks/make_synthetic_audio.py [OUT_DIR]

Writes the demo boat and QC spec, three demo runs and the demo production
batch (see synthetic_audio/README.txt), then prints every file with its size,
the folder total, and the time taken.  Default OUT_DIR: the repository's
synthetic_audio/ folder.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from popmeter.synth import load_truth, make_demo_bundle

LIMIT_BYTES = 15 * 1024 * 1024  # the bundle must stay under 15 MB


def main(argv: list[str]) -> int:
    out = Path(argv[0]) if argv else Path(__file__).resolve().parent.parent / "synthetic_audio"
    t0 = time.perf_counter()
    make_demo_bundle(out)
    elapsed = time.perf_counter() - t0
    total = 0
    print(f"{'file':<40s} {'bytes':>10s}  clicks  steady rate Hz")
    for path in sorted(p for p in out.rglob("*") if p.is_file()):
        size = path.stat().st_size
        total += size
        info = ""
        if path.suffix == ".flac":
            truth = load_truth(path)
            rate = truth["steady_rate_hz"]
            info = f"{len(truth['clicks']):6d}  " + (f"{rate:.3f}" if rate else "-")
        print(f"{path.relative_to(out)!s:<40s} {size:10d}  {info}")
    print(f"total {total / 1e6:.2f} MB in {out} (limit {LIMIT_BYTES / 1e6:.1f} MB); "
          f"generated in {elapsed:.1f} s")
    return 0 if total < LIMIT_BYTES else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
