"""Synthetic test-tank recordings with exact ground truth.

The generator is physically grounded rather than a click track:

* every click rings at the diaphragm's plate modes (from a boat profile through
  :func:`popmeter.engine.predict`, or given directly), with a fast attack, an
  exponential decay per mode, decreasing mode amplitudes and a slight
  per-click variation of level and ring frequency;
* the run follows the phases of a real test-tank run: **heating** (no clicks),
  **startup** (rising, irregular rate, weak and missed pops), **steady**
  (rate from the engine model, small jitter and drift), **fade** (falling rate
  and level, stalls) and **after** (silence after the flame-out);
* one or two clicks per cycle; the second click of a two-click engine is
  weaker, decays faster and has different mode weights;
* the background is pink (or white) noise at a chosen click-to-noise ratio,
  optional mains hum, a synthetic room impulse response, and other transients
  (a match strike, speech-like babble, a splash, a knock on the tank) -- all
  synthesised, no recordings are used.

Definitions used throughout (and written into the ground truth):

**Click onset.**  A click starting at integer sample ``n0`` is exactly zero
before ``n0`` and non-zero from ``n0`` on: ``n0`` is the first sample of the
attack.  ``time_s = n0 / sample_rate_hz`` exactly.

**Click-to-noise ratio** (``click_to_noise_db``).  ``20 log10(P / R)`` where
``P`` is the peak absolute value of the nominal steady-state main click (before
per-click variation, before reverberation) and ``R`` the RMS of the stationary
background noise (pink/white, *not* the hum and not the distractors), both
band-limited to the click band ``click_band_hz`` = [0.5 x lowest mode,
min(1.5 x highest mode used, 0.45 x sample rate)] with an ideal (FFT
brick-wall) filter.  It is measured on the click channel.

**Cycle.**  One oscillation of the engine.  ``cycle_starts_s`` lists every
cycle the engine made, including those whose pop was missed in startup; the
main click (kind 0) of a cycle sits exactly at its start, the second click
(kind 1) of a two-click engine at ``second_click_delay`` x the local nominal
period after it.

The rendering is vectorised per click (each click is a short array added by
slicing); a 60 s, 48 kHz mono recording renders in well under a second.
Randomness comes from ``numpy.random.SeedSequence(seed)`` split into
independent streams (cycle timing, click variation, noise, distractors, room),
so two scenarios differing only in noise level share the same click times.
"""

from __future__ import annotations

import dataclasses
import json
import math
import textwrap
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from scipy import signal

from popmeter.audio_io import write_audio
from popmeter.errors import InputError, UsageError

TRUTH_SCHEMA = "popmeter.truth/1"
DISTRACTOR_KINDS = ("match", "speech", "splash", "knock")

# Clamped circular plate, lambda^2 of the first four modes with a nodal pattern
# that a uniform pressure snap excites or that couples to it (Leissa,
# Vibration of Plates, NASA SP-160, 1969): (0,0), (1,0), (2,0), (0,1).
CLAMPED_CIRCLE_LAMBDA2 = (10.2158, 21.2604, 34.8770, 39.7711)

# 60 dB of amplitude decay = factor 1000 = exp(6.9078).
_LN_1000 = math.log(1000.0)


@dataclass(frozen=True)
class Distractor:
    """A transient that is not a diaphragm click.

    Attributes
    ----------
    kind : str
        ``"match"`` (match strike: scratch then flare hiss, ~0.6 s),
        ``"speech"`` (speech-like babble: formant-filtered glottal pulse
        trains, ~1.5-3 s), ``"splash"`` (water splash: noise burst with
        bubble tones, ~0.3 s), ``"knock"`` (a knuckle on the tank: a low,
        fast-decaying thud, ~0.1 s).
    time_s : float or None
        Start time in seconds; ``None`` (default) draws a random time within
        the recording (seeded).
    level_db : float or None
        Peak level relative to the nominal main-click peak, in dB; ``None``
        uses the kind's default (match 0, speech -3, splash 0, knock +3 dB:
        loud enough to tempt a detector).
    """

    kind: str
    time_s: float | None = None
    level_db: float | None = None


_DEFAULT_DISTRACTOR_LEVEL_DB = {"match": 0.0, "speech": -3.0, "splash": 0.0, "knock": 3.0}


