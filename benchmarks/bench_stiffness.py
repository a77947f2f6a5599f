"""Accuracy and speed of the diaphragm-stiffness inversion.

Units are generated from the forward model (popmeter.engine) with a known
diaphragm: thickness from 0.8 to 1.2 x nominal, every other input (tube bore
and length, span, gas volume, material constants, polytropic index) drawn
uniformly within the profile's tolerances. The "measured" rate carries normal
noise of 0.05 Hz, the ring 1 %. Each unit is inverted with rate + ring and
with the rate alone.

Targets (issue 5): stiffness within 10 % of truth and the truth inside the
90 % interval in at least 9 of 10 units; the rate-only interval contains the
truth or the estimate refuses with a reason. 20 000 draws well under a second.

Run:  python benchmarks/bench_stiffness.py [--units N] [--coverage-units M]
"""

from __future__ import annotations

import argparse
import copy
import time

import numpy as np

from popmeter import engine
from popmeter.profile import EXAMPLE_PROFILE_RAW, example_profile, parse_profile
from popmeter.stiffness import estimate_stiffness

RATE_SD_HZ = 0.05
RING_SD_FRACTION = 0.01


def true_unit(profile, rng, thickness_factor):
    nominal = engine.nominal_values(profile)
    tols = engine.tolerances(profile)
    values = {k: v + (rng.uniform(-tols[k], tols[k]) if tols[k] else 0.0) for k, v in nominal.items()}
    values["thickness_m"] = nominal["thickness_m"] * thickness_factor
    out = engine.forward(values, shape=profile.diaphragm.shape, outlet=profile.tubes.outlet,
                         wetted=profile.diaphragm.wetted)
    return float(out["rate_hz"]), float(out["ring_hz"]), 1e-9 / float(out["plate_compliance_m3_pa"])


def profiles():
    yield "demo tug: 25 mm brass circle, dry", example_profile()
    raw = copy.deepcopy(EXAMPLE_PROFILE_RAW)
    raw["diaphragm"]["wetted"] = True
    yield "demo tug, wetted diaphragm (Lamb)", parse_profile(raw)
    raw = copy.deepcopy(EXAMPLE_PROFILE_RAW)
    raw["name"] = "flat lid launch"
    raw["boiler"] = {"gas_volume_ml": 0.5, "gas_volume_ml_tol": 0.05}
    raw["diaphragm"] = {"shape": "rectangle", "width_mm": 30.0, "width_mm_tol": 0.2, "length_mm": 35.0,
                        "length_mm_tol": 0.2, "thickness_mm": 0.1, "thickness_mm_tol": 0.01,
                        "material": "tinplate"}
    yield "30 x 35 mm tinplate rectangle", parse_profile(raw)


def table(name, profile, units, seed):
    rng = np.random.default_rng(seed)
    print(f"\n== {name} ==")
    print(f"{'unit':>4} {'h/h0':>5} {'rate Hz':>8} {'ring Hz':>8} {'true K':>8} | {'est K':>8} "
          f"{'90 % interval':>17} {'err %':>6} {'in?':>4} | {'rate-only K':>11} {'90 % interval':>17} "
          f"{'in?':>4}")
    close = covered = ro_ok = ro_refused = 0
    for i, factor in enumerate(np.linspace(0.8, 1.2, units)):
        rate, ring, k_true = true_unit(profile, rng, factor)
        m_rate = rate + RATE_SD_HZ * rng.standard_normal()
        m_ring = ring * (1 + RING_SD_FRACTION * rng.standard_normal())
        est = estimate_stiffness(profile, rate_hz=m_rate, rate_sd_hz=RATE_SD_HZ, ring_hz=m_ring,
                                 ring_sd_hz=RING_SD_FRACTION * m_ring, seed=i)
        k = est.stiffness_kpa_per_ml
        err = 100 * (k.value / k_true - 1)
        inside = k.contains(k_true)
        close += abs(err) <= 10
        covered += inside
        ro = estimate_stiffness(profile, rate_hz=m_rate, rate_sd_hz=RATE_SD_HZ, seed=i)
        if ro.stiffness_kpa_per_ml is None:
            ro_refused += 1
            ro_text = f"{'refused':>11} {'(see warning)':>17} {'-':>4}"
        else:
            r = ro.stiffness_kpa_per_ml
            ro_in = r.contains(k_true)
            ro_ok += ro_in
            ro_text = f"{r.value:11.1f} {f'{r.low:.1f}-{r.high:.1f}':>17} {'yes' if ro_in else 'NO':>4}"
        print(f"{i:4d} {factor:5.2f} {m_rate:8.2f} {m_ring:8.0f} {k_true:8.1f} | {k.value:8.1f} "
              f"{f'{k.low:.1f}-{k.high:.1f}':>17} {err:+6.1f} {'yes' if inside else 'NO':>4} | {ro_text}")
    print(f"rate+ring: within 10 %: {close}/{units}; truth inside 90 % interval: {covered}/{units}")
    print(f"rate only: interval contains truth: {ro_ok}/{units - ro_refused}; refused: {ro_refused}/{units}")


