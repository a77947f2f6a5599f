"""Cycle-rate timeline of one run: cycles, smoothed rate, phases, stalls, summary.

Input is the list of clicks found by :mod:`popmeter.detection`; output is a
:class:`Timeline`. Everything is a pure computation on the click times (and,
for the ring, the per-click ring estimates); nothing here reads audio.

The steps (each one is defined precisely in the README, section "How the
timeline is measured"):

1. **Main clicks.** Only clicks of ``kind == 0`` make cycles, so a two-click
   engine is counted once per cycle.
2. **Extra clicks.** A main click closer to a neighbour than
   ``extra_click_fraction`` of the local period is an extra (spurious) click;
   of the two ends of such a short interval the one whose removal leaves the
   more regular rhythm is dropped. An extra click therefore never shows up
   as a doubled rate.
3. **Cycles, missed clicks and stalls.** The local period is the rolling
   median of the intervals between main clicks. An interval of about ``k``
   local periods below the stall limit is ``k`` cycles with ``k - 1`` missed
   clicks; the cycles whose own click was missed are flagged
   (``Cycle.missed_clicks == 1``) and none of them shows a halved rate. An
   interval of at least ``stall_factor`` local periods (``startup_stall_factor``
   during start-up, where an engine sputters) is a stall: the engine stopped
   popping; it makes no cycle.  With a two-click engine the second clicks
   are pops too: a gap whose longest silence, second clicks counted, is
   shorter than the limit is missed main clicks, not a stall.
4. **Smoothed rate.** A rolling median (``smoothing_cycles`` cycles, centred)
   of the cycle rates.
5. **Steady state.** The core is the longest stretch of consecutive cycles
   whose smoothed rate stays within +/- ``steady_tolerance_pct`` of the
   stretch's own median, at least ``steady_min_cycles`` cycles long; its ends
   are then trimmed to where the smoothed rate comes within a tighter band
   (``steady_edge_pct`` or four robust standard deviations) of the core's
   robust trend line for ``smoothing_cycles`` cycles in a row.
6. **Phases.** ``heating`` (recording start to first click), ``startup``
   (first click to steady start), ``steady``, ``fade`` (steady end to last
   click), ``after`` (silence after the last click).
7. **Summary** with the keys of the ``popmeter.analysis/1`` schema; a value
   that cannot be determined is ``None`` and the reason is in ``warnings``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from popmeter.errors import UsageError

__all__ = [
    "PHASE_NAMES",
    "SUMMARY_KEYS",
    "Cycle",
    "Phase",
    "Stall",
    "Timeline",
    "build_timeline",
    "cycle_of_times",
    "rolling_median",
]

#: Summary keys, in the order of the README (``popmeter.analysis/1``), plus
#: ``steady_rate_sem_hz`` (the uncertainty of the steady rate).
SUMMARY_KEYS: tuple[str, ...] = (
    "first_click_s",
    "last_click_s",
    "steady_start_s",
    "steady_end_s",
    "steady_rate_hz",
    "steady_rate_iqr_hz",
    "steady_rate_sem_hz",
    "jitter_pct",
    "drift_pct_per_min",
    "stalls",
    "cycles",
    "run_s",
    "time_to_steady_s",
    "ignition_delay_s",
    "ring_hz",
    "diaphragm_stiffness_kpa_per_ml",
)

#: Phase names, in the order they occur in a complete run.
PHASE_NAMES: tuple[str, ...] = ("heating", "startup", "steady", "fade", "after")

_STEADY_KEYS = (
    "steady_start_s",
    "steady_end_s",
    "steady_rate_hz",
    "steady_rate_iqr_hz",
    "steady_rate_sem_hz",
    "jitter_pct",
    "drift_pct_per_min",
    "time_to_steady_s",
)


@dataclass
class Cycle:
    """One engine cycle.

    Attributes
    ----------
    start_s : float
        Time of the cycle's main click, seconds from the start of the
        recording. For a cycle whose click was missed, the time interpolated
        evenly inside the gap.
    period_s : float
        Duration of the cycle (s): time to the next main click, or the gap
        divided by the number of cycles it holds.
    rate_hz : float
        ``1 / period_s``.
    phase : str
        Name of the phase holding ``start_s`` (see :data:`PHASE_NAMES`).
    missed_clicks : int
        1 when the main click starting this cycle was not heard (the cycle was
        filled in inside a gap of about k periods), else 0. The sum over all
        cycles is the number of missed main clicks.
    """

    start_s: float
    period_s: float
    rate_hz: float
    phase: str
    missed_clicks: int = 0


@dataclass
class Phase:
    """One phase of the run, ``start_s`` to ``end_s`` (s from recording start)."""

    name: str
    start_s: float
    end_s: float


@dataclass
class Stall:
    """A silence inside the run: from the last click before it (``start_s``)
    to the first click after it (``end_s``); ``duration_s = end_s - start_s``."""

    start_s: float
    end_s: float
    duration_s: float


@dataclass
class Timeline:
    """The cycle-rate timeline of one run.

    Attributes
    ----------
    cycles : list of Cycle
    phases : list of Phase
        In time order; a phase that did not occur (no heating when the
        recording starts mid-run, no steady state...) is absent.
    stalls : list of Stall
    summary : dict
        Keys :data:`SUMMARY_KEYS`; SI units (s, Hz, %); ``None`` where the
        value cannot be determined, with the reason in ``warnings``.
    warnings : list of str
    smoothed_rate : tuple of two numpy arrays
        ``(times_s, rate_hz)``: the smoothed rate at each cycle start, for
        plotting.
    main_click_times_s : numpy array
        Times (s) of the main clicks that made cycles (extra clicks removed).
    extra_click_times_s : list of float
        Main clicks set aside as extra (spurious) clicks.
    missed_clicks : int
        Main clicks filled in inside gaps of about k periods.
    recording_starts_mid_run, recording_ends_mid_run : bool
        Whether the recording began or ended while the engine was running.
    """

    cycles: list[Cycle]
    phases: list[Phase]
    stalls: list[Stall]
    summary: dict[str, float | int | None]
    warnings: list[str]
    smoothed_rate: tuple[np.ndarray, np.ndarray] = field(
        default_factory=lambda: (np.zeros(0), np.zeros(0))
    )
    main_click_times_s: np.ndarray = field(default_factory=lambda: np.zeros(0))
    extra_click_times_s: list[float] = field(default_factory=list)
    missed_clicks: int = 0
    recording_starts_mid_run: bool = False
    recording_ends_mid_run: bool = False

    def phase(self, name: str) -> Phase | None:
        """The phase called ``name``, or None when the run did not have it."""
        for p in self.phases:
            if p.name == name:
                return p
        return None


# --------------------------------------------------------------------------- helpers


def rolling_median(values: np.ndarray, window: int, *, shrink_edges: bool = True) -> np.ndarray:
    """Centred rolling median of ``values`` over ``window`` points.

    ``shrink_edges`` True (default): near the ends the window shrinks
    symmetrically (the first value is its own median, the second the median
    of three, ...), so a curve that rises at the start is followed and not
    pulled towards its later values. False: the first (last) ``window // 2``
    points take the median of the first (last) full window, so a single odd
    value at an end is outvoted. ``window`` is made odd. NaN values are
    ignored.
    """
    x = np.asarray(values, dtype=float)
    n = x.size
    if n == 0:
        return x.copy()
    half = max(0, int(window) // 2)
    half = min(half, (n - 1) // 2)
    out = np.empty(n)
    if half == 0:
        return x.copy()
    win = np.lib.stride_tricks.sliding_window_view(x, 2 * half + 1)
    with np.errstate(all="ignore"):
        if np.isnan(x).any():
            out[half : n - half] = np.nanmedian(win, axis=1)
        else:
            # (no NaN: the same values, the middle of each odd-length window,
            # without nanmedian's masked arrays)
            out[half : n - half] = np.median(win, axis=1)
    for i in range(half):
        if shrink_edges:
            out[i] = np.nanmedian(x[: 2 * i + 1])
            out[n - 1 - i] = np.nanmedian(x[n - 1 - 2 * i :])
        else:
            out[i] = out[half]
            out[n - 1 - i] = out[n - 1 - half]
    return out


def cycle_of_times(times_s: Sequence[float], cycles: Sequence[Cycle]) -> list[int | None]:
    """The index in ``cycles`` of the cycle holding each time, or None.

    Cycle ``i`` holds ``start_s <= t < start_s + period_s``: its main click
    (at its start) and a two-click engine's second click.  A time in no
    cycle gives None: a lone click set aside before or after the run, a
    click in a stall, the last main click (it starts no complete cycle).
    ``cycles`` in time order, as :func:`build_timeline` gives them (cycles
    filled in inside a gap count, so the index is the cycle's, not the
    main click's).

    Parameters
    ----------
    times_s : sequence of float
        Times (s) from the start of the recording, any order.
    cycles : sequence of Cycle

    Returns
    -------
    list of int or None
        One entry per time.
    """
    t = np.asarray(times_s, dtype=float)
    if not len(cycles):
        return [None] * t.size
    starts = np.array([c.start_s for c in cycles], dtype=float)
    ends = starts + np.array([c.period_s for c in cycles], dtype=float)
    i = np.searchsorted(starts, t, side="right") - 1
    inside = (i >= 0) & (t < ends[np.maximum(i, 0)])
    return [int(k) if ok else None for k, ok in zip(i.tolist(), inside.tolist())]


def _true_runs(mask: np.ndarray) -> np.ndarray:
    """Start (inclusive) and stop (exclusive) index of every run of True, shape (k, 2)."""
    m = np.concatenate(([False], np.asarray(mask, bool), [False]))
    d = np.diff(m.astype(np.int8))
    starts = np.flatnonzero(d == 1)
    stops = np.flatnonzero(d == -1)
    return np.column_stack((starts, stops))


def _remove_extra_clicks(
    times_s: np.ndarray, strength: np.ndarray, *, fraction: float, window: int
) -> tuple[np.ndarray, np.ndarray, list[float]]:
    """Drop main clicks that sit too close to a neighbour (spurious extras).

    Returns the kept times, the kept strengths and the removed times. An
    interval shorter than ``fraction`` of the local period (rolling median of
    intervals) marks a pair; the click of the pair whose removal makes the
    merged neighbouring intervals closest (in log ratio) to the local period is
    removed; when the two choices differ by less than 0.1 in log ratio, the
    weaker click is removed (at equal strength the later one). Repeats until no short interval is left.
    """
    t = np.asarray(times_s, float).copy()
    s = np.asarray(strength, float).copy()
    removed: list[float] = []
    for _ in range(t.size):
        if t.size < 3:
            break
        d = np.diff(t)
        local = rolling_median(d, window, shrink_edges=False)
        short = np.flatnonzero(d < fraction * local)
        if short.size == 0:
            break
        # The shortest interval relative to its local period first.
        i = int(short[np.argmin(d[short] / local[short])])
        p = local[i]

        c_i, c_j = _removal_cost(t, i, p), _removal_cost(t, i + 1, p)
        if abs(c_i - c_j) < 0.1:
            # The rhythm cannot tell them apart (within a tenth of a period):
            # the weaker click goes; at equal strength the later one (an echo
            # or a double trigger follows the click it copies).
            drop = i if s[i] < s[i + 1] else i + 1
        else:
            drop = i if c_i < c_j else i + 1
        removed.append(float(t[drop]))
        t = np.delete(t, drop)
        s = np.delete(s, drop)
    return t, s, sorted(removed)


def _remove_stray_clicks(
    t: np.ndarray, *, factor: float, window: int, group: int = 2
) -> tuple[np.ndarray, list[float]]:
    """Drop groups of at most ``group`` main clicks at either end of the run
    that are separated from the rest by at least ``factor`` local periods
    (the local period measured on the run side). Returns kept and removed times."""
    removed: list[float] = []
    t = np.asarray(t, float)
    for _ in range(4):
        changed = False
        if t.size >= 2 * group + 3:
            d = np.diff(t)
            # leading group
            for g in range(1, group + 1):
                ref = float(np.median(d[g : g + window]))
                if d[g - 1] >= factor * ref:
                    removed.extend(t[:g].tolist())
                    t = t[g:]
                    changed = True
                    break
        if t.size >= 2 * group + 3:
            d = np.diff(t)
            for g in range(1, group + 1):
                ref = float(np.median(d[max(0, d.size - g - window) : d.size - g]))
                if d[-g] >= factor * ref:
                    removed.extend(t[-g:].tolist())
                    t = t[:-g]
                    changed = True
                    break
        if not changed:
            break
    return t, sorted(removed)


def _removal_cost(t: np.ndarray, j: int, period_s: float) -> float:
    """How far (|log ratio|) from ``period_s`` the interval that closes the
    rhythm around click ``j`` would be once ``j`` is removed (``t.size >= 3``)."""
    if 0 < j < t.size - 1:
        new_gap = t[j + 1] - t[j - 1]
    elif j == 0:
        new_gap = t[2] - t[1]
    else:
        new_gap = t[-2] - t[-3]
    return abs(math.log(max(float(new_gap), 1e-9) / period_s))


def _split_rows(values: np.ndarray, blocks: int) -> tuple[np.ndarray, np.ndarray]:
    """The parts of ``np.array_split(values, blocks)`` as the rows of two
    arrays: the longer parts (one more element) first, then the shorter ones."""
    v = np.asarray(values, float)
    q, r = divmod(v.size, blocks)
    cut = r * (q + 1)
    return v[:cut].reshape(r, q + 1), v[cut:].reshape(blocks - r, q)


def _block_medians(values: np.ndarray, blocks: int) -> np.ndarray:
    """Median of each part of ``np.array_split(values, blocks)`` (the same
    values as one ``np.median`` call per part)."""
    return np.concatenate([np.median(rows, axis=1) for rows in _split_rows(values, blocks)])


def _block_rates(
    starts: np.ndarray, periods: np.ndarray, blocks: int
) -> tuple[np.ndarray, np.ndarray]:
    """Mid time (s) and mean rate (Hz) of ``blocks`` contiguous blocks of cycles.

    The blocks are the parts of ``np.array_split``. The block rate is cycles
    over time (``k / sum(period)``): unlike single cycle rates it is not
    quantised by the sample grid of the click times.
    """
    first = np.concatenate([rows[:, 0] for rows in _split_rows(starts, blocks)])
    p_rows = _split_rows(periods, blocks)
    total = np.concatenate([rows.sum(axis=1) for rows in p_rows])
    count = np.concatenate([np.full(rows.shape[0], rows.shape[1]) for rows in p_rows])
    return first + 0.5 * total, count / total


def _batch_sem(starts: np.ndarray, periods: np.ndarray, blocks: int = 10) -> float | None:
    """Standard error (Hz) of the steady rate by the method of batch means.

    The steady cycles are cut into ``blocks`` contiguous blocks; the standard
    error is the standard deviation of the block rates over ``sqrt(blocks)``
    (batch means; Flyvbjerg & Petersen, J. Chem. Phys. 91, 461, 1989).
    Contiguous blocks keep slow wander and correlated jitter in the error
    instead of hiding them as independent samples would.
    """
    if np.asarray(periods).size < 2 * blocks:
        return None
    _, rate = _block_rates(starts, periods, blocks)
    return float(np.std(rate, ddof=1) / math.sqrt(blocks))


def _median_pairwise_slope(t: np.ndarray, y: np.ndarray) -> float:
    """Theil-Sen slope of y against t (Sen, JASA 63, 1968): the median of the
    slopes ``(y[j] - y[i]) / (t[j] - t[i])`` over all pairs with ``t[j] > t[i]``.

    The same value as ``scipy.stats.theilslopes(y, t).slope`` (the same slopes,
    computed in the same way, and their median), without its confidence
    interval. Raises ValueError when all ``t`` are equal (no slope).
    """
    t = np.asarray(t, float).ravel()
    y = np.asarray(y, float).ravel()
    dt = t[:, np.newaxis] - t
    rising = dt > 0
    slopes = (y[:, np.newaxis] - y)[rising] / dt[rising]
    if not slopes.size:
        raise ValueError("Theil-Sen slope: all times are equal, no slope")
    return float(np.median(slopes))


def _drift_slope(starts: np.ndarray, periods: np.ndarray) -> float:
    """Robust slope (Hz/s) of the rate against time: Theil-Sen (Sen, JASA 63,
    1968) over block rates of about 8 cycles each (at most 500 blocks)."""
    n = np.asarray(periods).size
    blocks = max(2, min(500, n // 8))
    mid, rate = _block_rates(starts, periods, blocks)
    return _median_pairwise_slope(mid, rate)


def _theil_sen_slope(t: np.ndarray, y: np.ndarray, max_points: int = 1000) -> float:
    """Theil-Sen slope of y against t (Sen, JASA 63, 1968).

    Above ``max_points`` points the data are first reduced to ``max_points``
    contiguous block medians (time and value), which keeps the estimate
    robust and the pairwise-slope count bounded (n^2 / 2).
    """
    t = np.asarray(t, float)
    y = np.asarray(y, float)
    if t.size > max_points:
        t, y = _block_medians(t, max_points), _block_medians(y, max_points)
    return _median_pairwise_slope(t, y)


def _fmt(x: float) -> str:
    return f"{x:.2f}"


# --------------------------------------------------------------------------- main


def build_timeline(
    clicks: Sequence[Any],
    *,
    duration_s: float,
    clicks_per_cycle: int,
    ignition_at_s: float | None = None,
    ring_hz: float | None = None,
    steady_tolerance_pct: float = 5.0,
    steady_edge_pct: float = 1.0,
    steady_min_cycles: int = 50,
    stall_factor: float = 3.5,
    startup_stall_factor: float = 4.5,
    smoothing_cycles: int = 9,
    extra_click_fraction: float = 0.5,
    stray_factor: float = 8.0,
    recording_starts_mid_run: bool | None = None,
    recording_ends_mid_run: bool | None = None,
) -> Timeline:
    """Build the cycle-rate timeline, phases, stalls and summary of one run.

    Parameters
    ----------
    clicks : sequence of popmeter.detection.Click
        The detected clicks (any order). Uses ``time_s``, ``kind``,
        ``strength`` and ``ring_hz``; only ``kind == 0`` clicks make cycles.
    duration_s : float
        Length of the recording (s); bounds the ``after`` phase.
    clicks_per_cycle : int
        1 or 2, the detector's decision. With 2 the ``kind == 1`` clicks are
        second clicks: they count for the first and last click of the run and
        for the edges of stalls, but make no cycles.
    ignition_at_s : float or None
        Time in the recording (s) when the flame was lit; gives
        ``ignition_delay_s``. Default None: no ignition delay.
    ring_hz : float or None
        The ring frequency found by the detector (Hz). Default None: the
        median of the main clicks' own ``ring_hz`` is used when they carry one.
    steady_tolerance_pct : float
        Half-width (% of the stretch's median) of the band that finds the core
        of the steady state. Default 5 %: wide enough for the smoothed rate of
        an engine with a few % cycle-to-cycle jitter and a slow drift of a few
        % over the run, narrow enough that start-up and fade are not steady
        (common practice, no source).
    steady_edge_pct : float
        Floor (% of the steady rate) of the tighter band that places the
        steady start and end: the core is trimmed at each end to the first
        (last) cycle whose smoothed rate lies within
        ``max(steady_edge_pct, 4 robust sd)`` of the core's trend line.
        Default 1 %: a start-up ramp that approaches the steady rate
        gradually is still start-up until it is within 1 % (common practice,
        no source).
    steady_min_cycles : int
        Shortest steady core, in cycles. Default 50 (about 4 s at 12 Hz): a
        shorter plateau is a pause in start-up or fade, not steady running
        (common practice, no source).
    stall_factor : float
        Outside start-up, a gap between main clicks of at least this many
        local periods is a stall; a shorter gap of about 2 or 3 periods is one
        or two missed clicks. Default 3.5: a detector at 15 dB click-to-noise
        that misses one click in twenty misses two in a row about once in 400
        cycles, three in a row almost never; a silence of 3.5 periods or more
        is the engine stopping (common practice, no source).  With two
        clicks per cycle the silence counts the second clicks: a gap they
        fill is missed main clicks.
    startup_stall_factor : float
        The same limit during start-up, where an engine sputters: gaps of
        about 2, 3 or 4 periods are missed pops, not stalls. Default 4.5
        (common practice, no source).
    smoothing_cycles : int
        Width of the rolling median of the rate (cycles). Default 9: removes
        single-cycle outliers while following a start-up ramp within about
        half a second at 10-20 Hz (common practice, no source).
    extra_click_fraction : float
        An interval shorter than this fraction of the local period marks an
        extra click. Default 0.5: a real cycle is never half as long as its
        neighbours (common practice, no source).
    stray_factor : float
        One or two main clicks at the very start (end) of the list, separated
        from the rest by a silence of at least this many local periods, are
        lone clicks (a knock, a bump), not the first (last) pops of the run.
        Default 8: twice the longest start-up sputter (common practice, no
        source).
    recording_starts_mid_run, recording_ends_mid_run : bool or None
        Force whether the recording began (ended) while the engine was
        running. Default None: decided from the silence before the first
        (after the last) click, which must last at least ``stall_factor``
        local periods to show that the engine was quiet.

    Returns
    -------
    Timeline

    Raises
    ------
    popmeter.errors.UsageError
        ``clicks_per_cycle`` is not 1 or 2, ``duration_s`` is not positive,
        ``ignition_at_s`` lies outside the recording, or an option is out of
        range.
    """
    if clicks_per_cycle not in (1, 2):
        raise UsageError(f"clicks_per_cycle must be 1 or 2, got {clicks_per_cycle!r}")
    if not (duration_s > 0 and math.isfinite(duration_s)):
        raise UsageError(f"duration_s must be a positive number of seconds, got {duration_s!r}")
    if ignition_at_s is not None and not (0.0 <= ignition_at_s <= duration_s):
        raise UsageError(
            f"--ignition-at {ignition_at_s} s lies outside the recording (0 to {duration_s:.2f} s)"
        )
    if not 0 < steady_tolerance_pct < 100:
        raise UsageError(
            f"steady_tolerance_pct must be between 0 and 100, got {steady_tolerance_pct}"
        )
    if not 0 < steady_edge_pct <= steady_tolerance_pct:
        raise UsageError(
            f"steady_edge_pct must be above 0 and at most steady_tolerance_pct, got {steady_edge_pct}"
        )
    if steady_min_cycles < 3:
        raise UsageError(f"steady_min_cycles must be at least 3, got {steady_min_cycles}")
    if not 1.5 < stall_factor <= startup_stall_factor:
        raise UsageError(
            "stall_factor must be above 1.5 periods and at most startup_stall_factor, got "
            f"{stall_factor} and {startup_stall_factor}"
        )

    warnings: list[str] = []
    summary: dict[str, float | int | None] = {k: None for k in SUMMARY_KEYS}
    tol = steady_tolerance_pct / 100.0
    edge = steady_edge_pct / 100.0

    main = sorted((c for c in clicks if int(c.kind) == 0), key=lambda c: float(c.time_s))
    second = np.array(sorted(float(c.time_s) for c in clicks if int(c.kind) != 0))
    if clicks_per_cycle == 1 and second.size:
        warnings.append(
            f"{second.size} clicks of kind 1 on a one-click engine were not used for cycles"
        )
        second = np.zeros(0)
    t_raw = np.array([float(c.time_s) for c in main])
    strength = np.array([float(getattr(c, "strength", 0.0) or 0.0) for c in main])

    t, _, extra = _remove_extra_clicks(
        t_raw, strength, fraction=extra_click_fraction, window=smoothing_cycles
    )
    if extra:
        warnings.append(
            f"{len(extra)} extra main click(s) closer than {extra_click_fraction:g} of the local "
            f"period to a neighbour were set aside (first at {extra[0]:.3f} s)"
        )

    t, stray = _remove_stray_clicks(t, factor=stray_factor, window=smoothing_cycles)
    if stray:
        where = ", ".join(f"{x:.3f}" for x in stray[:4])
        warnings.append(
            f"{len(stray)} lone click(s) at {where} s, separated from the run by a silence of "
            f"more than {stray_factor:g} periods, were set aside (a knock or a bump, not the "
            "engine)"
        )

    # First / last click: the main clicks, plus second clicks inside the run:
    # closer to the first (last) main click than a stall would be, so that a
    # second click whose main click was missed or mislabelled still counts.
    if t.size:
        lo, hi = float(t[0]), float(t[-1])
        if second.size and t.size > 1:
            p0 = stall_factor * float(np.median(np.diff(t[:6])))
            p1 = stall_factor * float(np.median(np.diff(t[-6:])))
            inside = second[(second >= lo - p0) & (second <= hi + p1)]
            if inside.size:
                lo, hi = min(lo, float(inside[0])), max(hi, float(inside[-1]))
        summary["first_click_s"] = lo
        summary["last_click_s"] = hi
        summary["run_s"] = hi - lo
    else:
        warnings.append(
            "no main clicks: first_click_s, last_click_s, run_s and every rate metric are null"
        )

    # ----------------------------------------------------------- cycles, stalls
    # Pass 1 uses the strict stall limit everywhere; pass 2 relaxes it before
    # the steady start (or the rate peak) found in pass 1, then re-finds the
    # steady state on the final cycles.
    local = _local_period(t, smoothing_cycles)
    factor = np.full(max(t.size - 1, 0), float(stall_factor))
    cyc = _cycles_from_gaps(t, local, factor, second)
    found = _steady_state(cyc, tol=tol, edge=edge, min_cycles=steady_min_cycles, w=smoothing_cycles)
    if t.size >= 2:
        boundary = found.start_s if found.core is not None else found.peak_s
        relaxed = np.where(t[:-1] < boundary, float(startup_stall_factor), float(stall_factor))
        if not np.array_equal(relaxed, factor):
            first = cyc
            cyc = _cycles_from_gaps(t, local, relaxed, second)
            # (the steady state depends on the cycles' starts and periods only:
            # when the relaxed limit bridged no gap, pass 1 found it already)
            if not (
                np.array_equal(cyc.starts, first.starts)
                and np.array_equal(cyc.periods, first.periods)
            ):
                found = _steady_state(
                    cyc, tol=tol, edge=edge, min_cycles=steady_min_cycles, w=smoothing_cycles
                )
    starts, periods, missed = cyc.starts, cyc.periods, cyc.missed
    rates = 1.0 / periods if periods.size else np.zeros(0)
    smooth = found.smooth
    n_cyc = int(starts.size)

    stalls: list[Stall] = []
    for s0, s1 in cyc.stall_spans:
        stalls.append(Stall(start_s=s0, end_s=s1, duration_s=s1 - s0))
    n_missed = int(missed.sum())
    if n_missed:
        warnings.append(
            f"{n_missed} missed main click(s) filled in inside gaps of about 2-4 periods "
            "(each flagged on its cycle; the rate is not halved)"
        )
    summary["cycles"] = n_cyc
    summary["stalls"] = len(stalls) if t.size else None
    if stalls:
        warnings.append(
            f"{len(stalls)} stall(s): silences of at least {stall_factor:g} local periods "
            f"inside the run (longest {max(s.duration_s for s in stalls):.2f} s)"
        )

    # ----------------------------------------------------------- steady state
    steady = found.core
    if steady is None:
        if t.size:
            why = (
                f"only {n_cyc} cycles (fewer than {steady_min_cycles})"
                if n_cyc < steady_min_cycles
                else f"the smoothed rate never stayed within +/-{steady_tolerance_pct:g} % "
                f"of its median for {steady_min_cycles} cycles"
            )
            warnings.append(
                f"no steady state: {why}; steady_start_s, steady_end_s, steady_rate_hz, "
                "steady_rate_iqr_hz, steady_rate_sem_hz, jitter_pct, drift_pct_per_min and "
                "time_to_steady_s are null"
            )
    else:
        i0, i1 = steady
        summary["steady_start_s"] = float(starts[i0])
        summary["steady_end_s"] = float(starts[i1 - 1] + periods[i1 - 1])
        r_st = rates[i0:i1]
        summary["steady_rate_hz"] = float(np.median(r_st))
        q75, q25 = np.percentile(r_st, [75, 25])
        summary["steady_rate_iqr_hz"] = float(q75 - q25)
        summary["steady_rate_sem_hz"] = _batch_sem(starts[i0:i1], periods[i0:i1])
        if summary["steady_rate_sem_hz"] is None:
            warnings.append("steady_rate_sem_hz is null: fewer than 20 steady cycles")
        summary["jitter_pct"] = _jitter_pct(starts[i0:i1], periods[i0:i1], missed[i0:i1])
        if summary["jitter_pct"] is None:
            warnings.append("jitter_pct is null: fewer than 3 pairs of heard successive cycles")
        slope_hz_per_s = _drift_slope(starts[i0:i1], periods[i0:i1])
        summary["drift_pct_per_min"] = float(
            slope_hz_per_s * 60.0 / float(summary["steady_rate_hz"]) * 100.0
        )

    # ----------------------------------------------------------- mid-run edges
    starts_mid = recording_starts_mid_run
    ends_mid = recording_ends_mid_run
    if t.size:
        first, last = float(summary["first_click_s"]), float(summary["last_click_s"])
        p_first = float(periods[: min(5, n_cyc)].mean()) if n_cyc else 0.0
        p_last = float(periods[-min(5, n_cyc) :].mean()) if n_cyc else 0.0
        if starts_mid is None:
            starts_mid = bool(n_cyc) and first < stall_factor * p_first
        if ends_mid is None:
            ends_mid = bool(n_cyc) and (duration_s - last) < stall_factor * p_last
        if starts_mid:
            warnings.append(
                f"the recording starts mid-run (first click at {first:.3f} s, no silence "
                "before it): no heating phase; the start of the run was not recorded"
            )
        if ends_mid:
            warnings.append(
                f"the run did not end before the recording did (last click at {last:.3f} s, "
                f"recording ends at {duration_s:.3f} s): no 'after' silence, last_click_s is "
                "the last click recorded, not the flame-out"
            )
    starts_mid = bool(starts_mid)
    ends_mid = bool(ends_mid)

    # ----------------------------------------------------------- phases
    phases: list[Phase] = []
    if t.size:
        first = float(summary["first_click_s"])
        last = float(summary["last_click_s"])
        if not starts_mid and first > 0:
            phases.append(Phase("heating", 0.0, first))
        if steady is not None:
            s0 = float(summary["steady_start_s"])
            s1 = min(float(summary["steady_end_s"]), last)
            if s0 > first:
                phases.append(Phase("startup", first, s0))
            phases.append(Phase("steady", s0, s1))
            if last > s1:
                phases.append(Phase("fade", s1, last))
        elif n_cyc:
            # No steady state: split the run at the peak of the smoothed rate.
            peak = found.peak_s
            if peak > first:
                phases.append(Phase("startup", first, peak))
            if last > peak:
                phases.append(Phase("fade", peak, last))
        if not ends_mid and duration_s > last:
            phases.append(Phase("after", last, float(duration_s)))
    else:
        phases.append(Phase("heating", 0.0, float(duration_s)))

    cycles = [
        Cycle(start_s=s, period_s=p, rate_hz=r, phase=_phase_at(phases, s), missed_clicks=m)
        for s, p, r, m in zip(
            starts.tolist(), periods.tolist(), rates.tolist(), missed.tolist(), strict=True
        )
    ]

    # ----------------------------------------------------------- other metrics
    if steady is not None:
        if starts_mid:
            warnings.append(
                "time_to_steady_s is null: the recording starts mid-run, the first click of "
                "the run was not recorded"
            )
        else:
            summary["time_to_steady_s"] = float(summary["steady_start_s"]) - float(
                summary["first_click_s"]
            )
    if ignition_at_s is None:
        warnings.append("ignition_delay_s is null: no ignition time given (use --ignition-at)")
    elif not t.size:
        warnings.append("ignition_delay_s is null: no clicks")
    elif starts_mid:
        warnings.append(
            "ignition_delay_s is null: the recording starts mid-run, the first click of the run "
            "was not recorded"
        )
    elif ignition_at_s > float(summary["first_click_s"]):
        warnings.append(
            f"ignition_delay_s is null: the ignition time {ignition_at_s:.3f} s is after the "
            f"first click at {float(summary['first_click_s']):.3f} s"
        )
    else:
        summary["ignition_delay_s"] = float(summary["first_click_s"]) - float(ignition_at_s)

    if ring_hz is not None and math.isfinite(ring_hz) and ring_hz > 0:
        summary["ring_hz"] = float(ring_hz)
    else:
        kept = set(t.tolist())
        rings = [
            float(c.ring_hz)
            for c in main
            if float(c.time_s) in kept
            and getattr(c, "ring_hz", None) is not None
            and math.isfinite(float(c.ring_hz))
            and float(c.ring_hz) > 0
        ]
        if rings:
            summary["ring_hz"] = float(np.median(rings))
        else:
            warnings.append("ring_hz is null: no click carried a measurable ring")

    return Timeline(
        cycles=cycles,
        phases=phases,
        stalls=stalls,
        summary=summary,
        warnings=warnings,
        smoothed_rate=(starts.copy(), smooth.copy()),
        main_click_times_s=t,
        extra_click_times_s=extra,
        missed_clicks=n_missed,
        recording_starts_mid_run=starts_mid,
        recording_ends_mid_run=ends_mid,
    )


# --------------------------------------------------------------------------- steps


def _local_period(t: np.ndarray, window: int) -> np.ndarray:
    """Local period (s) at each interval between main clicks: the rolling
    median of the intervals, recomputed without the intervals of 1.5 local
    periods or more (gaps must not lengthen the period they are judged by)."""
    if t.size < 2:
        return np.zeros(0)
    d = np.diff(t)
    local = rolling_median(d, window, shrink_edges=False)
    long_gap = d >= 1.5 * local
    if long_gap.any() and not long_gap.all():
        local = rolling_median(np.where(long_gap, np.nan, d), window, shrink_edges=False)
        bad = ~np.isfinite(local)
        if bad.any():
            idx = np.flatnonzero(~bad)
            local[bad] = np.interp(np.flatnonzero(bad), idx, local[idx])
    return local


@dataclass
class _Cycles:
    starts: np.ndarray
    periods: np.ndarray
    missed: np.ndarray  # 1 where the cycle's own click was filled in
    stall_gaps: list[tuple[int, int]]  # (i, i + 1) main-click indices around each stall
    # (start, end) in s of each stall: its gap's longest silence, second clicks counted
    stall_spans: list[tuple[float, float]]


def _cycles_from_gaps(t: np.ndarray, local: np.ndarray, factor: np.ndarray,
                      second: np.ndarray | None = None) -> _Cycles:
    """Cycles from main-click times: a gap of ``r`` local periods is one cycle
    (r < 1.5), ``round(r)`` cycles with filled-in clicks (1.5 <= r < factor)
    or a stall (r >= factor).  With ``second`` (the second clicks' times, sorted),
    a gap is a stall only if the longest silence in it, second clicks
    counted, is ``factor`` local periods too: where second clicks are heard
    all along, the engine kept running and only its main clicks were missed."""
    # (on whole arrays, the arithmetic of the plain loop: per gap i, r = gap / local[i];
    # a stall if r >= factor[i], else k = round(r) (half to even) cycles when r >= 1.5,
    # else 1, cycle j starting at t[i] + j * gap / k, lasting gap / k)
    t = np.asarray(t, dtype=float)
    n = max(t.size - 1, 0)
    gap = t[1:] - t[:-1]
    r = gap / local[:n]
    stall = r >= factor[:n]
    spans: dict[int, tuple[float, float]] = {}
    for i in np.flatnonzero(stall).tolist():
        if second is not None and second.size:
            spans[i] = _longest_silence(float(t[i]), float(t[i + 1]), second)
            stall[i] = spans[i][1] - spans[i][0] >= factor[i] * local[i]
        else:
            spans[i] = (float(t[i]), float(t[i + 1]))
    go = np.flatnonzero(~stall)
    rg = r[go]
    k = np.where(rg >= 1.5, np.round(rg), 1.0).astype(np.int64)
    at = np.repeat(go, k)  # the gap of each cycle
    kc = np.repeat(k, k)
    j = np.arange(at.size) - np.repeat(np.cumsum(k) - k, k)  # its place within the gap
    g = gap[at]
    starts = t[at] + j * g / kc
    at_stall = np.flatnonzero(stall).tolist()
    return _Cycles(starts, g / kc, (j > 0).astype(int), [(i, i + 1) for i in at_stall],
                   [spans[i] for i in at_stall])


def _longest_silence(t_a: float, t_b: float, second: np.ndarray) -> tuple[float, float]:
    """Start and end (s) of the longest silence between ``t_a`` and ``t_b`` (two
    main clicks) with the second clicks (sorted) between them counted."""
    inside = second[np.searchsorted(second, t_a, side="right"):np.searchsorted(second, t_b)]
    if inside.size == 0:
        return t_a, t_b
    edges = np.concatenate([[t_a], inside, [t_b]])
    j = int(np.argmax(np.diff(edges)))
    return float(edges[j]), float(edges[j + 1])


@dataclass
class _Steady:
    smooth: np.ndarray
    core: tuple[int, int] | None  # cycle index range [i0, i1) after edge trimming
    start_s: float
    peak_s: float


def _steady_state(cyc: _Cycles, *, tol: float, edge: float, min_cycles: int, w: int) -> _Steady:
    """Smoothed rate, steady stretch (core found with ``tol``, edges trimmed
    with ``edge``) and the time of the smoothed-rate peak."""
    rates = 1.0 / cyc.periods if cyc.periods.size else np.zeros(0)
    smooth = rolling_median(rates, w)
    peak_s = float(cyc.starts[int(np.argmax(smooth))]) if smooth.size else math.inf
    if smooth.size < min_cycles:
        return _Steady(smooth, None, math.inf, peak_s)
    core = _find_steady(smooth, tol=tol, min_cycles=min_cycles)
    if core is None:
        return _Steady(smooth, None, math.inf, peak_s)
    i0, i1 = core
    # Trim the ends to the tighter band around the core's robust trend line.
    ts, ss = cyc.starts[i0:i1], smooth[i0:i1]
    slope = _theil_sen_slope(ts, ss)
    mid_t = float(np.median(ts))
    level = float(np.median(ss - slope * (ts - mid_t)))
    resid = (smooth - (level + slope * (cyc.starts - mid_t))) / level
    core_resid = resid[i0:i1]
    sd = 1.4826 * float(np.median(np.abs(core_resid - np.median(core_resid))))
    band = max(edge, 4.0 * sd)
    # Start at the first run of ``w`` consecutive cycles inside the band, end
    # at the last such run: a single noisy cycle inside the band is not yet
    # steady running.
    runs = _true_runs(np.abs(core_resid) <= band)
    runs = runs[runs[:, 1] - runs[:, 0] >= min(w, i1 - i0)] if runs.size else runs
    if runs.size == 0:
        return _Steady(smooth, None, math.inf, peak_s)
    i0, i1 = i0 + int(runs[0, 0]), i0 + int(runs[-1, 1])
    if i1 - i0 < min_cycles:
        return _Steady(smooth, None, math.inf, peak_s)
    return _Steady(smooth, (i0, i1), float(cyc.starts[i0]), peak_s)


def _phase_at(phases: list[Phase], time_s: float) -> str:
    """Name of the phase holding ``time_s`` (the later one on a boundary)."""
    name = phases[0].name if phases else "startup"
    for p in phases:
        if p.start_s <= time_s:
            name = p.name
    return name


def _find_steady(smooth: np.ndarray, *, tol: float, min_cycles: int) -> tuple[int, int] | None:
    """Longest stretch of cycles with ``|smooth - median| <= tol * median``.

    Candidate band centres are the 1st..99th percentiles of the smoothed rate;
    for each, the longest run of consecutive cycles inside the band is found,
    and the longest run over all centres kept. The centre is then moved to the
    median of that run and the run re-found (the run that overlaps the previous
    one), until the run no longer changes: the stretch lies within the band
    around its own median.
    """
    s = np.asarray(smooth, float)
    cands = np.unique(np.percentile(s, np.arange(1, 100)))
    best: tuple[int, int] | None = None
    for c in cands:
        runs = _true_runs(np.abs(s - c) <= tol * c)
        if runs.size == 0:
            continue
        k = int(np.argmax(runs[:, 1] - runs[:, 0]))
        a, b = int(runs[k, 0]), int(runs[k, 1])
        if best is None or b - a > best[1] - best[0]:
            best = (a, b)
    if best is None:
        return None
    for _ in range(20):
        m = float(np.median(s[best[0] : best[1]]))
        runs = _true_runs(np.abs(s - m) <= tol * m)
        overlap = [(int(a), int(b)) for a, b in runs if min(b, best[1]) > max(a, best[0])]
        if not overlap:
            break
        new = max(overlap, key=lambda ab: ab[1] - ab[0])
        if new == best:
            break
        best = new
    if best[1] - best[0] < min_cycles:
        return None
    return best


def _jitter_pct(starts: np.ndarray, periods: np.ndarray, missed: np.ndarray) -> float | None:
    """Cycle-to-cycle period jitter (%), from successive period differences.

    ``jitter = 1.4826 * median(|P[i+1] - P[i]|) / sqrt(2) / mean(P) * 100``:
    the robust (median absolute) scale of the successive differences, which
    for independent Gaussian periods equals their standard deviation times
    sqrt(2) (mean square successive difference, von Neumann et al., Ann.
    Math. Stat. 12, 153, 1941; 1.4826 is the normal consistency factor of the
    median absolute deviation). So it reads as the coefficient of variation of
    the period, while slow drift barely contributes and a few irregular
    cycles at the edges of the steady stretch do not dominate.

    Only pairs of successive cycles whose clicks were both heard and which are
    not separated by a stall are used.
    """
    p = np.asarray(periods, float)
    m = np.asarray(missed, int)
    if p.size < 4:
        return None
    # Cycle i is a measured interval when neither it nor the next one is filled in.
    heard = (m == 0) & np.append(m[1:] == 0, False)
    contiguous = np.isclose(starts[:-1] + p[:-1], starts[1:], rtol=0, atol=1e-6)
    ok = heard[:-1] & heard[1:] & contiguous
    dp = np.diff(p)[ok]
    if dp.size < 3:
        return None
    return float(1.4826 * np.median(np.abs(dp)) / math.sqrt(2.0) / p.mean() * 100.0)
