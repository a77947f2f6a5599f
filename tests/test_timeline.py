"""Tests of popmeter.timeline against clean synthetic click lists with known truth.

The click lists are built here from a rate plan (heating, start-up ramp,
steady rate with jitter, fade, silence), so every metric has an exact ground
truth. Outside references are named beside the checks that use them.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import ndimage, stats

from popmeter.errors import UsageError
from popmeter.timeline import (
    SUMMARY_KEYS,
    _block_medians,
    _block_rates,
    _cycles_from_gaps,
    _median_pairwise_slope,
    build_timeline,
    rolling_median,
)

RATE_HZ = 12.0

INTERFACE_KEYS = {
    "first_click_s",
    "last_click_s",
    "steady_start_s",
    "steady_end_s",
    "steady_rate_hz",
    "steady_rate_iqr_hz",
    "jitter_pct",
    "drift_pct_per_min",
    "stalls",
    "cycles",
    "run_s",
    "time_to_steady_s",
    "ignition_delay_s",
    "ring_hz",
    "diaphragm_stiffness_kpa_per_ml",
}


def click(time_s: float, kind: int = 0, ring_hz: float = 1500.0) -> SimpleNamespace:
    """A stand-in with the fields of popmeter.detection.Click."""
    return SimpleNamespace(
        time_s=float(time_s),
        sample=round(time_s * 48000),
        level_dbfs=-12.0,
        strength=1.0,
        ring_hz=ring_hz,
        decay_s=0.01,
        kind=kind,
        cycle=None,
    )


def make_run(
    *,
    heating_s: float = 5.0,
    startup_s: float = 8.0,
    steady_s: float = 40.0,
    fade_s: float = 8.0,
    after_s: float = 4.0,
    rate_hz: float = RATE_HZ,
    jitter_pct: float = 1.0,
    drift_pct_per_min: float = 0.0,
    start_frac: float = 0.5,
    fade_frac: float = 0.6,
    seed: int = 1,
) -> dict:
    """Main-click times from a rate plan, with the true phase boundaries.

    Start-up: the rate rises linearly from ``start_frac`` of the steady rate;
    steady: ``rate_hz`` (plus linear drift) with Gaussian period jitter; fade:
    the rate falls linearly to ``fade_frac`` of the steady rate.
    """
    rng = np.random.default_rng(seed)
    t0 = heating_s
    t_steady = t0 + startup_s
    t_fade = t_steady + steady_s
    t_end = t_fade + fade_s
    times: list[float] = []
    steady_rates: list[float] = []
    t = t0
    while t < t_end:
        times.append(t)
        if t < t_steady:
            u = (t - t0) / startup_s if startup_s > 0 else 1.0
            rate = rate_hz * (start_frac + (1 - start_frac) * u)
            jit = 3.0
        elif t < t_fade:
            rate = rate_hz * (1 + drift_pct_per_min / 100 * (t - t_steady) / 60)
            jit = jitter_pct
        else:
            u = (t - t_fade) / fade_s
            rate = rate_hz * (1 - (1 - fade_frac) * u)
            jit = jitter_pct
        period = (1 / rate) * (1 + jit / 100 * rng.standard_normal())
        if t_steady <= t < t_fade and t + period < t_fade:
            steady_rates.append(1 / period)
        t += period
    duration = times[-1] + after_s
    return {
        "times": np.array(times),
        "duration_s": duration,
        "steady_start_s": t_steady,
        "steady_end_s": t_fade,
        "startup_s": startup_s,
        "fade_s": fade_s,
        "steady_rate_hz": float(np.median(steady_rates)),
        "steady_rates": np.array(steady_rates),
    }


def timeline_of(times, duration_s, **kw):
    return build_timeline(
        [click(t) for t in times], duration_s=duration_s, clicks_per_cycle=1, **kw
    )


def edge_tolerance_s(phase_s: float) -> float:
    """The project's goal: within 2 s or 10 % of the adjacent phase length."""
    return max(2.0, 0.1 * phase_s)


# --------------------------------------------------------------------------- metrics