def coverage(profile, units, seed):
    rng = np.random.default_rng(seed)
    counts = {"rate+ring": [0, 0, 0], "rate": [0, 0, 0]}  # covered, answered, refused
    for i in range(units):
        rate, ring, k_true = true_unit(profile, rng, rng.uniform(0.8, 1.2))
        m_rate = rate + RATE_SD_HZ * rng.standard_normal()
        m_ring = ring * (1 + RING_SD_FRACTION * rng.standard_normal())
        for method, ring_arg in (("rate+ring", m_ring), ("rate", None)):
            est = estimate_stiffness(profile, rate_hz=m_rate, rate_sd_hz=RATE_SD_HZ, ring_hz=ring_arg,
                                     ring_sd_hz=RING_SD_FRACTION * m_ring, draws=4000, seed=i)
            c = counts[method]
            if est.stiffness_kpa_per_ml is None:
                c[2] += 1
            else:
                c[1] += 1
                c[0] += est.stiffness_kpa_per_ml.contains(k_true)
    for method, (cov, ans, ref) in counts.items():
        print(f"  {method:9s}: truth inside the 90 % interval in {cov}/{ans} answered units "
              f"({100 * cov / max(ans, 1):.1f} %), refused {ref}")


def speed(profile):
    pred = engine.predict(profile)
    estimate_stiffness(profile, rate_hz=pred.rate_hz, rate_sd_hz=0.05, ring_hz=pred.ring_hz)  # warm caches
    for method, ring in (("rate+ring", pred.ring_hz), ("rate only", None)):
        times = []
        for seed in range(10):
            t0 = time.perf_counter()
            estimate_stiffness(profile, rate_hz=pred.rate_hz, rate_sd_hz=0.05, ring_hz=ring, draws=20000,
                               seed=seed)
            times.append(time.perf_counter() - t0)
        print(f"  {method:9s}: 20 000 draws in {1e3 * np.median(times):.1f} ms (median of 10), "
              f"worst {1e3 * max(times):.1f} ms")


def plate_solver() -> None:
    """Time of a fresh (uncached) rectangle solve and its agreement with Timoshenko's Table 35."""
    from popmeter import plate

    table35 = {1.0: 0.00126, 1.2: 0.00172, 1.5: 0.00220, 2.0: 0.00254}  # Timoshenko & Woinowsky-Krieger
    for cells in (12, 24, 36):
        times, errs = [], []
        for ratio, alpha in table35.items():
            plate._rectangle_coefficients.cache_clear()  # time a fresh solve
            t0 = time.perf_counter()
            c = plate.rectangle_coefficients(ratio, cells=cells)
            times.append(time.perf_counter() - t0)
            errs.append(100 * abs(c.centre_coeff / alpha - 1))
        sq = plate.rectangle_coefficients(1.0, cells=cells).lambda2[0]
        print(f"  {cells:2d} cells (+ {2 * cells} for Richardson): solve {1e3 * np.median(times):6.1f} ms "
              f"(worst {1e3 * max(times):.1f}); Table 35 worst error {max(errs):.2f} %; "
              f"square lambda^2 {sq:.3f} (Leissa 35.985)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--units", type=int, default=10, help="units per table (default 10)")
    parser.add_argument("--coverage-units", type=int, default=200,
                        help="units for the coverage check (default 200)")
    parser.add_argument("--seed", type=int, default=2026, help="random seed (default 2026)")
    args = parser.parse_args()
    print(f"measurement noise: rate sd {RATE_SD_HZ} Hz, ring sd {100 * RING_SD_FRACTION:.0f} %; "
          "K in kPa/mL; 20 000 draws per estimate")
    for k, (name, prof) in enumerate(profiles()):
        table(name, prof, args.units, args.seed + k)
    print(f"\n== coverage over {args.coverage_units} random units (thickness 0.8-1.2 x nominal) ==")
    for k, (name, prof) in enumerate(profiles()):
        print(name)
        coverage(prof, args.coverage_units, args.seed + 100 + k)
    print("\n== plate solver (rectangle, 6 modes, default 24 cells) ==")
    plate_solver()
    print("\n== speed ==")
    for name, prof in profiles():
        print(name)
        speed(prof)


if __name__ == "__main__":
    main()
