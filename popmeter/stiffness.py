"""Diaphragm stiffness from the sound: Monte Carlo inversion of the engine model, and calibration.

Data: the steady cycle rate ``f`` (with its uncertainty) and, where
measurable, the diaphragm's ring ``f_r``. Unknowns: the diaphragm (rigidity D,
hence compliance C_p and stiffness K_p = 1/C_p) and the effective gas volume
V_g. Every other input (tube bore, length, span, material constants,
polytropic index, pressure, water density) is drawn uniformly within its
profile tolerance; the measured rate and ring are drawn from normal
distributions with their standard deviations. Each draw is inverted exactly,
and the result is the median and the 5 %-95 % interval of the draws
(Monte Carlo propagation of distributions: JCGM 101:2008, *Evaluation of
measurement data -- Supplement 1*).

**Rate + ring** (``method = "rate+ring"``). The ring depends only on the
plate: ``f_r = lambda^2 / (2 pi L^2) sqrt(D / (rho_s h))`` (Leissa, NASA
SP-160), and for a given material ``D / (rho_s h) = E h^2 / (12 (1 - nu^2) rho_s)``,
so the ring gives the thickness ``h`` directly; with water on one side
Lamb's factor ``1 / sqrt(1 + 0.6689 rho_w a / (rho_s h))`` makes this a cubic
in ``h`` with one positive root. Then ``D = E h^3 / (12 (1 - nu^2))``,
``C_p`` from the outline (:mod:`popmeter.plate`), and the rate gives the gas
volume: ``C_g = 1 / ((2 pi f)^2 M) - C_p``, ``V_g = n_poly p0 C_g``. The
nominal thickness is not used: a thinner diaphragm comes out softer.

**Rate only** (``method = "rate"``, no usable ring). ``C_p = 1 / ((2 pi f)^2 M) - C_g``
with ``C_g`` from the profile's gas-volume prior. The difference of two
similar numbers is weakly determined and can be negative (no positive
compliance fits) or reach zero (stiffness unbounded above); then no value is
given, only the reason (and a lower bound where one exists).

**Calibration** (:func:`calibrate`). The lumped model ignores heat-transfer
phase lag and the non-linear snap, so its gas spring is corrected once, on
reference units whose diaphragm is known good: the one fitted correction is an
*effective polytropic index* ``n_eff`` such that the model with the nominal
diaphragm reproduces the reference units' median rate. ``C_g = V_g / (n p0)``,
so this is the same as a gas-volume factor ``1 / n_eff``.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from popmeter import engine, plate
from popmeter.errors import PopmeterError
from popmeter.profile import BoatProfile, load_profile, parse_profile, write_profile

KPA_PER_ML = 1e-9
"""1 Pa/m^3 in kPa/mL."""

DEFAULT_RING_SD_FRACTION = 0.01
"""Ring uncertainty used when none is given: 1 % of the ring frequency (common practice, no source)."""

INTERVAL_PROBABILITY = 0.90
"""Probability content of the reported intervals (5th to 95th percentile)."""


class CalibrationError(PopmeterError):
    """The reference recordings cannot calibrate the profile (no fit, or a fit outside plausible values)."""


@dataclass(frozen=True)
class Interval:
    """A median ``value`` with a 90 % interval ``[low, high]`` (same unit)."""

    value: float
    low: float
    high: float

    def to_json(self) -> dict[str, float]:
        """``{"value", "low", "high"}``."""
        return {"value": self.value, "low": self.low, "high": self.high}

    def contains(self, x: float) -> bool:
        """True when ``low <= x <= high``."""
        return self.low <= x <= self.high


def _interval(samples: np.ndarray, scale: float = 1.0) -> Interval:
    # "nearest" keeps a few infinite draws (rate only: stiffer than rigid) from turning a quantile into nan
    lo, mid, hi = np.quantile(samples, [0.05, 0.5, 0.95], method="nearest")
    return Interval(float(mid * scale), float(lo * scale), float(hi * scale))


@dataclass
class StiffnessEstimate:
    """The diaphragm as measured from one recording.

    Attributes:
        method: ``"rate+ring"``, ``"rate"``, or None when no estimate could be made.
        stiffness_kpa_per_ml: volumetric stiffness K_p = 1/C_p, kPa/mL (None: not determined).
        rigidity_mn_m: flexural rigidity D, mN m.
        thickness_mm: equivalent thickness for the profile's material, mm.
        gas_volume_ml: effective gas volume, mL (only with the ring).
        warnings: plain-language reasons and cautions.
        nominal_stiffness_kpa_per_ml: the profile's nominal stiffness (for the report).
        samples_kpa_per_ml: the Monte Carlo draws of the stiffness (None when not determined;
            rate only: draws that need a diaphragm stiffer than rigid are left out).
        nominal_thickness_mm: the profile's nominal gauge, mm.
        lower_bound_kpa_per_ml: rate only: a lower bound on the stiffness when the upper end is unbounded.
        draws: number of Monte Carlo draws.
    """

    method: str | None
    stiffness_kpa_per_ml: Interval | None
    rigidity_mn_m: Interval | None
    thickness_mm: Interval | None
    gas_volume_ml: Interval | None
    warnings: list[str]
    nominal_stiffness_kpa_per_ml: float
    samples_kpa_per_ml: np.ndarray | None = field(default=None, repr=False)
    nominal_thickness_mm: float | None = None
    lower_bound_kpa_per_ml: float | None = None
    draws: int = 0

    def to_json(self) -> dict[str, Any]:
        """The ``stiffness`` object of schema ``popmeter.analysis/1`` (null where not determined)."""

        def iv(x: Interval | None) -> dict[str, float] | None:
            return None if x is None else x.to_json()

        return {
            "method": self.method,
            "diaphragm_stiffness_kpa_per_ml": iv(self.stiffness_kpa_per_ml),
            "diaphragm_rigidity_mn_m": iv(self.rigidity_mn_m),
            "equivalent_thickness_mm": iv(self.thickness_mm),
            "gas_volume_ml": iv(self.gas_volume_ml),
            "warnings": list(self.warnings),
        }


def _draw(profile: BoatProfile, rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    """Uniform draws of every profile input within its tolerance (SI keys of engine.nominal_values)."""
    nominal = engine.nominal_values(profile)
    tols = engine.tolerances(profile)
    out: dict[str, np.ndarray] = {}
    for key, value in nominal.items():
        tol = tols[key]
        out[key] = rng.uniform(value - tol, value + tol, n) if tol > 0 else np.full(n, value)
    return out


def _thickness_from_ring(ring_hz: np.ndarray, *, lam2: np.ndarray, scale_m: np.ndarray,
                         youngs_modulus_pa: np.ndarray, poisson_ratio: np.ndarray,
                         density_kg_m3: np.ndarray, wetted: bool, equivalent_radius_m: np.ndarray,
                         water_density_kg_m3: np.ndarray) -> np.ndarray:
    """Thickness (m) whose lowest mode is ``ring_hz``, for the given material and outline.

    Dry: ``f = sqrt(k) h`` with ``k = (lambda^2 / (2 pi L^2))^2 E / (12 (1 - nu^2) rho_s)``.
    Wet (Lamb): ``k h^3 - f^2 h - f^2 Gamma rho_w a / rho_s = 0``, whose single
    positive root is found by Newton's method started to its right (the cubic
    is convex and increasing there, so the iteration decreases monotonically).
    """
    k = (lam2 / (2.0 * math.pi * scale_m**2)) ** 2 * youngs_modulus_pa / (
        12.0 * (1.0 - poisson_ratio**2) * density_kg_m3)
    f2 = ring_hz**2
    h_dry = ring_hz / np.sqrt(k)
    if not wetted:
        return h_dry
    c = f2 * plate.LAMB_GAMMA * water_density_kg_m3 * equivalent_radius_m / density_kg_m3
    h = h_dry + np.cbrt(c / k)
    for _ in range(60):
        g = k * h**3 - f2 * h - c
        step = g / (3.0 * k * h**2 - f2)
        h = h - step
        if np.all(np.abs(step) <= 1e-12 * h):
            break
    return h


def _refused(nominal_k: float, nominal_h_mm: float, warnings: list[str], draws: int,
             method: str | None = None, lower: float | None = None) -> StiffnessEstimate:
    return StiffnessEstimate(method, None, None, None, None, warnings, nominal_k, None,
                             nominal_h_mm, lower, draws)


def estimate_stiffness(profile: BoatProfile, *, rate_hz: float, rate_sd_hz: float,
                       ring_hz: float | None = None, ring_sd_hz: float | None = None,
                       draws: int = 20000, seed: int = 0) -> StiffnessEstimate:
    """Estimate the diaphragm's stiffness, rigidity, equivalent thickness and the gas volume.

    Args:
        profile: the boat profile (nominal values and tolerances; the thickness is a prior only).
        rate_hz: measured steady cycle rate, Hz.
        rate_sd_hz: standard uncertainty of that rate, Hz (e.g. from the timeline's spread).
        ring_hz: measured lowest ring of the diaphragm, Hz, wet if the profile says
            ``wetted``; None when it could not be measured (rate-only fallback).
        ring_sd_hz: its standard uncertainty, Hz; None uses 1 % of ``ring_hz``
            (common practice, no source).
        draws: Monte Carlo draws (default 20 000: the 5 % and 95 % quantiles
            then move by well under 1 % between seeds).
        seed: random seed (default 0, reproducible results).

    Returns:
        :class:`StiffnessEstimate`; values that cannot be determined are None
        with the reason in ``warnings``.
    """
    rng = np.random.default_rng(seed)
    nominal = engine.predict(profile)
    nominal_k = nominal.stiffness_kpa_per_ml
    nominal_h_mm = profile.diaphragm.thickness_m.value * 1e3
    h_tol_mm = profile.diaphragm.thickness_m.tol * 1e3
    warnings: list[str] = []

    if rate_hz is None or not math.isfinite(rate_hz) or rate_hz <= 0:
        reason = "no steady cycle rate was measured, so the diaphragm stiffness cannot be estimated"
        return _refused(nominal_k, nominal_h_mm, [reason], 0)
    rate_sd_hz = float(rate_sd_hz) if rate_sd_hz is not None and math.isfinite(rate_sd_hz) else 0.0
    rate_sd_hz = max(rate_sd_hz, 0.0)
    if ring_hz is not None and (not math.isfinite(ring_hz) or ring_hz <= 0):
        warnings.append(f"the ring frequency {ring_hz!r} is not usable; falling back to the rate alone")
        ring_hz = None

    x = _draw(profile, rng, draws)
    shape = profile.diaphragm.shape
    scale, aspect, area = engine.outline_scale(x, shape)
    vol_coeff, lam2 = engine.shape_coefficients(shape, aspect)
    inertance = engine.inertance_kg_m4(inner_diameter_m=x["inner_diameter_m"], length_m=x["tube_length_m"],
                                       count=x["count"], outlet=profile.tubes.outlet,
                                       water_density_kg_m3=x["water_density_kg_m3"])
    rate = rate_hz + rate_sd_hz * rng.standard_normal(draws)
    rate = np.maximum(rate, 1e-3 * rate_hz)
    c_total = 1.0 / ((2.0 * math.pi * rate) ** 2 * inertance)
    e, nu, rho = x["youngs_modulus_pa"], x["poisson_ratio"], x["density_kg_m3"]

    if ring_hz is not None:
        sd = ring_sd_hz if ring_sd_hz is not None and math.isfinite(ring_sd_hz) and ring_sd_hz >= 0 \
            else DEFAULT_RING_SD_FRACTION * ring_hz
        ring = np.maximum(ring_hz + sd * rng.standard_normal(draws), 1e-3 * ring_hz)
        h = _thickness_from_ring(ring, lam2=lam2[:, 0], scale_m=scale, youngs_modulus_pa=e,
                                 poisson_ratio=nu, density_kg_m3=rho, wetted=profile.diaphragm.wetted,
                                 equivalent_radius_m=np.sqrt(area / math.pi),
                                 water_density_kg_m3=x["water_density_kg_m3"])
        d = plate.flexural_rigidity(e, h, nu)
        c_p = vol_coeff * scale**6 / d
        k_kpa_ml = KPA_PER_ML / c_p
        thickness = _interval(h, 1e3)
        stiffness = _interval(k_kpa_ml)
        # thickness against the nominal gauge
        dev = thickness.value / nominal_h_mm - 1.0
        if thickness.high < nominal_h_mm - h_tol_mm or thickness.low > nominal_h_mm + h_tol_mm:
            word = "thinner" if dev < 0 else "thicker"
            text = (f"the ring implies a diaphragm {abs(dev) * 100:.0f} % {word} than the nominal "
                    f"{nominal_h_mm:.3g} mm (equivalent thickness {thickness.value:.3g} mm, 90 % interval "
                    f"{thickness.low:.3g}-{thickness.high:.3g} mm), outside the gauge tolerance")
            if abs(dev) > 0.3:
                text += ("; this is far from nominal: check the profile's material and diaphragm size, "
                         "and that the ring found is the diaphragm's")
            warnings.append(text)
        # gas volume from the rate
        c_g = c_total - c_p
        v_g = x["polytropic_index"] * x["pressure_pa"] * c_g
        negative = float(np.mean(v_g <= 0))
        gas: Interval | None
        if negative >= 0.5:
            gas = None
            warnings.append(
                f"the cycle rate ({rate_hz:.2f} Hz) is too high for the diaphragm the ring measures: no "
                f"positive gas volume fits in {negative * 100:.0f} % of the draws, so the gas volume is not "
                "given; the profile's tubes or the ring may be wrong")
        else:
            gas = _interval(v_g, 1e6)
            if negative > 0.05:
                gas = Interval(gas.value, max(gas.low, 0.0), gas.high)
                warnings.append(f"the gas volume is barely positive ({negative * 100:.0f} % of draws "
                                "negative); its lower end is set to 0 mL")
            prior = profile.boiler.gas_volume_m3
            if gas.high < (prior.value - prior.tol) * 1e6 or gas.low > (prior.value + prior.tol) * 1e6:
                warnings.append(
                    f"the effective gas volume from the rate, {gas.value:.3g} mL (90 % interval "
                    f"{gas.low:.3g}-{gas.high:.3g} mL), differs from the profile's "
                    f"{prior.value * 1e6:.3g} +- {prior.tol * 1e6:.2g} mL; the model's gas spring may "
                    "need calibration (popmeter calibrate)")
        return StiffnessEstimate("rate+ring", stiffness, _interval(d, 1e3), thickness, gas, warnings,
                                 nominal_k, k_kpa_ml, nominal_h_mm, None, draws)

    # --- rate only: the gas-volume prior takes the place of the ring ---
    c_g = engine.gas_compliance_m3_pa(gas_volume_m3=x["gas_volume_m3"], polytropic_index=x["polytropic_index"],
                                      pressure_pa=x["pressure_pa"])
    c_p = c_total - c_g
    positive = c_p > 0
    frac_pos = float(np.mean(positive))
    q05, q50, q95 = np.quantile(c_p, [0.05, 0.5, 0.95])
    prefix = "no ring was measured, so the stiffness rests on the rate and the profile's gas volume alone"
    if q50 <= 0:
        warnings.append(
            f"{prefix}, and they are inconsistent: the measured rate ({rate_hz:.2f} Hz) is higher than the "
            "tubes and gas volume of the profile allow even with a rigid diaphragm (no positive "
            f"diaphragm compliance fits in {(1 - frac_pos) * 100:.0f} % of the draws); no stiffness is given")
        return _refused(nominal_k, nominal_h_mm, warnings, draws, "rate")
    if q05 <= 0:
        lower = KPA_PER_ML / q95
        warnings.append(
            f"{prefix}, which leave it unbounded above: within the profile's tolerances the gas spring alone "
            f"can explain the rate ({(1 - frac_pos) * 100:.0f} % of draws), so only a lower bound is known: "
            f"stiffness at least {lower:.3g} kPa/mL (95 % one-sided); measure the ring or tighten the gas "
            "volume to get a value")
        return _refused(nominal_k, nominal_h_mm, warnings, draws, "rate", lower)
    # Up to 5 % of the draws may still have C_p <= 0 (a diaphragm stiffer than rigid): they count as
    # infinitely stiff, at the top of the distribution; K = 1/C_p is monotone, so its quantiles are
    # those of C_p, inverted.
    stiffness = Interval(float(KPA_PER_ML / q50), float(KPA_PER_ML / q95), float(KPA_PER_ML / q05))
    safe = np.where(positive, c_p, 1.0)
    k_kpa_ml = (KPA_PER_ML / safe)[positive]
    d = np.where(positive, vol_coeff * scale**6 / safe, np.inf)
    h = np.cbrt(12.0 * (1.0 - nu**2) * d / e)
    width_pct = 100.0 * (stiffness.high - stiffness.low) / stiffness.value
    warnings.append(f"{prefix}: weakly determined, the 90 % interval spans {width_pct:.0f} % of the value "
                    f"({stiffness.low:.3g}-{stiffness.high:.3g} kPa/mL); the gas volume is not measured")
    if not positive.all():
        warnings.append(f"{(1 - frac_pos) * 100:.2g} % of the draws need a diaphragm stiffer than rigid; "
                        "they count as infinitely stiff and are left out of the histogram samples")
    thickness = _interval(h, 1e3)
    if thickness.high < nominal_h_mm - h_tol_mm or thickness.low > nominal_h_mm + h_tol_mm:
        warnings.append(f"the rate implies an equivalent thickness of {thickness.value:.3g} mm "
                        f"({thickness.low:.3g}-{thickness.high:.3g} mm), outside the nominal "
                        f"{nominal_h_mm:.3g} +- {h_tol_mm:.2g} mm")
    return StiffnessEstimate("rate", stiffness, _interval(d, 1e3), thickness, None, warnings, nominal_k,
                             k_kpa_ml, nominal_h_mm, None, draws)


# --- calibration -------------------------------------------------------------------------


@dataclass
class CalibrationResult:
    """The fitted correction and the calibrated profile.

    Attributes:
        polytropic_index: the fitted effective polytropic index n_eff.
        polytropic_index_tol: its tolerance in the calibrated profile (the
            larger of the original tolerance and the half-range of the units' fits).
        polytropic_index_before: the profile's value before calibration.
        per_unit: n_eff fitted to each reference unit alone.
        rate_residuals_pct: each unit's measured rate minus the calibrated model's, in % of the model.
        ring_thickness_ratio: median ring-implied thickness / nominal (None without rings).
        warnings: plain-language cautions.
        profile: the calibrated :class:`BoatProfile` (``raw`` ready for :func:`write_profile`).
        comment: the header comment written with the calibrated profile.
    """

    polytropic_index: float
    polytropic_index_tol: float
    polytropic_index_before: float
    per_unit: list[float]
    rate_residuals_pct: list[float]
    ring_thickness_ratio: float | None
    warnings: list[str]
    profile: BoatProfile
    comment: str


def calibrate(profile: BoatProfile, measurements: Sequence[tuple[float, float | None]]) -> CalibrationResult:
    """Fit the model's effective polytropic index to reference units with a known-good diaphragm.

    For each unit the nominal model (nominal diaphragm, tubes, gas volume and
    pressure) is solved for the ``n_eff`` that reproduces its measured rate:
    ``n_eff = V_g / (p0 (1 / ((2 pi f)^2 M) - C_p))``. The calibrated value is
    the median over the units; its tolerance is the larger of the profile's and
    the half-range of the units' values. Rings, where given, are only checked
    against the nominal gauge (a warning if the median ring-implied thickness is
    more than 10 % off), not fitted.

    Args:
        profile: the reference units' boat profile.
        measurements: ``(rate_hz, ring_hz or None)`` per reference unit.

    Returns:
        :class:`CalibrationResult`, with the calibrated profile.

    Raises:
        CalibrationError: no measurements, a non-positive rate, a rate too high
            for the nominal diaphragm, or a fitted index outside 0.3-2.0.
    """
    if not measurements:
        raise CalibrationError("calibrate: no reference measurements given")
    rates = np.array([float(m[0]) if m[0] is not None else math.nan for m in measurements])
    if not np.all(np.isfinite(rates) & (rates > 0)):
        raise CalibrationError("calibrate: every reference unit needs a positive steady rate")
    nominal = engine.predict(profile)
    v_g = profile.boiler.gas_volume_m3.value
    p0 = profile.gas.pressure_pa.value
    c_total = 1.0 / ((2.0 * math.pi * rates) ** 2 * nominal.inertance_kg_m4)
    c_g = c_total - nominal.plate_compliance_m3_pa
    if np.any(c_g <= 0):
        bad = ", ".join(f"{r:.2f}" for r in rates[c_g <= 0])
        ceiling = engine.cycle_rate_hz(inertance_kg_m4=nominal.inertance_kg_m4,
                                       compliance_m3_pa=nominal.plate_compliance_m3_pa)
        raise CalibrationError(
            f"calibrate: rate(s) {bad} Hz exceed {float(ceiling):.2f} Hz, the most the profile's tubes allow "
            "with its nominal diaphragm and no gas at all; check the tubes and the diaphragm in the profile")
    per_unit = v_g / (p0 * c_g)
    n_eff = float(np.median(per_unit))
    if not 0.3 <= n_eff <= 2.0:
        raise CalibrationError(
            f"calibrate: the fitted effective polytropic index {n_eff:.3g} is outside 0.3-2.0; the profile's "
            "gas volume or tubes are probably wrong")
    before = profile.gas.polytropic_index.value
    tol = max(profile.gas.polytropic_index.tol, 0.5 * float(per_unit.max() - per_unit.min()))
    tol = min(tol, 0.9 * n_eff)
    calibrated_pred = engine.predict(profile, polytropic_index=n_eff)
    residuals = [float(100.0 * (r / calibrated_pred.rate_hz - 1.0)) for r in rates]
    warnings: list[str] = []
    if len(measurements) < 5:  # the README asks for 5 or more reference units
        warnings.append(f"only {len(measurements)} reference unit(s); 5 or more give a steadier correction")

    ratio: float | None = None
    rings = [m[1] for m in measurements if m[1] is not None and math.isfinite(m[1]) and m[1] > 0]
    if rings:
        geo = engine.plate_geometry(profile)
        dia = profile.diaphragm
        h = _thickness_from_ring(np.asarray(rings, dtype=float), lam2=np.asarray(geo.coeffs.lambda2[0]),
                                 scale_m=np.asarray(geo.scale_m),
                                 youngs_modulus_pa=np.asarray(dia.youngs_modulus_pa.value),
                                 poisson_ratio=np.asarray(dia.poisson_ratio.value),
                                 density_kg_m3=np.asarray(dia.density_kg_m3.value), wetted=dia.wetted,
                                 equivalent_radius_m=np.asarray(geo.equivalent_radius_m),
                                 water_density_kg_m3=np.asarray(profile.water.density_kg_m3.value))
        ratio = float(np.median(h) / dia.thickness_m.value)
        if abs(ratio - 1.0) > 0.10:
            warnings.append(
                f"the reference units' ring implies a thickness {ratio:.2f} x nominal; either these diaphragms "
                "are not nominal or the material constants/clamping differ from the profile, and stiffness "
                "from the ring will be off by about a factor "
                f"{ratio**3:.2f}")

    raw = copy.deepcopy(profile.raw) if profile.raw else {}
    gas = dict(raw.get("gas", {}))
    gas["polytropic_index"] = round(n_eff, 4)
    gas["polytropic_index_tol"] = round(tol, 4)
    raw["gas"] = gas
    spread = float(np.max(np.abs(residuals))) if residuals else 0.0
    raw["calibration"] = {
        "method": "effective polytropic index fitted to reference units' steady rates",
        "reference_units": len(measurements),
        "polytropic_index_before": before,
        "rate_spread_pct": round(spread, 3),
    }
    comment = (f"Calibrated by popmeter from {len(measurements)} reference unit(s) with a known-good diaphragm.\n"
               f"Fitted: [gas] polytropic_index {before:g} -> {n_eff:.4g} (tolerance {tol:.3g}), the median of the\n"
               "per-unit values that make the model reproduce each unit's steady rate.")
    calibrated = parse_profile(raw, source=profile.source)
    return CalibrationResult(n_eff, tol, before, [float(v) for v in per_unit], residuals, ratio, warnings,
                             calibrated, comment)


def calibrate_files(files: Sequence[str | Path], *, boat: str | Path, out: str | Path) -> CalibrationResult:
    """Analyse reference recordings, fit the correction, and write the calibrated profile copy.

    Each file is analysed with :func:`popmeter.analysis.analyze_file` (without
    the profile); its steady rate and ring feed :func:`calibrate`. Files without
    a steady rate are skipped with a note.

    Args:
        files: recordings of reference units.
        boat: their boat profile (TOML).
        out: where to write the calibrated copy (TOML, with a comment saying what was fitted).

    Raises:
        ProfileError: the profile is invalid.
        CalibrationError: no usable recording, or no acceptable fit.
    """
    from rich.console import Console
    from rich.table import Table

    from popmeter.analysis import analyze_file

    profile = load_profile(boat)
    console = Console()
    measurements: list[tuple[float, float | None]] = []
    used: list[str] = []
    for path in files:
        analysis = analyze_file(path, boat=None)
        rate = analysis.timeline.summary.get("steady_rate_hz")
        ring = getattr(analysis.detection, "ring_hz", None)
        if rate is None or not math.isfinite(rate) or rate <= 0:
            console.print(f"{path}: no steady rate found; skipped")
            continue
        measurements.append((float(rate), None if ring is None else float(ring)))
        used.append(str(path))
    if not measurements:
        raise CalibrationError("calibrate: none of the recordings has a steady rate")
    result = calibrate(profile, measurements)
    write_profile(result.profile, out, comment=result.comment)

    table = Table(title=f"Calibration of {profile.name}", title_justify="left")
    table.add_column("recording")
    table.add_column("rate Hz", justify="right")
    table.add_column("ring Hz", justify="right")
    table.add_column("n_eff", justify="right")
    table.add_column("residual", justify="right")
    for name, (rate, ring), n, res in zip(used, measurements, result.per_unit, result.rate_residuals_pct):
        table.add_row(Path(name).name, f"{rate:.2f}", "-" if ring is None else f"{ring:.0f}", f"{n:.3f}",
                      f"{res:+.1f} %")
    console.print(table)
    console.print(f"polytropic index {result.polytropic_index_before:g} -> {result.polytropic_index:.4g} "
                  f"+- {result.polytropic_index_tol:.3g}; written to {out}")
    for w in result.warnings:
        console.print(f"warning: {w}")
    return result