@dataclass(frozen=True)
class RunScenario:
    """Everything that defines one synthetic recording.  SI units.

    Timing of the run (seconds from the start of the recording):

    * ``heating_s`` = 4.0: heating phase, no clicks.
    * ``startup_s`` = 8.0: startup phase length.
    * ``steady_s`` = None: steady phase length; ``None`` derives it as
      ``duration_s - heating_s - startup_s - fade_s - after_s``.
    * ``fade_s`` = 8.0: fade phase length.
    * ``after_s`` = 3.0: silence after the last click (used when ``steady_s``
      is ``None``; otherwise the remainder of ``duration_s``).

    Recording: ``sample_rate_hz`` = 48000, ``duration_s`` = 60.0,
    ``channels`` = 1, ``click_channel`` = 0 (the channel with the requested
    click-to-noise ratio; every other channel hears the clicks
    ``other_channel_loss_db`` = 6 dB quieter, plus 3 dB per channel further
    away, over its own independent noise).

    Rate (cycles per second):

    * ``steady_rate_hz`` = 12.0: rate at the start of the steady phase.
    * ``startup_rate_frac`` = 0.45: rate at the first startup cycle as a
      fraction of the steady rate; it rises as 1 - (1 - u)^2 (u: fraction of
      startup elapsed) to the steady rate.
    * ``startup_jitter_pct`` = 8.0: cycle-to-cycle period scatter (1 sd, %)
      in startup -- the irregular start.
    * ``jitter_pct`` = 0.8: period scatter (1 sd, %) in steady running.
    * ``drift_pct_per_min`` = -1.0: linear rate drift during steady running.
    * ``fade_rate_frac`` = 0.55: rate at the end of the fade as a fraction of
      the rate at the end of steady running (falls as u^1.5).
    * ``fade_jitter_pct`` = 3.0: period scatter at the end of the fade
      (rises linearly from ``jitter_pct``).
    * ``never_settles`` = False: replace steady running by a wandering rate
      (``wander_pct`` = 15 % slow modulation plus ``startup_jitter_pct``
      scatter); the truth then has no steady phase.
    * ``start_mid_run`` = False: the recording starts during steady running
      (no heating, no startup).
    * ``end_mid_run`` = False: the recording ends during steady running (no
      fade, no after).
    * ``never_starts`` = False: the engine never starts: the whole recording
      is heating (background only, no click).

    Startup pops: ``missed_pop_prob`` = 0.12 (probability that a startup
    cycle makes no click; the first never is), ``weak_pop_prob`` = 0.2
    (probability of an extra 6-18 dB weaker pop), ``startup_level_db`` = -12
    (level of the first pops relative to steady; rises linearly).

    Fade: ``fade_level_db`` = -18 (level at the end of the fade, linear in dB),
    ``stalls`` = 0 (gaps during the first 80 % of the fade),
    ``stall_periods`` = (3.0, 6.0) (range of a stall's length in local
    periods).

    Clicks:

    * ``clicks_per_cycle`` = 1 (or 2).
    * ``click_level_dbfs`` = -12.0: peak of the nominal steady main click.
    * ``click_level_sd_db`` = 0.5: per-click level scatter (1 sd).
    * ``ring_modes_hz`` = 1200 Hz x the clamped-circle ratios
      (1, 2.081, 3.414, 3.893): plate mode frequencies; modes at or above
      0.45 x ``sample_rate_hz`` are dropped (and reported).
    * ``ring_mode_amplitudes`` = (1, 0.45, 0.25, 0.15): relative amplitudes.
    * ``ring_mode_decay_s`` = (0.010, 0.006, 0.004, 0.003): 1/e decay times.
    * ``ring_freq_sd_pct`` = 0.3: per-click ring frequency scatter (1 sd, %).
    * ``attack_s`` = 0.0003: raised-cosine rise of the ring envelope.
    * ``snap_amplitude`` = 0.35, ``snap_time_s`` = 0.0001: the broadband
      snap at the onset, a gamma pulse (t/T) exp(1 - t/T) relative to the
      ring amplitude.
    * ``second_click_delay`` = 0.45: second click after this fraction of the
      local nominal period.
    * ``second_click_level_db`` = -6.0, ``second_click_mode_amplitudes`` =
      (0.5, 1.0, 0.6, 0.4), ``second_click_decay_factor`` = 0.5: the second
      click is weaker, brighter and shorter.

    Background:

    * ``click_to_noise_db`` = 30.0 (definition in the module docstring);
      ``None`` for no noise at all.
    * ``noise_colour`` = "pink" ("pink": 1/f power above 20 Hz; "white").
    * ``hum_hz`` = 50.0 and ``hum_dbfs`` = None (no hum): RMS level of the
      mains hum (fundamental plus 2nd and 3rd harmonics).
    * ``reverb_rt60_s`` = None (dry): room reverberation time; the room
      impulse response is exponentially decaying Gaussian noise after
      ``reverb_predelay_s`` = 0.003 s, with ``reverb_drr_db`` = 3.0
      direct-to-reverberant energy ratio.  Clicks and distractors are
      reverberated; electrical noise and hum are not.
    * ``wall_delay_s`` = None (no wall): a hard wall near the tank answers
      every click and distractor once, this much later (the extra path over
      the speed of sound, about 343 m/s at 20 C, from memory: 2 m more is
      5.8 ms), ``wall_level_db`` = -10.0 dB down (one specular reflection,
      unfiltered; with reverberation, reverberated too).
    * ``distractors`` = (): :class:`Distractor` items (or kind names).

    ``seed`` = 0: the random seed.
    """

    sample_rate_hz: int = 48000
    duration_s: float = 60.0
    channels: int = 1
    click_channel: int = 0
    other_channel_loss_db: float = 6.0
    heating_s: float = 4.0
    startup_s: float = 8.0
    steady_s: float | None = None
    fade_s: float = 8.0
    after_s: float = 3.0
    steady_rate_hz: float = 12.0
    startup_rate_frac: float = 0.45
    startup_jitter_pct: float = 8.0
    jitter_pct: float = 0.8
    drift_pct_per_min: float = -1.0
    fade_rate_frac: float = 0.55
    fade_jitter_pct: float = 3.0
    never_settles: bool = False
    wander_pct: float = 15.0
    start_mid_run: bool = False
    end_mid_run: bool = False
    never_starts: bool = False
    missed_pop_prob: float = 0.12
    weak_pop_prob: float = 0.2
    startup_level_db: float = -12.0
    fade_level_db: float = -18.0
    stalls: int = 0
    stall_periods: tuple[float, float] = (3.0, 6.0)
    clicks_per_cycle: int = 1
    click_level_dbfs: float = -12.0
    click_level_sd_db: float = 0.5
    ring_modes_hz: tuple[float, ...] = tuple(
        1200.0 * lam / CLAMPED_CIRCLE_LAMBDA2[0] for lam in CLAMPED_CIRCLE_LAMBDA2
    )
    ring_mode_amplitudes: tuple[float, ...] = (1.0, 0.45, 0.25, 0.15)
    ring_mode_decay_s: tuple[float, ...] = (0.010, 0.006, 0.004, 0.003)
    ring_freq_sd_pct: float = 0.3
    attack_s: float = 0.0003
    snap_amplitude: float = 0.35
    snap_time_s: float = 0.0001
    second_click_delay: float = 0.45
    second_click_level_db: float = -6.0
    second_click_mode_amplitudes: tuple[float, ...] = (0.5, 1.0, 0.6, 0.4)
    second_click_decay_factor: float = 0.5
    click_to_noise_db: float | None = 30.0
    noise_colour: str = "pink"
    hum_hz: float = 50.0
    hum_dbfs: float | None = None
    reverb_rt60_s: float | None = None
    reverb_predelay_s: float = 0.003
    reverb_drr_db: float = 3.0
    wall_delay_s: float | None = None
    wall_level_db: float = -10.0
    distractors: tuple[Distractor | str, ...] = field(default_factory=tuple)
    seed: int = 0

    def __post_init__(self) -> None:
        # kind names become Distractor items; lists become tuples (hashable, comparable)
        items = tuple(Distractor(d) if isinstance(d, str) else d for d in self.distractors)
        object.__setattr__(self, "distractors", items)
        for name in ("ring_modes_hz", "ring_mode_amplitudes", "ring_mode_decay_s",
                     "second_click_mode_amplitudes", "stall_periods"):
            object.__setattr__(self, name, tuple(getattr(self, name)))

    def replace(self, **changes: Any) -> RunScenario:
        """A copy with some fields changed (``dataclasses.replace``)."""
        return dataclasses.replace(self, **changes)


# --------------------------------------------------------------------------
# validation and phase plan


def _check(scenario: RunScenario) -> None:
    s = scenario
    problems: list[str] = []
    if not 4000 <= s.sample_rate_hz <= 384000:
        problems.append(f"sample_rate_hz={s.sample_rate_hz} outside 4000-384000")
    if s.duration_s <= 0:
        problems.append(f"duration_s={s.duration_s} must be positive")
    if s.channels < 1:
        problems.append(f"channels={s.channels} must be at least 1")
    if not 0 <= s.click_channel < s.channels:
        problems.append(f"click_channel={s.click_channel} not among {s.channels} channels")
    if s.clicks_per_cycle not in (1, 2):
        problems.append(f"clicks_per_cycle={s.clicks_per_cycle} must be 1 or 2")
    if s.steady_rate_hz <= 0:
        problems.append(f"steady_rate_hz={s.steady_rate_hz} must be positive")
    if not (len(s.ring_modes_hz) == len(s.ring_mode_amplitudes) == len(s.ring_mode_decay_s)):
        problems.append("ring_modes_hz, ring_mode_amplitudes, ring_mode_decay_s differ in length")
    if not s.ring_modes_hz or min(s.ring_modes_hz) >= 0.45 * s.sample_rate_hz:
        problems.append(
            f"lowest ring mode {min(s.ring_modes_hz, default=0):.0f} Hz is not below "
            f"0.45 x sample rate ({0.45 * s.sample_rate_hz:.0f} Hz)"
        )
    if not 0.05 <= s.second_click_delay <= 0.95:
        problems.append(f"second_click_delay={s.second_click_delay} must be in 0.05-0.95")
    if s.wall_delay_s is not None and not 0 < s.wall_delay_s < s.duration_s:
        problems.append(f"wall_delay_s={s.wall_delay_s} must be positive and shorter than "
                        "the recording")
    if s.wall_delay_s is not None and not s.wall_level_db < 0:
        problems.append(f"wall_level_db={s.wall_level_db} must be negative (a reflection is "
                        "quieter than the sound)")
    if s.noise_colour not in ("pink", "white"):
        problems.append(f"noise_colour={s.noise_colour!r} must be 'pink' or 'white'")
    for name in ("heating_s", "startup_s", "fade_s", "after_s"):
        if getattr(s, name) < 0:
            problems.append(f"{name} must not be negative")
    for d in s.distractors:
        kind = d if isinstance(d, str) else d.kind
        if kind not in DISTRACTOR_KINDS:
            problems.append(f"unknown distractor {kind!r} (known: {', '.join(DISTRACTOR_KINDS)})")
    if problems:
        raise UsageError("scenario: " + "; ".join(problems))


def _phase_plan(s: RunScenario) -> dict[str, float]:
    """Nominal phase boundaries (seconds) of the engine's run."""
    heating = 0.0 if s.start_mid_run else s.heating_s
    startup = 0.0 if s.start_mid_run else s.startup_s
    t_start = heating
    t_steady = t_start + startup
    if s.end_mid_run:  # steady running past the end of the recording
        if t_steady >= s.duration_s:
            raise UsageError(f"scenario: heating + startup ({t_steady:g} s) leave no running "
                             f"time in duration_s={s.duration_s:g}")
        return {"start": t_start, "steady": t_steady, "fade": math.inf, "end": math.inf}
    if s.steady_s is None:
        steady = s.duration_s - heating - startup - s.fade_s - s.after_s
    else:
        steady = s.steady_s
    t_fade = t_steady + steady
    t_end = t_fade + s.fade_s
    if steady < 0 or t_end > s.duration_s:
        raise UsageError(
            f"scenario: phases (heating {heating:g} + startup {startup:g} + steady "
            f"{steady:g} + fade {s.fade_s:g} s) do not fit in duration_s={s.duration_s:g}"
        )
    return {"start": t_start, "steady": t_steady, "fade": t_fade, "end": t_end}


# --------------------------------------------------------------------------
# engine cycles


@dataclass
class _Cycle:
    time_s: float
    sample: int
    period_nominal_s: float
    phase: str
    level_db: float  # relative to the nominal steady click
    missed: bool = False
    weak: bool = False