def test_clean_run_metrics_match_truth():
    run = make_run()
    tl = timeline_of(run["times"], run["duration_s"])
    s = tl.summary
    assert set(SUMMARY_KEYS) >= INTERFACE_KEYS
    assert set(s) == set(SUMMARY_KEYS)
    assert s["first_click_s"] == run["times"][0]
    assert s["last_click_s"] == run["times"][-1]
    assert s["run_s"] == pytest.approx(run["times"][-1] - run["times"][0])
    assert abs(s["steady_rate_hz"] / run["steady_rate_hz"] - 1) < 0.005
    assert abs(s["steady_start_s"] - run["steady_start_s"]) <= edge_tolerance_s(run["startup_s"])
    assert abs(s["steady_end_s"] - run["steady_end_s"]) <= edge_tolerance_s(run["fade_s"])
    assert s["time_to_steady_s"] == pytest.approx(s["steady_start_s"] - s["first_click_s"])
    assert s["stalls"] == 0
    assert s["cycles"] == len(run["times"]) - 1
    assert s["ring_hz"] == pytest.approx(1500.0)
    names = [p.name for p in tl.phases]
    assert names == ["heating", "startup", "steady", "fade", "after"]
    assert tl.phases[0].start_s == 0.0 and tl.phases[0].end_s == run["times"][0]
    assert tl.phases[-1].end_s == run["duration_s"]
    # phases tile the recording without gaps
    for a, b in zip(tl.phases[:-1], tl.phases[1:], strict=True):
        assert a.end_s == pytest.approx(b.start_s)
    assert not tl.recording_starts_mid_run and not tl.recording_ends_mid_run


def test_steady_iqr_matches_scipy():
    # scipy.stats.iqr as the reference for the interquartile range.
    run = make_run(seed=4)
    tl = timeline_of(run["times"], run["duration_s"])
    s = tl.summary
    rates = np.array([c.rate_hz for c in tl.cycles if c.phase == "steady"])
    assert s["steady_rate_iqr_hz"] == pytest.approx(stats.iqr(rates), rel=1e-9)


def test_jitter_equals_period_coefficient_of_variation():
    # For independent Gaussian periods the successive-difference scale over sqrt(2)
    # equals the standard deviation (von Neumann et al., Ann. Math. Stat. 12, 153, 1941);
    # compared with numpy's sample standard deviation of the same periods.
    rng = np.random.default_rng(7)
    periods = (1 / RATE_HZ) * (1 + 0.02 * rng.standard_normal(3000))
    times = 2.0 + np.concatenate(([0.0], np.cumsum(periods)))
    tl = timeline_of(times, times[-1] + 2.0, recording_starts_mid_run=False)
    cv_pct = 100 * np.std(periods, ddof=1) / np.mean(periods)
    assert tl.summary["jitter_pct"] == pytest.approx(cv_pct, rel=0.08)


def test_drift_recovers_linear_drift():
    # A linear rate drift of -3 %/min over 3 min; Theil-Sen (Sen, JASA 63, 1968)
    # as implemented by scipy.stats.theilslopes gives the slope.
    run = make_run(steady_s=180.0, drift_pct_per_min=-3.0, jitter_pct=0.5, seed=3)
    tl = timeline_of(run["times"], run["duration_s"], steady_tolerance_pct=8.0)
    assert tl.summary["drift_pct_per_min"] == pytest.approx(-3.0, abs=0.3)


def test_median_pairwise_slope_equals_scipy_theilslopes():
    # scipy.stats.theilslopes as the outside reference: the same slope, bit for
    # bit, on sorted and unsorted abscissae with ties.
    rng = np.random.default_rng(21)
    for n in (2, 3, 10, 257, 1000):
        x_sorted = np.sort(rng.uniform(0.0, 300.0, n))
        x_ties = np.round(rng.uniform(0.0, 20.0, n))
        for x in (x_sorted, x_ties):
            if np.ptp(x) == 0:
                continue
            y = 12.0 + 0.01 * x + rng.normal(0.0, 0.2, n)
            assert _median_pairwise_slope(x, y) == stats.theilslopes(y, x).slope
    with pytest.raises(ValueError):
        _median_pairwise_slope(np.ones(4), np.arange(4.0))


