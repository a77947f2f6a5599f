"""Speed of the synthetic recording generator, and its click-to-noise ratio measured back.

Run:  python benchmarks/bench_synth.py

Prints, for a few scenarios of a 60 s recording, the render time (best of 3,
one core), the real-time factor, and the click-to-noise ratio measured back
from the rendered audio (median band-limited peak of the steady main clicks
over the band-limited RMS of the heating noise; no distractors or hum in that
measurement).  The second measured column takes the click peaks from the
same scenario rendered without noise (same seed: the same clicks), so the noise
riding on each peak does not bias it; at 12 dB the first column reads high for
that reason.
"""

from __future__ import annotations

import math
import time

import numpy as np

from popmeter.synth import RunScenario, bandlimit, render

SCENARIOS = {
    "1 click/cycle, 30 dB, 48 kHz": RunScenario(),
    "2 clicks/cycle, 30 dB, 48 kHz": RunScenario(clicks_per_cycle=2),
    "2 clicks, reverb 0.5 s, 4 distractors, hum": RunScenario(
        clicks_per_cycle=2, reverb_rt60_s=0.5, hum_dbfs=-40.0,
        distractors=("match", "speech", "splash", "knock")),
    "1 click, 12 dB, 22.05 kHz": RunScenario(sample_rate_hz=22050, click_to_noise_db=12.0),
    "1 click, 20 dB, 96 kHz, 2 channels": RunScenario(sample_rate_hz=96000, channels=2,
                                                      click_to_noise_db=20.0),
    "1 click, 30 dB, 192 kHz": RunScenario(sample_rate_hz=192000),
}


def measured_ctn_db(x: np.ndarray, truth: dict, clean: np.ndarray | None = None) -> float:
    fs = truth["sample_rate_hz"]
    band = tuple(truth["click_band_hz"])
    y = bandlimit(x[:, truth["click_channel"]], fs, band)
    heating = next(p for p in truth["phases"] if p["name"] == "heating")
    noise = y[int(0.2 * fs):int((heating["end_s"] - 0.2) * fs)]
    if clean is not None:
        y = bandlimit(clean[:, truth["click_channel"]], fs, band)
    steady = next(p for p in truth["phases"] if p["name"] == "steady")
    peaks = [np.max(np.abs(y[c["sample"]:c["sample"] + int(0.003 * fs)]))
             for c in truth["clicks"]
             if c["kind"] == 0 and steady["start_s"] <= c["time_s"] < steady["end_s"]]
    return 20 * math.log10(float(np.median(peaks)) / float(np.sqrt(np.mean(noise**2))))


def main() -> None:
    print(f"{'scenario':46s} {'render s':>9s} {'x real time':>11s} {'clicks':>7s} "
          f"{'CNR asked':>9s} {'CNR measured':>12s} {'(clean peaks)':>13s}")
    for name, scenario in SCENARIOS.items():
        times = []
        for _ in range(3):
            t0 = time.perf_counter()
            _, truth = render(scenario)
            times.append(time.perf_counter() - t0)
        best = min(times)
        clean = scenario.replace(distractors=(), hum_dbfs=None, reverb_rt60_s=None)
        xc, tc = render(clean)
        x0, _ = render(clean.replace(click_to_noise_db=None))
        print(f"{name:46s} {best:9.3f} {scenario.duration_s / best:11.0f} "
              f"{len(truth['clicks']):7d} {scenario.click_to_noise_db:9.1f} "
              f"{measured_ctn_db(xc, tc):12.2f} {measured_ctn_db(xc, tc, x0):13.2f}")


if __name__ == "__main__":
    main()