def _generate_cycles(
    s: RunScenario, plan: dict[str, float], rng: np.random.Generator
) -> tuple[list[_Cycle], list[tuple[int, int]]]:
    """Engine cycles from the rate plan; returns cycles and stall (i, i+1) pairs."""
    fs = s.sample_rate_hz
    f_ss = s.steady_rate_hz
    t_start, t_steady, t_fade, t_end = plan["start"], plan["steady"], plan["fade"], plan["end"]
    wander_phase = rng.uniform(0, 2 * np.pi, size=2)

    def steady_rate(t: float) -> float:
        if s.never_settles:
            x = t - t_start
            wobble = 0.7 * np.sin(2 * np.pi * x / 6.0 + wander_phase[0]) + 0.3 * np.sin(
                2 * np.pi * x / 2.3 + wander_phase[1]
            )
            return f_ss * (1.0 + s.wander_pct / 100.0 * wobble)
        return f_ss * (1.0 + s.drift_pct_per_min / 100.0 * (t - t_steady) / 60.0)

    # stall positions: spread over the first 80 % of the fade
    stall_times: list[float] = []
    if s.stalls > 0 and not s.end_mid_run and s.fade_s > 0:
        slots = (np.arange(s.stalls) + 0.5 + rng.uniform(-0.3, 0.3, s.stalls)) / s.stalls
        stall_times = sorted(t_fade + 0.8 * s.fade_s * slots)

    cycles: list[_Cycle] = []
    stall_pairs: list[tuple[int, int]] = []
    if s.never_starts:
        return cycles, stall_pairs
    t = t_start
    if s.start_mid_run:
        t = rng.uniform(0.0, 1.0 / f_ss)
    limit_s = min(t_end, s.duration_s)
    while t < limit_s:
        if t < t_steady:
            u = (t - t_start) / max(t_steady - t_start, 1e-9)
            target = steady_rate(t_steady) if not s.never_settles else steady_rate(t)
            rate = target * (s.startup_rate_frac + (1 - s.startup_rate_frac) * (1 - (1 - u) ** 2))
            jitter = s.startup_jitter_pct
            level = s.startup_level_db * (1 - u)
            phase = "startup"
        elif t < t_fade:
            rate = steady_rate(t)
            jitter = s.startup_jitter_pct if s.never_settles else s.jitter_pct
            level = 0.0
            phase = "steady"
        else:
            u = (t - t_fade) / max(t_end - t_fade, 1e-9)
            rate = steady_rate(t_fade) * (1 - (1 - s.fade_rate_frac) * u**1.5)
            jitter = s.jitter_pct + (s.fade_jitter_pct - s.jitter_pct) * u
            level = s.fade_level_db * u
            phase = "fade"
        nominal = 1.0 / rate
        sample = round(t * fs)
        cyc = _Cycle(time_s=sample / fs, sample=sample, period_nominal_s=nominal, phase=phase,
                     level_db=level)
        if phase == "startup" and cycles:
            cyc.missed = bool(rng.random() < s.missed_pop_prob)
            if not cyc.missed and rng.random() < s.weak_pop_prob:
                cyc.weak = True
                cyc.level_db -= rng.uniform(6.0, 18.0)
        cycles.append(cyc)
        period = nominal * max(0.3, 1.0 + jitter / 100.0 * rng.standard_normal())
        if stall_times and t >= stall_times[0]:
            stall_times.pop(0)
            period = nominal * rng.uniform(*s.stall_periods)
            stall_pairs.append((len(cycles) - 1, len(cycles)))
        t = t + period
    # the run must not end in a missed pop: the last startup cycles only matter
    # when the run is all startup; the fade has no missed pops.
    # stalls whose end lies past the run are not gaps but the end of the run
    stall_pairs = [(a, b) for a, b in stall_pairs if b < len(cycles)]
    return cycles, stall_pairs


# --------------------------------------------------------------------------
# click waveforms


# each mode is rendered until it has decayed by 70 dB (ln(10^3.5) = 8.06 time constants)
_MODE_SPAN_TAU = 3.5 * math.log(10.0)


class _ClickShape:
    """A click family (main or second): per-mode envelopes precomputed once.

    The click at sample i (i = 0, 1, ...) is evaluated at t = (i + 1) / fs so
    that its first sample is non-zero (the onset definition):

        x(t) = rise(t) sum_k a_k exp(-t / tau_k) sin(2 pi s f_k t) + snap(t)

    with the raised-cosine rise over ``attack_s``, the frequency scale ``s``
    drawn per click, and the snap ``A (t/T) exp(1 - t/T)``.  Normalised so
    that the nominal click (s = 1) peaks at 1.0.
    """

    def __init__(self, sc: RunScenario, freqs_hz: np.ndarray, amps: np.ndarray,
                 decays_s: np.ndarray):
        fs = sc.sample_rate_hz
        self.freqs_hz = np.asarray(freqs_hz, dtype=float)
        spans = [math.ceil((_MODE_SPAN_TAU * d + sc.attack_s) * fs) + 1 for d in decays_s]
        n_snap = math.ceil(_MODE_SPAN_TAU * 1.5 * sc.snap_time_s * fs) + 1  # 70 dB down too
        self.length = max(max(spans), n_snap)
        self.t = np.arange(1, self.length + 1) / fs
        rise = np.where(self.t < sc.attack_s,
                        0.5 * (1.0 - np.cos(np.pi * self.t / sc.attack_s)), 1.0)
        self.envelopes = [a * rise[:m] * np.exp(-self.t[:m] / d)
                          for a, d, m in zip(amps, decays_s, spans)]
        x = self.t[:n_snap] / sc.snap_time_s
        self.snap = sc.snap_amplitude * x * np.exp(1.0 - x)
        self.norm = 1.0
        self.norm = 1.0 / float(np.max(np.abs(self.wave(1.0, self.length))))

    def wave(self, freq_scale: float, frames: int) -> np.ndarray:
        """The first ``frames`` samples of a click with ring frequencies x ``freq_scale``."""
        out = np.zeros(frames)
        for f, env in zip(self.freqs_hz, self.envelopes):
            m = min(len(env), frames)
            out[:m] += env[:m] * np.sin((2 * np.pi * f * freq_scale) * self.t[:m])
        m = min(len(self.snap), frames)
        out[:m] += self.snap[:m]
        return out * self.norm


def _band(s: RunScenario, modes_hz: np.ndarray) -> tuple[float, float]:
    lo = 0.5 * float(modes_hz[0])
    hi = min(1.5 * float(modes_hz[-1]), 0.45 * s.sample_rate_hz)
    return lo, hi


def bandlimit(x: np.ndarray, sample_rate_hz: float, band_hz: tuple[float, float]) -> np.ndarray:
    """Ideal (FFT brick-wall) band-pass used by the click-to-noise definition.

    Parameters
    ----------
    x : np.ndarray
        1-D signal.
    sample_rate_hz : float
        Sample rate in Hz.
    band_hz : (float, float)
        Pass band in Hz; bins outside are zeroed.

    Returns
    -------
    np.ndarray
        The band-limited signal (float64, same length).
    """
    spec = np.fft.rfft(np.asarray(x, dtype=np.float64))
    f = np.fft.rfftfreq(len(x), 1.0 / sample_rate_hz)
    spec[(f < band_hz[0]) | (f > band_hz[1])] = 0.0
    return np.fft.irfft(spec, n=len(x))


# --------------------------------------------------------------------------
# noise, hum, room