def test_block_statistics_equal_a_loop_over_numpy_array_split():
    # numpy's array_split, median and sum, one part at a time, as the reference.
    rng = np.random.default_rng(22)
    for n, blocks in ((2000, 1000), (4321, 1000), (1000, 1000), (83, 10), (16, 2), (4001, 500)):
        starts = np.cumsum(rng.uniform(0.05, 0.1, n))
        periods = rng.uniform(0.05, 0.1, n)
        parts = np.array_split(periods, blocks)
        medians = [np.median(p) for p in parts]
        assert np.array_equal(_block_medians(periods, blocks), medians)
        mid, rate = _block_rates(starts, periods, blocks)
        mid_ref = [t[0] + 0.5 * p.sum() for t, p in zip(np.array_split(starts, blocks), parts)]
        assert np.array_equal(mid, mid_ref)
        assert np.array_equal(rate, [p.size / p.sum() for p in parts])


def test_steady_sem_is_close_to_textbook_standard_error():
    # For independent periods the batch-means error approaches sigma / sqrt(n)
    # (textbook standard error of the mean); 10 blocks give about +/-25 %.
    rng = np.random.default_rng(11)
    periods = (1 / RATE_HZ) * (1 + 0.02 * rng.standard_normal(2000))
    times = 2.0 + np.concatenate(([0.0], np.cumsum(periods)))
    tl = timeline_of(times, times[-1] + 2.0)
    rates = 1 / periods
    textbook = np.std(rates, ddof=1) / math.sqrt(rates.size)
    assert 0.5 * textbook < tl.summary["steady_rate_sem_hz"] < 1.6 * textbook


def test_rolling_median_matches_scipy_in_the_interior():
    # scipy.ndimage.median_filter as the reference, away from the edges.
    x = np.random.default_rng(0).normal(size=200)
    ours = rolling_median(x, 9)
    ref = ndimage.median_filter(x, size=9, mode="nearest")
    assert np.allclose(ours[4:-4], ref[4:-4])
    assert ours[0] == x[0]
    assert ours[1] == np.median(x[:3])


def _cycles_by_loop(t, local, factor):
    # the plain form _cycles_from_gaps replaces: one gap at a time on Python floats
    starts, periods, missed, stalls = [], [], [], []
    tl, local_l, factor_l = t.tolist(), local.tolist(), factor.tolist()
    for i in range(max(t.size - 1, 0)):
        gap = tl[i + 1] - tl[i]
        r = gap / local_l[i]
        if r >= factor_l[i]:
            stalls.append((i, i + 1))
            continue
        k = max(1, round(r)) if r >= 1.5 else 1
        for j in range(k):
            starts.append(tl[i] + j * gap / k)
            periods.append(gap / k)
            missed.append(1 if j > 0 else 0)
    return starts, periods, missed, stalls


def test_cycles_from_gaps_equals_the_plain_loop():
    # reference: the loop over gaps on Python floats (Python's round: half to
    # even), value for value; gaps of 1, 1.5, 2.5 (ties), several and stalls
    rng = np.random.default_rng(2)
    for n in (0, 1, 2, 3, 50, 400):
        period = rng.uniform(0.03, 0.2)
        mult = rng.choice([1.0, 1.0, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 7.0, 12.0], size=max(n - 1, 0))
        t = 1.0 + np.concatenate([[0.0], np.cumsum(mult * period)])[:n]
        local = np.full(max(n - 1, 0), period) * rng.choice([1.0, 1.0 + 1e-3], max(n - 1, 0))
        factor = rng.choice([6.0, 10.0], max(n - 1, 0))
        cyc = _cycles_from_gaps(t, local, factor)
        starts, periods, missed, stalls = _cycles_by_loop(t, local, factor)
        assert np.array_equal(cyc.starts, np.array(starts, float))
        assert np.array_equal(cyc.periods, np.array(periods, float))
        assert np.array_equal(cyc.missed, np.array(missed, int))
        assert cyc.missed.dtype == np.array(missed, int).dtype
        assert cyc.stall_gaps == stalls


@pytest.mark.filterwarnings("ignore:All-NaN slice")  # (an end of the shortest series)
def test_rolling_median_equals_numpy_nanmedian_of_the_windows_exactly():
    # reference: numpy.nanmedian over each full window (the form used when NaN
    # are present), bit for bit, with and without NaN and with ties
    rng = np.random.default_rng(1)
    for n in (5, 9, 40, 301):
        for window in (3, 4, 9, 25):
            x = 10.0 + rng.normal(size=n)
            if rng.integers(2):
                x = np.round(x, 1)
            for with_nan in (False, True):
                if with_nan:
                    x = x.copy()
                    x[rng.integers(0, n, 2)] = np.nan
                half = min(window // 2, (n - 1) // 2)
                win = np.lib.stride_tricks.sliding_window_view(x, 2 * half + 1)
                got = rolling_median(x, window)[half : n - half]
                assert np.array_equal(got, np.nanmedian(win, axis=1), equal_nan=True)


# --------------------------------------------------------------------------- irregular clicks


def test_clear_stalls_counted_exactly_and_steady_not_broken():
    run = make_run(seed=5)
    times = list(run["times"])
    # three silences of about 8 periods in steady running and one in the fade
    removed_spans = []
    for t_center in (20.0, 30.0, 40.0, 55.0):
        idx = int(np.searchsorted(times, t_center))
        removed_spans.append((times[idx - 1], times[idx + 7]))
        del times[idx : idx + 7]
    tl = timeline_of(times, run["duration_s"])
    assert tl.summary["stalls"] == 4
    for st, (a, b) in zip(tl.stalls, removed_spans, strict=True):
        assert st.start_s == a and st.end_s == b
        assert st.duration_s == pytest.approx(b - a)
    s = tl.summary
    assert abs(s["steady_rate_hz"] / run["steady_rate_hz"] - 1) < 0.005
    assert abs(s["steady_start_s"] - run["steady_start_s"]) <= edge_tolerance_s(run["startup_s"])
    assert any("stall" in w for w in tl.warnings)


def test_missed_clicks_are_filled_in_not_halved():
    run = make_run(seed=6)
    times = list(run["times"])
    n_before = len(times)
    for t_center in (18.0, 22.5, 27.0, 33.3, 41.0, 47.0):
        idx = int(np.searchsorted(times, t_center))
        del times[idx]
    tl = timeline_of(times, run["duration_s"])
    assert tl.missed_clicks == 6
    assert sum(c.missed_clicks for c in tl.cycles) == 6
    assert tl.summary["stalls"] == 0
    assert tl.summary["cycles"] == n_before - 1
    steady = [c for c in tl.cycles if c.phase == "steady"]
    assert min(c.rate_hz for c in steady) > 0.8 * RATE_HZ
    assert abs(tl.summary["steady_rate_hz"] / run["steady_rate_hz"] - 1) < 0.005
    assert any("missed" in w for w in tl.warnings)


def test_spurious_extra_clicks_do_not_double_the_rate():
    run = make_run(seed=8)
    times = list(run["times"])
    rng = np.random.default_rng(2)
    extras = []
    for t_center in (15.0, 25.0, 35.0, 45.0, 58.0):
        idx = int(np.searchsorted(times, t_center))
        gap = times[idx + 1] - times[idx]
        extras.append(times[idx] + gap * rng.uniform(0.2, 0.8))
    tl = timeline_of(sorted(times + extras), run["duration_s"])
    assert tl.extra_click_times_s == pytest.approx(sorted(extras))
    assert tl.summary["cycles"] == len(run["times"]) - 1
    assert max(c.rate_hz for c in tl.cycles if c.phase == "steady") < 1.2 * RATE_HZ
    assert abs(tl.summary["steady_rate_hz"] / run["steady_rate_hz"] - 1) < 0.005
    assert any("extra" in w for w in tl.warnings)


def test_extra_click_next_to_the_first_or_last_click():
    run = make_run(seed=9)
    times = list(run["times"])
    p = 1 / RATE_HZ
    early = times[0] + 0.05 * p
    late = times[-1] - 0.1 * p
    # At the ends the rhythm alone cannot tell which of two close clicks is the
    # real one: the weaker goes.
    clicks = [click(t) for t in times] + [click(early), click(late)]
    clicks[-1].strength = clicks[-2].strength = 0.4
    tl = build_timeline(clicks, duration_s=run["duration_s"], clicks_per_cycle=1)
    assert tl.summary["first_click_s"] == times[0]
    assert tl.summary["last_click_s"] == times[-1]
    assert tl.extra_click_times_s == pytest.approx(sorted([early, late]))


# --------------------------------------------------------------------------- unusual runs


def test_run_that_never_settles():
    rng = np.random.default_rng(3)
    t, times = 3.0, []
    while t < 50.0:
        times.append(t)
        rate = RATE_HZ * (1 + 0.2 * math.sin(2 * math.pi * (t - 3.0) / 3.0))
        t += (1 / rate) * (1 + 0.03 * rng.standard_normal())
    tl = timeline_of(times, 53.0)
    s = tl.summary
    for key in (
        "steady_start_s",
        "steady_end_s",
        "steady_rate_hz",
        "jitter_pct",
        "drift_pct_per_min",
        "time_to_steady_s",
        "steady_rate_iqr_hz",
    ):
        assert s[key] is None, key
    assert any("no steady state" in w for w in tl.warnings)
    assert s["first_click_s"] == times[0] and s["last_click_s"] == times[-1]
    assert "steady" not in [p.name for p in tl.phases]
    assert tl.phases[0].name == "heating"
    # every None has its reason in the warnings
    text = " ".join(tl.warnings)
    for key, value in s.items():
        if value is None and key != "diaphragm_stiffness_kpa_per_ml":
            assert key in text, key


def test_recording_starts_mid_run():
    rng = np.random.default_rng(4)
    periods = (1 / RATE_HZ) * (1 + 0.01 * rng.standard_normal(600))
    times = 0.031 + np.concatenate(([0.0], np.cumsum(periods)))
    tl = timeline_of(times, times[-1] + 3.0)
    assert tl.recording_starts_mid_run
    names = [p.name for p in tl.phases]
    assert "heating" not in names and "startup" not in names
    assert names[0] == "steady"
    assert tl.summary["first_click_s"] == times[0]
    assert tl.summary["time_to_steady_s"] is None
    assert any("starts mid-run" in w for w in tl.warnings)
    assert abs(tl.summary["steady_rate_hz"] / np.median(1 / periods) - 1) < 0.005


def test_recording_ends_mid_run():
    run = make_run(fade_s=0.0, after_s=0.0, steady_s=30.0, seed=12)
    times = run["times"][:-1]
    duration = times[-1] + 0.02
    tl = timeline_of(times, duration)
    assert tl.recording_ends_mid_run
    names = [p.name for p in tl.phases]
    assert "after" not in names and "fade" not in names
    assert names[-1] == "steady"
    assert tl.summary["last_click_s"] == times[-1]
    assert any("did not end" in w for w in tl.warnings)


def test_two_click_engine_counts_main_clicks_only():
    run = make_run(seed=13)
    main = run["times"]
    second = main[:-1] + 0.45 * np.diff(main)
    second = np.append(second, main[-1] + 0.45 / RATE_HZ)
    clicks = [click(t, 0) for t in main] + [click(t, 1) for t in second]
    tl2 = build_timeline(clicks, duration_s=run["duration_s"], clicks_per_cycle=2)
    tl1 = build_timeline([click(t) for t in main], duration_s=run["duration_s"], clicks_per_cycle=1)
    assert tl2.summary["cycles"] == tl1.summary["cycles"] == len(main) - 1
    assert tl2.summary["steady_rate_hz"] == pytest.approx(tl1.summary["steady_rate_hz"])
    assert abs(tl2.summary["steady_rate_hz"] / run["steady_rate_hz"] - 1) < 0.005
    assert tl2.summary["first_click_s"] == main[0]
    assert tl2.summary["last_click_s"] == second[-1]


def test_second_click_before_a_missed_first_main_click_starts_the_run():
    """A two-click engine whose first main click was missed (or labelled as a
    second click): the run starts at the earlier second click, as long as it
    is closer to the first main click than a stall; a second click further
    away than a stall is not part of the run."""
    run = make_run(seed=15)
    main = run["times"]
    period0 = float(np.median(np.diff(main[:6])))
    second = list(main[:-1] + 0.45 * np.diff(main))
    early = main[0] - 2.0 * period0  # main click of that cycle missed
    clicks = [click(t, 0) for t in main] + [click(t, 1) for t in second + [early]]
    tl = build_timeline(clicks, duration_s=run["duration_s"], clicks_per_cycle=2)
    assert tl.summary["first_click_s"] == pytest.approx(early)
    far = main[0] - 6.0 * period0
    clicks = [click(t, 0) for t in main] + [click(t, 1) for t in second + [far]]
    tl = build_timeline(clicks, duration_s=run["duration_s"], clicks_per_cycle=2)
    assert tl.summary["first_click_s"] == pytest.approx(main[0])


def test_two_click_engine_stall_starts_at_the_last_second_click():
    run = make_run(seed=14)
    main = list(run["times"])
    idx = int(np.searchsorted(main, 30.0))
    stall_before, stall_after = main[idx - 1], main[idx + 8]
    del main[idx : idx + 8]
    main = np.array(main)
    second = main[:-1] + 0.45 / RATE_HZ
    clicks = [click(t, 0) for t in main] + [click(t, 1) for t in second]
    tl = build_timeline(clicks, duration_s=run["duration_s"], clicks_per_cycle=2)
    assert tl.summary["stalls"] == 1
    assert tl.stalls[0].start_s == pytest.approx(stall_before + 0.45 / RATE_HZ)
    assert tl.stalls[0].end_s == stall_after


def test_two_click_engine_main_clicks_missed_while_second_clicks_go_on_is_no_stall():
    # 5 main clicks in a row missed (a 6-period gap between main clicks) but
    # every second click heard: the engine kept running, as when a room's
    # echo hid the main clicks; the old rule reported a stall of 5 periods.
    # A silence of 8 periods with nothing heard is still a stall.
    run = make_run(seed=14)
    main = np.array(run["times"])
    second = main[:-1] + 0.45 / RATE_HZ
    i_miss = int(np.searchsorted(main, 20.0))
    i_stall = int(np.searchsorted(main, 30.0))
    keep_main = np.ones(main.size, bool)
    keep_main[i_miss:i_miss + 5] = False
    keep_main[i_stall:i_stall + 8] = False
    keep_second = np.ones(second.size, bool)
    keep_second[i_stall - 1:i_stall + 8] = False
    clicks = ([click(t, 0) for t in main[keep_main]]
              + [click(t, 1) for t in second[keep_second]])
    tl = build_timeline(clicks, duration_s=run["duration_s"], clicks_per_cycle=2)
    assert tl.summary["stalls"] == 1
    assert tl.stalls[0].end_s == main[i_stall + 8]
    # the 5 missed main clicks are filled-in cycles, not a gap in the rate
    filled = [c for c in tl.cycles if main[i_miss - 1] < c.start_s < main[i_miss + 5]]
    assert len(filled) == 5 and all(c.missed_clicks == 1 for c in filled)


def test_two_click_engine_stall_ends_at_the_first_pop_after_it():
    # a stall of 8 periods after which the engine's first pop heard is a
    # second click (its main click missed): the stall ends there, not at the
    # next main click (the old code), and starts at the main click before
    run = make_run(seed=14)
    main = list(run["times"])
    idx = int(np.searchsorted(main, 30.0))
    stall_before = main[idx - 1]
    first_pop = main[idx + 8] + 0.45 / RATE_HZ  # second click of the restart cycle
    del main[idx:idx + 9]  # (the restart cycle's main click missed too)
    main = np.array(main)
    second = np.array([t + 0.45 / RATE_HZ for t in main[:-1] if abs(t - stall_before) > 1e-9]
                      + [first_pop])
    clicks = [click(t, 0) for t in main] + [click(t, 1) for t in np.sort(second)]
    tl = build_timeline(clicks, duration_s=run["duration_s"], clicks_per_cycle=2)
    assert tl.summary["stalls"] == 1
    assert tl.stalls[0].start_s == stall_before
    assert tl.stalls[0].end_s == pytest.approx(first_pop)


def test_no_clicks_at_all():
    tl = timeline_of([], 10.0)
    assert tl.cycles == [] and tl.stalls == []
    assert [p.name for p in tl.phases] == ["heating"]
    assert tl.summary["first_click_s"] is None
    assert any("no main clicks" in w for w in tl.warnings)


def test_ignition_delay():
    run = make_run(seed=15)
    tl = timeline_of(run["times"], run["duration_s"], ignition_at_s=1.5)
    assert tl.summary["ignition_delay_s"] == pytest.approx(run["times"][0] - 1.5)
    tl = timeline_of(run["times"], run["duration_s"], ignition_at_s=run["times"][0] + 1)
    assert tl.summary["ignition_delay_s"] is None
    assert any("after the first click" in w for w in tl.warnings)
    with pytest.raises(UsageError, match="ignition"):
        timeline_of(run["times"], run["duration_s"], ignition_at_s=run["duration_s"] + 5)


def test_bad_options_raise_usage_errors():
    with pytest.raises(UsageError, match="clicks_per_cycle"):
        build_timeline([], duration_s=10.0, clicks_per_cycle=3)
    with pytest.raises(UsageError, match="duration_s"):
        build_timeline([], duration_s=0.0, clicks_per_cycle=1)


def test_against_generator_truth():
    # The project's own generator (popmeter.synth) with its ground truth. Clear
    # stalls (4.5-8 periods): a gap of 3 periods is two missed clicks by definition.
    synth = pytest.importorskip("popmeter.synth")
    for cpc, seed in ((1, 0), (2, 3)):
        sc = synth.RunScenario(
            sample_rate_hz=16000,
            duration_s=45.0,
            click_to_noise_db=None,
            clicks_per_cycle=cpc,
            stalls=2,
            stall_periods=(4.5, 8.0),
            seed=seed,
        )
        _, truth = synth.render(sc)
        clicks = [click(c["time_s"], c["kind"], c["ring_hz"]) for c in truth["clicks"]]
        tl = build_timeline(clicks, duration_s=truth["duration_s"], clicks_per_cycle=cpc)
        s = tl.summary
        phases = {p["name"]: p for p in truth["phases"]}
        assert abs(s["steady_rate_hz"] / truth["steady_rate_hz"] - 1) < 0.005
        assert s["first_click_s"] == truth["first_click_s"]
        assert s["last_click_s"] == truth["last_click_s"]
        startup = phases["startup"]["end_s"] - phases["startup"]["start_s"]
        fade = phases["fade"]["end_s"] - phases["fade"]["start_s"]
        assert abs(s["steady_start_s"] - phases["steady"]["start_s"]) <= edge_tolerance_s(startup)
        assert abs(s["steady_end_s"] - phases["steady"]["end_s"]) <= edge_tolerance_s(fade)
        assert s["stalls"] == len(truth["stalls"])


def test_cycle_of_times_equals_a_search_of_every_cycle():
    # reference: for each time, the one cycle with start <= t < start + period
    # found by looking at every cycle (brute force); cycles with gaps
    # between them (stalls) and times before, between and after them
    from popmeter.timeline import Cycle, cycle_of_times

    rng = np.random.default_rng(5)
    starts = np.cumsum(rng.uniform(0.05, 0.1, 60)) + 2.0
    periods = np.diff(np.append(starts, starts[-1] + 0.08))
    periods[[10, 30]] *= 0.5  # (two gaps: the cycle ends before the next starts)
    cycles = [Cycle(start_s=float(s), period_s=float(p), rate_hz=1.0 / float(p), phase="steady")
              for s, p in zip(starts, periods)]
    times = np.concatenate([rng.uniform(0.0, starts[-1] + 1.0, 400), starts])
    expected = []
    for t in times:
        inside = [i for i, c in enumerate(cycles) if c.start_s <= t < c.start_s + c.period_s]
        assert len(inside) <= 1
        expected.append(inside[0] if inside else None)
    assert cycle_of_times(times, cycles) == expected
    assert cycle_of_times([1.0, 2.5], []) == [None, None]