def _noise(n: int, fs: int, colour: str, band: tuple[float, float], rms_in_band: float,
           rng: np.random.Generator) -> np.ndarray:
    spec = rng.standard_normal(n // 2 + 1) + 1j * rng.standard_normal(n // 2 + 1)
    f = np.fft.rfftfreq(n, 1.0 / fs)
    if colour == "pink":
        shape = np.zeros_like(f)
        ok = f >= 20.0
        shape[ok] = 1.0 / np.sqrt(f[ok])
        spec *= shape
    else:
        spec[0] = 0.0
    spec[-1] = spec[-1].real if n % 2 == 0 else spec[-1]
    # Parseval: power of the band-limited part, for exact in-band scaling
    inband = (f >= band[0]) & (f <= band[1])
    weight = np.full(len(f), 2.0)
    weight[0] = 1.0
    if n % 2 == 0:
        weight[-1] = 1.0
    power = float(np.sum(weight[inband] * np.abs(spec[inband]) ** 2)) / n**2
    spec *= rms_in_band / math.sqrt(power)
    return np.fft.irfft(spec, n=n)


def _hum(n: int, fs: int, hum_hz: float, rms: float, rng: np.random.Generator) -> np.ndarray:
    t = np.arange(n) / fs
    harmonics = ((1, 1.0), (2, 0.35), (3, 0.5))
    x = np.zeros(n)
    wobble = 1.0 + 0.05 * np.sin(2 * np.pi * 0.13 * t + rng.uniform(0, 2 * np.pi))
    for k, a in harmonics:
        if k * hum_hz < 0.45 * fs:
            x += a * np.sin(2 * np.pi * k * hum_hz * t + rng.uniform(0, 2 * np.pi))
    x *= wobble
    return x * (rms / max(float(np.sqrt(np.mean(x**2))), 1e-30))


def room_impulse_response(
    *, sample_rate_hz: int, rt60_s: float, predelay_s: float = 0.003, drr_db: float = 3.0,
    rng: np.random.Generator,
) -> np.ndarray:
    """Synthetic room impulse response: direct sound plus exponential noise tail.

    The tail is Gaussian noise under the envelope ``exp(-ln(1000) t / rt60_s)``
    (amplitude falls by 60 dB in ``rt60_s``, Sabine's definition of the
    reverberation time), starting ``predelay_s`` after the direct sound and
    lasting ``1.2 rt60_s``.  It is scaled so that the direct-to-reverberant
    energy ratio is ``drr_db``.  Sample 0 is the direct sound (1.0), so click
    onsets are not moved.

    Parameters
    ----------
    sample_rate_hz : int
        Sample rate in Hz.
    rt60_s : float
        Reverberation time in seconds (a small tiled room: 0.3-0.8 s).
    predelay_s : float
        Delay of the first reflection in seconds (default 3 ms: ~1 m path).
    drr_db : float
        Direct-to-reverberant energy ratio in dB (default 3 dB: a microphone
        near the tank).
    rng : numpy.random.Generator
        Random source.

    Returns
    -------
    np.ndarray
        The impulse response (float64).
    """
    fs = sample_rate_hz
    n_pre = round(predelay_s * fs)
    n_tail = max(1, round(1.2 * rt60_s * fs))
    t = np.arange(n_tail) / fs
    tail = rng.standard_normal(n_tail) * np.exp(-_LN_1000 * t / rt60_s)
    tail *= math.sqrt(10 ** (-drr_db / 10.0) / float(np.sum(tail**2)))
    h = np.zeros(n_pre + n_tail)
    h[0] = 1.0
    h[n_pre:] += tail
    return h


# --------------------------------------------------------------------------
# distractors (all synthesised)


def _resonator(x: np.ndarray, fs: float, f_hz: float, bw_hz: float) -> np.ndarray:
    r = math.exp(-math.pi * bw_hz / fs)
    theta = 2 * math.pi * f_hz / fs
    b = [1.0 - r]
    a = [1.0, -2 * r * math.cos(theta), r * r]
    return signal.lfilter(b, a, x)


_VOWEL_FORMANTS_HZ = (  # typical adult formants F1-F3 (from memory)
    (730, 1090, 2440), (270, 2290, 3010), (300, 870, 2240), (530, 1840, 2480), (570, 840, 2410),
)


def _speech(fs: int, rng: np.random.Generator) -> np.ndarray:
    dur = rng.uniform(1.5, 3.0)
    n = int(dur * fs)
    out = np.zeros(n)
    pos = 0
    f0 = rng.uniform(100, 210)
    while pos < n:
        syl = int(rng.uniform(0.12, 0.3) * fs)
        gap = int(rng.uniform(0.03, 0.15) * fs)
        m = min(syl, n - pos)
        if m <= 10:
            break
        t = np.arange(m) / fs
        pitch = f0 * (1 + 0.08 * np.sin(2 * np.pi * rng.uniform(2, 5) * t)) * rng.uniform(0.9, 1.1)
        phase = np.cumsum(pitch / fs)
        pulses = np.diff(np.floor(phase), prepend=0.0)  # one unit pulse per glottal period
        src = pulses + 0.02 * rng.standard_normal(m)  # a little breath
        formants = _VOWEL_FORMANTS_HZ[rng.integers(len(_VOWEL_FORMANTS_HZ))]
        voiced = np.zeros(m)
        for k, fmt in enumerate(formants):
            if fmt < 0.45 * fs:
                voiced += (0.6**k) * _resonator(src, fs, fmt, 80 + 40 * k)
        env = np.sin(np.pi * np.arange(m) / m) ** 0.7  # syllable envelope, no sharp edges
        out[pos:pos + m] += voiced * env
        pos += syl + gap
    return out


def _match(fs: int, rng: np.random.Generator) -> np.ndarray:
    n_scratch = int(0.12 * fs)
    n_flare = int(rng.uniform(0.4, 0.7) * fs)
    scratch = rng.standard_normal(n_scratch)
    scratch = signal.sosfilt(signal.butter(2, [min(1500, 0.4 * fs), min(6000, 0.45 * fs)],
                                           "bandpass", fs=fs, output="sos"), scratch)
    rough = np.abs(signal.sosfilt(signal.butter(2, 80, fs=fs, output="sos"),
                                  rng.standard_normal(n_scratch)))
    scratch *= rough / (np.max(rough) + 1e-12) * np.hanning(n_scratch)
    t = np.arange(n_flare) / fs
    flare = rng.standard_normal(n_flare) * (1 - np.exp(-t / 0.01)) * np.exp(-t / 0.25)
    flare = signal.sosfilt(signal.butter(2, min(2500, 0.4 * fs), "highpass", fs=fs,
                                         output="sos"), flare) * 0.6
    return np.concatenate([scratch, flare])


def _splash(fs: int, rng: np.random.Generator) -> np.ndarray:
    n = int(rng.uniform(0.2, 0.4) * fs)
    t = np.arange(n) / fs
    body = rng.standard_normal(n) * (1 - np.exp(-t / 0.008)) * np.exp(-t / 0.07)
    body = signal.sosfilt(signal.butter(2, [200, min(4000, 0.45 * fs)], "bandpass", fs=fs,
                                        output="sos"), body)
    bubbles = np.zeros(n)
    for _ in range(int(rng.integers(3, 8))):
        start = int(rng.uniform(0, 0.6) * n)
        f = rng.uniform(400, 2500)  # bubble (Minnaert) tones, radius ~1-8 mm
        tt = t[: n - start]
        bubbles[start:] += 0.4 * np.exp(-tt / 0.01) * np.sin(2 * np.pi * f * tt * (1 + 2 * tt))
    return body + bubbles


def _knock(fs: int, rng: np.random.Generator) -> np.ndarray:
    n = int(0.12 * fs)
    t = np.arange(n) / fs
    rise = 1 - np.exp(-t / 0.0008)
    x = np.zeros(n)
    for f, a, d in ((rng.uniform(150, 260), 1.0, 0.035), (rng.uniform(400, 700), 0.5, 0.015),
                    (rng.uniform(900, 1400), 0.2, 0.006)):
        x += a * np.exp(-t / d) * np.sin(2 * np.pi * f * t)
    return x * rise


_DISTRACTOR_MAKERS = {"match": _match, "speech": _speech, "splash": _splash, "knock": _knock}


# --------------------------------------------------------------------------
# the renderer


def render(scenario: RunScenario) -> tuple[np.ndarray, dict]:
    """Render one synthetic test-tank recording and its ground truth.

    Parameters
    ----------
    scenario : RunScenario
        Everything about the recording (see :class:`RunScenario` for the
        parameters, units and defaults).

    Returns
    -------
    samples : np.ndarray
        float32 array of shape (frames, channels), clipped to [-1, 1].
    truth : dict
        The ground truth, schema ``popmeter.truth/1`` (see
        :func:`truth_schema_doc`).  JSON-serialisable.

    Raises
    ------
    popmeter.errors.UsageError
        When the scenario is inconsistent (phases longer than the recording,
        a ring above the Nyquist limit, an unknown distractor...).
    """
    s = scenario
    _check(s)
    fs = int(s.sample_rate_hz)
    n = round(s.duration_s * fs)
    plan = _phase_plan(s)
    seeds = np.random.SeedSequence(int(s.seed)).spawn(6)
    rng_cyc, rng_click, rng_noise, rng_dist, rng_room, rng_hum = (
        np.random.default_rng(q) for q in seeds
    )

    # plate modes usable at this sample rate
    modes_all = np.asarray(s.ring_modes_hz, dtype=float)
    keep = modes_all < 0.45 * fs
    modes = modes_all[keep]
    amps = np.asarray(s.ring_mode_amplitudes, dtype=float)[keep]
    decays = np.asarray(s.ring_mode_decay_s, dtype=float)[keep]
    amps2 = np.resize(np.asarray(s.second_click_mode_amplitudes, dtype=float), len(modes_all))[keep]
    decays2 = decays * s.second_click_decay_factor
    band = _band(s, modes)

    # the two click families, each normalised to a unit peak
    main_shape = _ClickShape(s, modes, amps, decays)
    second_shape = _ClickShape(s, modes, amps2, decays2)
    amp_nominal = 10 ** (s.click_level_dbfs / 20.0)

    cycles, stall_pairs = _generate_cycles(s, plan, rng_cyc)

    # the click track (dry, mono, full scale of the click channel)
    clicks_track = np.zeros(n)
    clicks: list[dict] = []
    for ci, cyc in enumerate(cycles):
        onsets = [(0, cyc.sample)]
        if s.clicks_per_cycle == 2:
            onsets.append((1, cyc.sample + round(s.second_click_delay * cyc.period_nominal_s
                                                     * fs)))
        for kind, n0 in onsets:
            level_sd = s.click_level_sd_db * rng_click.standard_normal()
            f_scale = 1.0 + s.ring_freq_sd_pct / 100.0 * rng_click.standard_normal()
            if cyc.missed or n0 >= n:
                continue
            shape = main_shape if kind == 0 else second_shape
            m = min(shape.length, n - n0)
            wave = shape.wave(f_scale, m)
            gain_db = cyc.level_db + level_sd + (0.0 if kind == 0 else s.second_click_level_db)
            wave *= amp_nominal * 10 ** (gain_db / 20.0)
            clicks_track[n0:n0 + m] += wave
            clicks.append({
                "time_s": n0 / fs,
                "sample": int(n0),
                "kind": kind,
                "cycle": ci,
                "level_dbfs": round(20 * math.log10(float(np.max(np.abs(wave)))), 3),
                "ring_hz": round(float(modes[0] * f_scale), 3),
                "weak": cyc.weak,
            })
    clicks.sort(key=lambda c: c["sample"])

    # distractors (room sounds: reverberated with the clicks)
    room_track = np.zeros(n)
    distractor_truth: list[dict] = []
    for item in s.distractors:
        d = Distractor(item) if isinstance(item, str) else item
        wave = _DISTRACTOR_MAKERS[d.kind](fs, rng_dist)
        level_db = _DEFAULT_DISTRACTOR_LEVEL_DB[d.kind] if d.level_db is None else d.level_db
        wave *= amp_nominal * 10 ** (level_db / 20.0) / max(float(np.max(np.abs(wave))), 1e-30)
        start_s = d.time_s if d.time_s is not None else float(
            rng_dist.uniform(0.0, max(s.duration_s - len(wave) / fs, 0.0)))
        n0 = round(start_s * fs)
        if n0 >= n or n0 < 0:
            raise UsageError(f"scenario: distractor {d.kind!r} at {start_s:g} s is outside the "
                             f"recording (0-{s.duration_s:g} s)")
        m = min(len(wave), n - n0)
        room_track[n0:n0 + m] += wave[:m]
        distractor_truth.append({"type": d.kind, "time_s": n0 / fs, "end_s": (n0 + m) / fs,
                                 "level_db": level_db})
    distractor_truth.sort(key=lambda d: d["time_s"])

    if s.reverb_rt60_s:
        rir = room_impulse_response(sample_rate_hz=fs, rt60_s=s.reverb_rt60_s,
                                    predelay_s=s.reverb_predelay_s, drr_db=s.reverb_drr_db,
                                    rng=rng_room)
        clicks_track = signal.oaconvolve(clicks_track, rir)[:n]
        room_track = signal.oaconvolve(room_track, rir)[:n]
    if s.wall_delay_s:
        # (after the reverberation or before it: convolutions commute)
        k = max(1, round(s.wall_delay_s * fs))
        g = 10 ** (s.wall_level_db / 20.0)
        for track in (clicks_track, room_track):
            track[k:] += g * track[:n - k].copy()

    # noise scaled to the click-to-noise ratio (definition: module docstring)
    ref_peak_band = float(np.max(np.abs(bandlimit(
        np.pad(main_shape.wave(1.0, main_shape.length), main_shape.length), fs, band))))
    out = np.empty((n, s.channels), dtype=np.float32)
    hum = None
    if s.hum_dbfs is not None:
        hum = _hum(n, fs, s.hum_hz, 10 ** (s.hum_dbfs / 20.0), rng_hum)
    noise_rms = None
    if s.click_to_noise_db is not None:
        noise_rms = amp_nominal * ref_peak_band / 10 ** (s.click_to_noise_db / 20.0)
    for ch in range(s.channels):
        distance = abs(ch - s.click_channel)
        gain = 1.0 if distance == 0 else 10 ** (-(s.other_channel_loss_db + 3.0 * (distance - 1))
                                                / 20.0)
        x = (clicks_track + room_track) * gain
        if noise_rms is not None:
            x = x + _noise(n, fs, s.noise_colour, band, noise_rms, rng_noise)
        if hum is not None:
            x = x + hum
        out[:, ch] = x
    clipped = int(np.count_nonzero(np.abs(out) > 1.0))
    np.clip(out, -1.0, 1.0, out=out)

    truth = _truth(s, plan, cycles, stall_pairs, clicks, distractor_truth, modes, amps, decays,
                   band, clipped, bool(np.any(~keep)))
    return out, truth


def _truth(s: RunScenario, plan: dict, cycles: list[_Cycle], stall_pairs, clicks, distractors,
           modes, amps, decays, band, clipped: int, dropped_modes: bool) -> dict:
    fs = s.sample_rate_hz
    starts = np.array([c.time_s for c in cycles])
    first_click = clicks[0]["time_s"] if clicks else None
    last_click = clicks[-1]["time_s"] if clicks else None

    # phases: boundaries at cycle starts, heating ends at the first click,
    # after starts at the last click
    phases: list[dict] = []
    steady_idx = [i for i, c in enumerate(cycles) if c.phase == "steady"]
    if clicks:
        if not s.start_mid_run and first_click > 0:
            phases.append({"name": "heating", "start_s": 0.0, "end_s": first_click})
        startup_end = cycles[steady_idx[0]].time_s if steady_idx else None
        fade_idx = [i for i, c in enumerate(cycles) if c.phase == "fade"]
        fade_start = cycles[fade_idx[0]].time_s if fade_idx else None
        run_end = last_click if not s.end_mid_run else s.duration_s
        if s.never_settles:  # unsettled running all the way to the fade
            phases.append({"name": "startup", "start_s": 0.0 if s.start_mid_run else first_click,
                           "end_s": fade_start if fade_start is not None else run_end})
        elif any(c.phase == "startup" for c in cycles):
            end = startup_end if startup_end is not None else (fade_start or run_end)
            phases.append({"name": "startup", "start_s": first_click, "end_s": end})
        if steady_idx and not s.never_settles:
            start = 0.0 if s.start_mid_run else startup_end
            phases.append({"name": "steady", "start_s": start,
                           "end_s": fade_start if fade_start is not None else run_end})
        if fade_start is not None:
            phases.append({"name": "fade", "start_s": fade_start, "end_s": last_click})
        if not s.end_mid_run:
            phases.append({"name": "after", "start_s": last_click, "end_s": s.duration_s})
    else:
        phases.append({"name": "heating", "start_s": 0.0, "end_s": s.duration_s})

    steady_rate = None
    if steady_idx and not s.never_settles:
        idx = [i for i in steady_idx if i + 1 < len(cycles)]
        rates = 1.0 / np.diff(starts)[idx] if idx else np.array([])
        steady_rate = float(np.median(rates)) if len(rates) else None

    stalls = []
    for a, b in stall_pairs:
        before = [c["time_s"] for c in clicks if c["time_s"] <= cycles[b].time_s - 1e-12]
        stalls.append({"start_s": max(before) if before else cycles[a].time_s,
                       "end_s": cycles[b].time_s, "cycle": a,
                       "periods": (cycles[b].time_s - cycles[a].time_s)
                       / cycles[a].period_nominal_s})

    warnings = []
    if clipped:
        warnings.append(f"{clipped} samples clipped at full scale")
    if dropped_modes:
        warnings.append("ring modes above 0.45 x sample rate were left out")
    scenario_dict = dataclasses.asdict(s)
    return {
        "schema": TRUTH_SCHEMA,
        "sample_rate_hz": fs,
        "duration_s": round(s.duration_s, 9),
        "frames": round(s.duration_s * fs),
        "channels": s.channels,
        "click_channel": s.click_channel,
        "clicks_per_cycle": s.clicks_per_cycle,
        "click_to_noise_db": s.click_to_noise_db,
        "click_band_hz": [band[0], band[1]],
        "click_onset": "first non-zero sample of the click's attack; time_s = sample / "
                       "sample_rate_hz",
        "clicks": clicks,
        "cycle_starts_s": [c.time_s for c in cycles],
        "missed_pops": [{"cycle": i, "time_s": c.time_s} for i, c in enumerate(cycles)
                        if c.missed],
        "phases": phases,
        "stalls": stalls,
        "steady_rate_hz": steady_rate,
        "never_settles": s.never_settles,
        "starts_mid_run": s.start_mid_run,
        "ends_mid_run": s.end_mid_run,
        "never_starts": s.never_starts,
        "first_click_s": first_click,
        "last_click_s": last_click,
        "ring_hz": float(modes[0]),
        "ring_modes_hz": [float(f) for f in modes],
        "ring_mode_amplitudes": [float(a) for a in amps],
        "ring_mode_decay_s": [float(d) for d in decays],
        "distractors": distractors,
        "hum_hz": s.hum_hz if s.hum_dbfs is not None else None,
        "reverb_rt60_s": s.reverb_rt60_s,
        "clipped_samples": clipped,
        "warnings": warnings,
        "scenario": scenario_dict,
        "seed": s.seed,
    }


# --------------------------------------------------------------------------
# files


def scenario_from_truth(truth: dict) -> RunScenario:
    """The :class:`RunScenario` recorded in a ground truth (its ``scenario`` key).

    Rendering it again reproduces the recording exactly (same seed, same
    parameters), which is how the bundled recordings are checked against the
    generator.

    Raises
    ------
    popmeter.errors.InputError
        The truth holds no usable scenario.
    """
    raw = truth.get("scenario")
    if not isinstance(raw, dict):
        raise InputError("ground truth: no 'scenario' key")
    names = {f.name for f in dataclasses.fields(RunScenario)}
    unknown = sorted(set(raw) - names)
    if unknown:
        raise InputError(f"ground truth: unknown scenario keys {', '.join(unknown)}")
    params: dict[str, Any] = {}
    for key, value in raw.items():
        if key == "distractors":
            value = tuple(Distractor(**d) for d in value)
        elif isinstance(value, list):
            value = tuple(value)
        params[key] = value
    return RunScenario(**params)


def truth_path_for(audio_path: str | Path) -> Path:
    """Path of the ground truth beside a recording: ``NAME.wav`` -> ``NAME.truth.json``."""
    p = Path(audio_path)
    if p.name.endswith(".truth.json"):
        return p
    return p.with_name(p.stem + ".truth.json")


def write_truth(path: str | Path, truth: dict) -> Path:
    """Write a ground-truth dict as JSON (indented, UTF-8); returns the path."""
    p = Path(path)
    lines = ["{"]
    items = list(truth.items())
    for i, (key, value) in enumerate(items):
        comma = "," if i < len(items) - 1 else ""
        if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
            # one record per line: readable and a third of the indented size
            body = ",\n  ".join(json.dumps(v, allow_nan=False) for v in value)
            lines.append(f" {json.dumps(key)}: [\n  {body}\n ]{comma}")
        else:
            lines.append(f" {json.dumps(key)}: {json.dumps(value, allow_nan=False)}{comma}")
    lines.append("}")
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return p


def load_truth(path: str | Path) -> dict:
    """Read the ground truth of a synthetic recording.

    Parameters
    ----------
    path : str or Path
        The recording (``NAME.wav``, ``NAME.flac``...) or its truth file
        (``NAME.truth.json``).

    Returns
    -------
    dict
        The truth, schema ``popmeter.truth/1``.

    Raises
    ------
    popmeter.errors.InputError
        The truth file is missing, not JSON, or of another schema.
    """
    p = truth_path_for(path)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{p}: ground-truth file not found") from None
    except (OSError, ValueError) as error:
        raise InputError(f"{p}: not a readable ground-truth JSON ({error})") from None
    if not isinstance(data, dict) or data.get("schema") != TRUTH_SCHEMA:
        raise InputError(f"{p}: not a ground-truth file (schema is not {TRUTH_SCHEMA})")
    return data


def simulate_to_file(
    path: str | Path,
    *,
    boat: str | Path | Any | None = None,
    seed: int = 0,
    duration_s: float = 60.0,
    sample_rate_hz: int = 48000,
    channels: int = 1,
    click_to_noise_db: float = 30.0,
    clicks_per_cycle: int = 1,
    steady_rate_hz: float | None = None,
    thickness_factor: float = 1.0,
    stalls: int = 0,
    distractors: Iterable[str] = (),
    reverb: bool = False,
    wall_ms: float | None = None,
    wall_db: float = -10.0,
) -> Path:
    """Write a synthetic recording and its ground truth beside it.

    The phases scale with ``duration_s`` (for 60 s: 4 s heating, 8 s startup,
    37 s steady, 8 s fade, 3 s after); shorter recordings shrink every phase
    in proportion.

    Parameters
    ----------
    path : str or Path
        Audio file to write; the format follows the extension (.wav, .flac,
        .ogg...).  The truth goes to ``NAME.truth.json`` beside it.
    boat : path, BoatProfile or None
        Boat profile whose plate modes and predicted rate drive the clicks;
        ``None`` (default) uses the built-in demo profile.
    seed : int
        Random seed (default 0); the same seed gives the same file.
    duration_s : float
        Length in seconds (default 60).
    sample_rate_hz : int
        Sample rate in Hz (default 48000).
    channels : int
        Channel count (default 1); the clicks are loudest on channel 0.
    click_to_noise_db : float
        Click-to-noise ratio in dB (default 30; definition in the module
        docstring).
    clicks_per_cycle : int
        1 (default) or 2.
    steady_rate_hz : float or None
        Steady cycle rate in Hz; ``None`` (default) takes the engine model's
        prediction for the profile.
    thickness_factor : float
        True diaphragm thickness as a multiple of the profile's nominal
        (default 1.0); changes the ring and the predicted rate.
    stalls : int
        Stalls during the fade (default 0).
    distractors : iterable of str
        Extra sounds: any of ``match``, ``speech``, ``splash``, ``knock``
        (one each, at random times) and ``hum`` (50 Hz mains hum at
        -40 dBFS).  Default none.
    reverb : bool
        Add room reverberation (RT60 0.5 s) when true; default dry.
    wall_ms : float or None
        A wall's reflection of every sound, this many milliseconds late
        (``RunScenario.wall_delay_s``); default ``None``, no wall.
    wall_db : float
        Its level relative to the sound, dB (default -10).

    Returns
    -------
    Path
        The audio path written.

    Raises
    ------
    popmeter.errors.UsageError
        Bad options (unknown distractor, phases that do not fit...).
    """
    kinds = [str(d).strip().lower() for d in distractors if str(d).strip()]
    hum = "hum" in kinds
    others = tuple(k for k in kinds if k != "hum")
    unknown = [k for k in others if k not in DISTRACTOR_KINDS]
    if unknown:
        raise UsageError(f"--distractors: unknown {', '.join(unknown)} (known: "
                         f"{', '.join(DISTRACTOR_KINDS + ('hum',))})")
    scale = min(1.0, duration_s / 60.0)
    overrides: dict[str, Any] = {
        "sample_rate_hz": int(sample_rate_hz), "duration_s": float(duration_s),
        "channels": int(channels), "heating_s": 4.0 * scale, "startup_s": 8.0 * scale,
        "fade_s": 8.0 * scale, "after_s": 3.0 * scale,
        "click_to_noise_db": click_to_noise_db, "clicks_per_cycle": int(clicks_per_cycle),
        "stalls": int(stalls), "distractors": others, "hum_dbfs": -40.0 if hum else None,
        "reverb_rt60_s": 0.5 if reverb else None, "seed": int(seed),
        "wall_delay_s": None if wall_ms is None else float(wall_ms) / 1000.0,
        "wall_level_db": float(wall_db),
    }
    if steady_rate_hz is not None:
        overrides["steady_rate_hz"] = float(steady_rate_hz)
    scenario, extra = _scenario_for_boat(boat, thickness_factor, overrides)
    return write_run(path, scenario, extra=extra)


def write_run(path: str | Path, scenario: RunScenario, *, extra: dict | None = None,
              subtype: str | None = None) -> Path:
    """Render a scenario and write the audio with its truth beside it.

    Parameters
    ----------
    path : str or Path
        Audio file (format from the extension); parent folders are created.
    scenario : RunScenario
        What to render.
    extra : dict or None
        Keys added to the truth (e.g. ``diaphragm`` and ``profile``, see
        :func:`profile_truth`); default none.
    subtype : str or None
        libsndfile subtype; ``None`` (default) lets
        :func:`popmeter.audio_io.write_audio` choose (16-bit PCM for WAV/FLAC).

    Returns
    -------
    Path
        The audio path.
    """
    samples, truth = render(scenario)
    if extra:
        truth.update(extra)
    out = Path(path)
    write_audio(out, samples, scenario.sample_rate_hz, subtype=subtype)  # creates the folder
    write_truth(truth_path_for(out), truth)
    return out


def _scenario_for_boat(boat: Any, thickness_factor: float,
                       overrides: dict[str, Any]) -> tuple[RunScenario, dict]:
    """Scenario from a boat (path, profile or None = demo); extra truth keys."""
    try:
        from popmeter import profile as profile_mod
    except ImportError:
        profile_mod = None
    if profile_mod is None:
        if boat is not None:
            raise UsageError("boat profiles are not available in this build (popmeter.profile)")
        return RunScenario(**overrides), {}
    if boat is None:
        prof = profile_mod.example_profile()
    elif isinstance(boat, (str, Path)):
        prof = profile_mod.load_profile(boat)
    else:
        prof = boat
    scenario = scenario_from_profile(prof, thickness_factor=thickness_factor, **overrides)
    return scenario, profile_truth(prof, thickness_factor)


def scenario_from_profile(profile: Any, *, thickness_factor: float = 1.0,
                          **overrides: Any) -> RunScenario:
    """A :class:`RunScenario` whose clicks and rate come from a boat profile.

    The lumped engine model (:func:`popmeter.engine.predict`) gives the steady
    cycle rate and the diaphragm's plate modes for a diaphragm
    ``thickness_factor`` times the profile's nominal gauge (a thin or thick
    unit).  The first four modes ring (amplitudes 1, 0.45, 0.25, 0.15; 1/e
    decays 10, 6, 4, 3 ms -- chosen so the ring dies within a period, no
    source); a wetted diaphragm (water on one side) gets 0.6 x those decay
    times, for the added damping of the water (common practice, no source).

    Parameters
    ----------
    profile : popmeter.profile.BoatProfile
        The boat.
    thickness_factor : float
        True diaphragm thickness as a multiple of the nominal (default 1.0).
    **overrides
        Any :class:`RunScenario` field; ``steady_rate_hz`` here replaces the
        model's rate, ``ring_modes_hz`` the model's modes.

    Returns
    -------
    RunScenario
    """
    from popmeter.engine import predict

    if not thickness_factor > 0:
        raise UsageError(f"thickness_factor={thickness_factor} must be positive")
    pred = predict(profile, thickness_m=profile.diaphragm.thickness_m.value * thickness_factor)
    decay = (0.010, 0.006, 0.004, 0.003)
    if profile.diaphragm.wetted:
        decay = tuple(0.6 * d for d in decay)
    params: dict[str, Any] = {
        "steady_rate_hz": float(pred.rate_hz),
        "ring_modes_hz": tuple(float(f) for f in pred.ring_modes_hz[:4]),
        "ring_mode_amplitudes": (1.0, 0.45, 0.25, 0.15)[: len(pred.ring_modes_hz[:4])],
        "ring_mode_decay_s": decay[: len(pred.ring_modes_hz[:4])],
    }
    params.update(overrides)
    return RunScenario(**params)


def profile_truth(profile: Any, thickness_factor: float = 1.0) -> dict:
    """Ground-truth keys that describe the boat: ``diaphragm`` and ``profile``.

    ``diaphragm`` holds the true ``thickness_m`` (nominal x ``thickness_factor``),
    the ``stiffness_kpa_per_ml`` and ``rigidity_n_m`` the engine model gives
    for it, and the model's rate and ring; ``profile`` is the profile as
    written in its file (file units).
    """
    from popmeter.engine import predict

    thickness_m = profile.diaphragm.thickness_m.value * thickness_factor
    pred = predict(profile, thickness_m=thickness_m)
    return {
        "diaphragm": {
            "thickness_m": thickness_m,
            "nominal_thickness_m": profile.diaphragm.thickness_m.value,
            "thickness_factor": thickness_factor,
            "stiffness_kpa_per_ml": pred.stiffness_kpa_per_ml,
            "rigidity_n_m": pred.rigidity_n_m,
            "model_rate_hz": pred.rate_hz,
            "model_ring_hz": pred.ring_hz,
        },
        "profile": dict(profile.raw) if getattr(profile, "raw", None) else {"name": profile.name},
        "profile_source": profile.source,
    }


def truth_schema_doc() -> str:
    """A short description of every key of the ground truth (``popmeter.truth/1``)."""
    return _TRUTH_DOC


_TRUTH_DOC = """\
popmeter.truth/1 -- ground truth written beside a synthetic recording (NAME.truth.json)
schema            "popmeter.truth/1"
sample_rate_hz    int, Hz
duration_s        float, s;  frames: int
channels          int;  click_channel: index of the channel at the stated click-to-noise
clicks_per_cycle  1 or 2
click_to_noise_db float dB or null (no noise); click_band_hz: [lo, hi] band of its definition
click_onset       text definition of a click onset
clicks            [{time_s, sample, kind (0 main / 1 second), cycle, level_dbfs, ring_hz, weak}]
                  sorted by sample; time_s = sample / sample_rate_hz; level_dbfs = peak of
                  the dry click on the click channel
cycle_starts_s    every engine cycle, including those whose pop was missed
missed_pops       [{cycle, time_s}] startup cycles without a click
phases            [{name (heating/startup/steady/fade/after), start_s, end_s}]
stalls            [{start_s (last click before the gap), end_s (next click), cycle, periods}]
steady_rate_hz    median of 1/(cycle-start interval) over steady cycles; null if none
never_settles, starts_mid_run, ends_mid_run, never_starts   bool flags of the scenario
first_click_s, last_click_s   float s or null
ring_hz           lowest plate mode used (nominal); ring_modes_hz, ring_mode_amplitudes,
                  ring_mode_decay_s: all modes used
distractors       [{type, time_s, end_s, level_db}]
hum_hz, reverb_rt60_s, clipped_samples, warnings
diaphragm         {thickness_m, stiffness_kpa_per_ml, ...} when a boat profile was used
profile           the boat profile (raw dict, file units) when one was used;
                  profile_source: its file name or null
scenario          every RunScenario parameter;  seed: int
"""


# --------------------------------------------------------------------------
# the bundled demo recordings

#: The invented demo boat (file units): a two-tube launch with a 28 mm round
#: brass diaphragm.  No real product.
DEMO_BOAT_RAW: dict[str, Any] = {
    "name": "Kittiwake launch, 2 tubes",
    "tubes": {"count": 2, "inner_diameter_mm": 3.2, "inner_diameter_mm_tol": 0.05,
              "length_mm": 140.0, "length_mm_tol": 2.0, "outlet": "unflanged"},
    "boiler": {"gas_volume_ml": 1.2, "gas_volume_ml_tol": 0.1},
    "diaphragm": {"shape": "circle", "diameter_mm": 28.0, "diameter_mm_tol": 0.1,
                  "thickness_mm": 0.12, "thickness_mm_tol": 0.005, "material": "brass",
                  "wetted": False},
    "gas": {"polytropic_index": 1.0, "polytropic_index_tol": 0.05, "pressure_kpa": 101.325},
}

DEMO_SPEC_TOML = """\
# QC spec for the invented "Kittiwake launch" demo boat (demo_boat.toml).
# The engine model puts a nominal unit (0.12 mm brass) at 12.4 cycles/s and
# 144 kPa/mL; a 0.8x (thin) diaphragm at 10.7 Hz and 74 kPa/mL, a 1.25x
# (thick) one at 13.7 Hz and 282 kPa/mL.
name = "Kittiwake launch production"

[limits.steady_rate_hz]
min = 11.5
max = 13.3
target = 12.4

[limits.time_to_steady_s]
max = 20.0

[limits.diaphragm_stiffness_kpa_per_ml]
min = 105
max = 190
target = 144
"""

#: Demo batch: serial -> (what is wrong, thickness factor, seed, scenario changes).
DEMO_BATCH: dict[str, tuple[str, float, int, dict[str, Any]]] = {
    "KW-2611-001": ("good unit", 1.00, 201, {}),
    "KW-2611-002": ("good unit, diaphragm 3 % thick", 1.03, 202, {}),
    "KW-2611-003": ("good unit, diaphragm 2 % thin, a knock on the tank", 0.98, 203,
                    {"distractors": (Distractor("knock"),)}),
    "KW-2611-004": ("thin diaphragm (0.8 x gauge)", 0.80, 204, {}),
    "KW-2611-005": ("thick diaphragm (1.25 x gauge)", 1.25, 205, {}),
    "KW-2611-006": ("never starts (background only)", 1.00, 206, {"never_starts": True}),
    "KW-2611-007": ("slow starter (24 s startup; 40 s recording)", 1.00, 207,
                    {"duration_s": 40.0, "startup_s": 24.0}),
    "KW-2611-008": ("staller (3 stalls in the fade)", 1.00, 208,
                    {"stalls": 3, "fade_s": 8.0}),
}
DEMO_CORRUPT_SERIAL = "KW-2611-009"


def write_header_only_wav(path: str | Path, *, sample_rate_hz: int, promised_s: float) -> Path:
    """Write a corrupt recording: a 16-bit mono WAV header promising
    ``promised_s`` seconds at ``sample_rate_hz`` (Hz), and no audio after it,
    as left by a recorder that died right after starting. For tests of the
    error path."""
    frames = round(promised_s * sample_rate_hz)
    header = (b"RIFF" + (36 + 2 * frames).to_bytes(4, "little") + b"WAVEfmt "
              + (16).to_bytes(4, "little") + (1).to_bytes(2, "little")
              + (1).to_bytes(2, "little") + int(sample_rate_hz).to_bytes(4, "little")
              + (2 * int(sample_rate_hz)).to_bytes(4, "little") + (2).to_bytes(2, "little")
              + (16).to_bytes(2, "little") + b"data" + (2 * frames).to_bytes(4, "little"))
    path = Path(path)
    path.write_bytes(header)
    return path


def make_demo_bundle(out_dir: str | Path, *, sample_rate_hz: int = 22050) -> Path:
    """Write the demo recordings, boat, spec and batch into ``out_dir``.

    The bundle the repository ships in ``synthetic_audio/`` and that
    ``popmeter demo`` regenerates when it is missing.  Deterministic (fixed
    seeds); 16-bit FLAC at ``sample_rate_hz`` (default 22050 Hz, enough for
    the demo boat's first four plate modes, 1.1-5.3 kHz) keeps it small.

    Contents: ``demo_boat.toml``, ``demo_spec.toml``, ``clean_run.flac``,
    ``noisy_run.flac``, ``two_click_run.flac`` (each with ``.truth.json``),
    ``batch_demo/`` (units ``KW-2611-001`` ... ``-009``, one of them a
    corrupt WAV) and ``README.txt``.

    Parameters
    ----------
    out_dir : str or Path
        Folder to write into (created).
    sample_rate_hz : int
        Sample rate of every recording (default 22050 Hz).

    Returns
    -------
    Path
        ``out_dir``.
    """
    from popmeter.profile import parse_profile, write_profile

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    boat_path = out / "demo_boat.toml"
    write_profile(dict(DEMO_BOAT_RAW), boat_path,
                  comment="Invented demo boat for popmeter's bundled synthetic recordings.")
    (out / "demo_spec.toml").write_text(DEMO_SPEC_TOML, encoding="utf-8")
    profile = parse_profile(json.loads(json.dumps(DEMO_BOAT_RAW)), source=boat_path.name)

    def run(path: Path, factor: float, **kw: Any) -> Path:
        base: dict[str, Any] = {"sample_rate_hz": sample_rate_hz, "duration_s": 40.0,
                                "heating_s": 3.0, "startup_s": 7.0, "fade_s": 6.0,
                                "after_s": 2.5}
        base.update(kw)
        scenario = scenario_from_profile(profile, thickness_factor=factor, **base)
        return write_run(path, scenario, extra=profile_truth(profile, factor))

    runs = {
        "clean_run.flac": ("40 s, one click per cycle, click-to-noise 35 dB, dry room", 1.0,
                           {"seed": 101, "click_to_noise_db": 35.0}),
        "noisy_run.flac": (("40 s, click-to-noise 15 dB, room reverberation (RT60 0.4 s), 50 Hz hum, "
                           "a match strike, speech, a splash and a knock, 1 stall"), 1.0,
                           {"seed": 102, "click_to_noise_db": 15.0, "reverb_rt60_s": 0.4,
                            "hum_dbfs": -38.0, "stalls": 1,
                            "distractors": (Distractor("match", time_s=1.0),
                                            Distractor("speech", time_s=18.0),
                                            Distractor("splash", time_s=25.5),
                                            Distractor("knock", time_s=31.2))}),
        "two_click_run.flac": (("40 s, two clicks per cycle (the second 6 dB weaker, brighter, "
                               "shorter), click-to-noise 25 dB, 2 stalls"), 1.0,
                               {"seed": 103, "click_to_noise_db": 25.0, "clicks_per_cycle": 2,
                                "stalls": 2}),
    }
    lines = [
        "popmeter bundled synthetic recordings",
        "=====================================",
        "",
        "Every recording here was made by popmeter's own generator (popmeter.synth):",
        "an invented boat, invented serial numbers, no real recordings. Regenerate",
        "with:  python benchmarks/make_synthetic_audio.py",
        "",
        "Each NAME.flac has NAME.truth.json beside it (schema popmeter.truth/1):",
        "every click (time and exact sample), cycle starts, phases, stalls, steady",
        "rate, ring frequency, distractors, the diaphragm actually simulated and",
        f"the boat profile.  16-bit FLAC, mono, {sample_rate_hz} Hz.",
        "",
        "demo_boat.toml   the demo boat: \"{}\" (28 mm round brass".format(DEMO_BOAT_RAW["name"]),
        "                 diaphragm, 0.12 mm; two 3.2 mm tubes, 140 mm)",
        "demo_spec.toml   its QC spec: steady rate 11.5-13.3 Hz, time to steady",
        "                 <= 20 s, diaphragm stiffness 105-190 kPa/mL",
        "",
    ]
    for name, (what, factor, kw) in runs.items():
        run(out / name, factor, **kw)
        lines.append(name)
        lines += textwrap.wrap(what, width=74, initial_indent="    ", subsequent_indent="    ")
    lines += ["", "batch_demo/  a production batch of the demo boat (serial = file name), 25 s",
              "             per unit, click-to-noise 28 dB:"]
    batch = out / "batch_demo"
    batch.mkdir(exist_ok=True)
    for serial, (what, factor, seed, kw) in DEMO_BATCH.items():
        params: dict[str, Any] = {"duration_s": 25.0, "seed": seed, "click_to_noise_db": 28.0,
                                  "heating_s": 3.0, "startup_s": 6.0, "fade_s": 5.0}
        params.update(kw)
        run(batch / f"{serial}.flac", factor, **params)
        lines.append(f"  {serial}.flac  {what}")
    # a recorder that died after writing the header: a WAV that holds no audio
    write_header_only_wav(batch / f"{DEMO_CORRUPT_SERIAL}.wav", sample_rate_hz=sample_rate_hz,
                          promised_s=30.0)
    lines += [f"  {DEMO_CORRUPT_SERIAL}.wav   corrupt: a WAV header promising 30 s, no audio",
              "",
              "Intended verdicts against demo_spec.toml: 001-003 PASS; 004 (thin) and",
              "005 (thick) FAIL on stiffness and rate; 006 FAIL (no clicks: null",
              "metrics); 007 FAIL on time to steady; 008 within limits, its stalls",
              "listed; 009 ERROR (no audio).",
              "",
              "Synthetic test signals only.  popmeter measures; it does not certify the",
              "safety of any boat (open flame, hot boiler, steam: follow local codes",
              "and toy-safety regulations).",
              ""]
    (out / "README.txt").write_text("\n".join(lines), encoding="utf-8")
    return out
