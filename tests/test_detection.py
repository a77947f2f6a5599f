"""Tests of popmeter.detection: the streaming click detector.

Outside references used here:

* ``mir_eval.onset.f_measure`` (Raffel et al., ISMIR 2014): the standard onset
  evaluation, +-5 ms window as in issue 3.
* Exact analytic signals: a decaying sinusoid ``A exp(-t/tau) sin(2 pi f t)``
  has, by construction, ring frequency ``f``, 1/e decay time ``tau`` and onset
  at its first sample.
* ``scipy.signal.periodogram`` as an independent spectral-peak estimate.
"""

from __future__ import annotations

import itertools
import math

import mir_eval
import numpy as np
import pytest
from scipy import signal

from popmeter.detection import (
    Click,
    ClickDetector,
    _one_per_cycle,
    _second_look,
    assign_kinds,
    detect_clicks,
    detect_clicks_in_blocks,
    finish_detection,
    reject_atypical,
)

FS = 48000


def pink_noise(n: int, rms: float, rng: np.random.Generator) -> np.ndarray:
    """Pink (1/f power) noise by spectral shaping, scaled to ``rms``."""
    spec = rng.standard_normal(n // 2 + 1) + 1j * rng.standard_normal(n // 2 + 1)
    f = np.fft.rfftfreq(n, 1 / FS)
    spec[1:] /= np.sqrt(f[1:])
    spec[0] = 0
    x = np.fft.irfft(spec, n=n)
    return x * rms / np.sqrt(np.mean(x**2))


def ring(n: int, f_hz: float, tau_s: float, amp: float = 1.0) -> np.ndarray:
    t = np.arange(1, n + 1) / FS  # non-zero from the first sample, as the generator does
    return amp * np.exp(-t / tau_s) * np.sin(2 * np.pi * f_hz * t)


def own_clicks(duration_s: float = 6.0, *, rate_hz: float = 11.0, f_hz: float = 1500.0,
               tau_s: float = 0.008, amp: float = 0.3, noise_rms: float = 0.003,
               seed: int = 0, jitter: float = 0.02) -> tuple[np.ndarray, np.ndarray]:
    """Our own small test signal: decaying sinusoids on pink noise."""
    rng = np.random.default_rng(seed)
    n = int(duration_s * FS)
    x = pink_noise(n, noise_rms, rng) if noise_rms else np.zeros(n)
    onsets = []
    t = 0.3
    while t < duration_s - 0.1:
        n0 = round(t * FS)
        m = min(int(0.06 * FS), n - n0)
        x[n0:n0 + m] += ring(m, f_hz * (1 + 0.002 * rng.standard_normal()), tau_s, amp)[:m]
        onsets.append(n0)
        t += (1 + jitter * rng.standard_normal()) / rate_hz
    return x.astype(np.float32), np.array(onsets)


# ---------------------------------------------------------------- own signals


def test_decaying_sinusoids_found_to_the_sample():
    x, onsets = own_clicks()
    res = detect_clicks(x, FS)
    est = np.array([c.sample for c in res.clicks])
    f, _p, _r = mir_eval.onset.f_measure(onsets / FS, est / FS, window=0.005)  # mir_eval
    assert f == 1.0
    err = np.abs(est - onsets)
    assert np.median(err) <= 2  # samples (0.04 ms)
    assert err.max() <= 24  # 0.5 ms


def test_ring_and_decay_match_the_analytic_click():
    # exact by construction: f = 1500 Hz, tau = 8 ms
    x, _ = own_clicks(f_hz=1500.0, tau_s=0.008)
    res = detect_clicks(x, FS)
    rings = np.array([c.ring_hz for c in res.clicks])
    decays = np.array([c.decay_s for c in res.clicks])
    assert np.median(np.abs(rings / 1500.0 - 1)) < 0.005
    assert abs(np.median(decays) / 0.008 - 1) < 0.15
    assert res.ring_hz == pytest.approx(1500.0, rel=0.005)
    # independent check of the spectral peak with scipy.signal.periodogram
    seg = x[int(0.3 * FS):int(0.3 * FS) + int(0.024 * FS)].astype(float)
    f, pxx = signal.periodogram(seg, FS, nfft=1 << 16)
    assert res.clicks[0].ring_hz == pytest.approx(f[np.argmax(pxx)], rel=0.01)


def test_level_dbfs_is_the_peak_level():
    x, _ = own_clicks(amp=0.3, noise_rms=0.0)
    res = detect_clicks(x, FS)
    peak = float(np.max(np.abs(ring(2000, 1500.0, 0.008, 0.3))))
    assert np.median([c.level_dbfs for c in res.clicks]) == pytest.approx(
        20 * math.log10(peak), abs=0.3)


@pytest.mark.parametrize("block", [37, 512, 4096, 65536])
def test_same_clicks_whatever_the_block_size(block):
    x, _ = own_clicks(duration_s=5.0, noise_rms=0.01, seed=3)
    whole = detect_clicks(x, FS)
    blocks = [x[i:i + block] for i in range(0, len(x), block)]
    streamed = detect_clicks_in_blocks(blocks, FS)
    assert [c.sample for c in streamed.clicks] == [c.sample for c in whole.clicks]
    for a, b in zip(streamed.clicks, whole.clicks):
        assert a.level_dbfs == pytest.approx(b.level_dbfs, abs=1e-6)
        assert a.ring_hz == pytest.approx(b.ring_hz, rel=1e-6)
        assert a.strength == pytest.approx(b.strength, abs=1e-3)
    assert streamed.rejected == whole.rejected


def test_live_latency_and_bounded_memory():
    x, _onsets = own_clicks(duration_s=8.0, noise_rms=0.005)
    det = ClickDetector(FS)
    block = 1024
    worst = 0.0
    biggest = 0
    for i in range(0, len(x), block):
        got = det.process(x[i:i + block])
        end = i + len(x[i:i + block])
        for c in got:
            worst = max(worst, (end - c.sample) / FS)
        biggest = max(biggest, det._x.size, det._d.size,
                      sum(lv.shape[0] for _, lv in det._lev_pending) * det.hop)
    assert det.max_latency_s <= 0.05
    assert worst <= det.max_latency_s + block / FS
    assert biggest < FS  # well under a second of samples kept
    assert det.samples_seen == len(x)


def test_forced_band_is_reported_and_used():
    x, onsets = own_clicks()
    res = detect_clicks(x, FS, band_hz=(1000.0, 2500.0))
    assert res.band_hz == (1000.0, 2500.0)
    assert len(res.clicks) == len(onsets)


def test_found_band_holds_the_ring():
    x, _ = own_clicks(f_hz=2200.0)
    res = detect_clicks(x, FS)
    assert res.band_hz[0] <= 2200.0 <= res.band_hz[1]


# ---------------------------------------------------------------- bad input


def test_silence_gives_no_clicks_and_a_warning():
    res = detect_clicks(np.zeros(3 * FS, dtype=np.float32), FS)
    assert res.clicks == [] and res.ring_hz is None
    assert any("no clicks" in w for w in res.warnings)


def test_noise_alone_gives_no_clicks():
    x = pink_noise(10 * FS, 0.05, np.random.default_rng(7)).astype(np.float32)
    res = detect_clicks(x, FS)
    assert len(res.clicks) == 0
    assert any("no clicks" in w for w in res.warnings)


def test_empty_input_is_not_an_error():
    res = detect_clicks(np.zeros(0, dtype=np.float32), FS)
    assert res.clicks == [] and res.warnings


def test_clipped_recording_keeps_its_clicks_with_a_warning():
    x, onsets = own_clicks(amp=3.0, noise_rms=0.003)
    x = np.clip(x, -1, 1)
    res = detect_clicks(x, FS)
    f, _, _ = mir_eval.onset.f_measure(onsets / FS, np.array([c.time_s for c in res.clicks]),
                                       window=0.005)
    assert f >= 0.98
    assert any("clipping" in w for w in res.warnings)


def test_clicks_clipped_to_one_level_put_the_clicks_per_cycle_decision_in_doubt():
    # a two-click engine with the input gain 20 dB too high: every click
    # reaches full scale, the families' levels cannot be compared, and this
    # run is decided one-click (its rate nearly doubled); the warning says
    # so.  3 dB over: a quarter of the clicks clip, the plain warning.
    x, _truth, fs = _render_full(seed=2, duration_s=30.0, clicks_per_cycle=2,
                                 click_to_noise_db=25.0)
    peak = float(np.max(np.abs(x)))
    loud = np.clip(x * np.float32(10.0 / peak), -1.0, 1.0)
    res = detect_clicks(loud, fs)
    assert any("clipping" in w and "per cycle may be wrong" in w and "--clicks-per-cycle" in w
               for w in res.warnings)
    mild = np.clip(x * np.float32(10 ** (3 / 20) / peak), -1.0, 1.0)
    res = detect_clicks(mild, fs)
    clipping = [w for w in res.warnings if "clipping" in w]
    assert len(clipping) == 1 and "--clicks-per-cycle" not in clipping[0]


def test_a_recording_pinned_to_the_rail_between_clicks_is_analysed_quietly():
    # a DC offset (-0.17 of full scale) that the gain (x10.7) drives into the
    # negative rail: for the first 22 s the signal sits flat at -1 between
    # clicks, so some fold bins hold exactly no energy in every cycle; the
    # fold's ratio over such a bin was 0/0 and numpy printed RuntimeWarnings
    # at the user (found by a random search of damaged recordings)
    import warnings

    fs = 8000
    sc = synth.RunScenario(seed=776778, sample_rate_hz=fs, duration_s=37.0, clicks_per_cycle=1,
                           click_to_noise_db=28.0, steady_rate_hz=16.7)
    x, truth = synth.render(sc)
    x = x[:, 0] - np.float32(0.17)
    x[round(22.4 * fs):] *= np.float32(10 ** (-33 / 20))
    x = np.clip(x * np.float32(10.7), -1.0, 1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = detect_clicks(x, fs)
    ref = np.array([c["time_s"] for c in truth["clicks"]])
    est = np.array([c.time_s for c in res.clicks])
    assert mir_eval.onset.f_measure(ref, est, window=0.005)[0] >= 0.9  # 0.957
    assert any("clipping" in w for w in res.warnings)


# ---------------------------------------------------------------- kinds


def _clicks_from(times, levels, rings):
    return [Click(time_s=t, sample=int(t * FS), level_dbfs=lv, strength=20.0, ring_hz=r,
                  decay_s=0.005) for t, lv, r in zip(times, levels, rings)]


def test_assign_kinds_two_families_and_a_gap():
    rng = np.random.default_rng(1)
    times, levels, rings, truth = [], [], [], []
    for k in range(60):
        t0 = k / 10.0
        times += [t0, t0 + 0.045]
        levels += [-12 + 0.5 * rng.standard_normal(), -18 + 0.5 * rng.standard_normal()]
        rings += [1200 * (1 + 0.003 * rng.standard_normal()),
                  2500 * (1 + 0.003 * rng.standard_normal())]
        truth += [0, 1]
    drop = {41, 80, 81, 95}  # a lost second click, a whole lost cycle, a lost main click
    keep = [i for i in range(len(times)) if i not in drop]
    clicks = _clicks_from([times[i] for i in keep], [levels[i] for i in keep],
                          [rings[i] for i in keep])
    out, cpc = assign_kinds(clicks)
    assert cpc == 2
    assert [c.kind for c in out] == [truth[i] for i in keep]
    # a second click carries the cycle of the main click before it
    for a, b in itertools.pairwise(out):
        if b.kind == 1 and a.kind == 0:
            assert b.cycle == a.cycle


def test_assign_kinds_one_family_with_drifting_level():
    rng = np.random.default_rng(2)
    t = np.cumsum(np.full(200, 0.08) * (1 + 0.01 * rng.standard_normal(200)))
    levels = np.linspace(-30, -12, 200) + 0.5 * rng.standard_normal(200)
    clicks = _clicks_from(t, levels, 1200 * (1 + 0.003 * rng.standard_normal(200)))
    out, cpc = assign_kinds(clicks)
    assert cpc == 1
    assert [c.cycle for c in out] == list(range(200))
    out2, cpc2 = assign_kinds(clicks, clicks_per_cycle=2)
    assert cpc2 == 2 and {c.kind for c in out2} <= {0, 1}


# ---------------------------------------------------------------- the project's generator

synth = pytest.importorskip("popmeter.synth")


def _render(**kw):
    sc = synth.RunScenario(**{"duration_s": 24.0, "heating_s": 2.0, "startup_s": 4.0,
                              "fade_s": 4.0, "after_s": 1.0, **kw})
    x, truth = synth.render(sc)
    return x[:, 0], truth, sc.sample_rate_hz


def _render_full(**kw):
    """A generated recording with the scenario's own defaults (no shortening)."""
    sc = synth.RunScenario(**kw)
    x, truth = synth.render(sc)
    return x[:, 0], truth, sc.sample_rate_hz


def _whole_and_in_blocks(x, fs, block):
    """The clicks' samples of the whole array, checked equal to those found block by block."""
    whole = [c.sample for c in detect_clicks(x, fs).clicks]
    streamed = detect_clicks_in_blocks([x[i:i + block] for i in range(0, x.size, block)], fs)
    assert [c.sample for c in streamed.clicks] == whole
    return whole


def _score(res, truth):
    ref = np.array([c["time_s"] for c in truth["clicks"]])
    est = np.array([c.time_s for c in res.clicks])
    f, _, _ = mir_eval.onset.f_measure(ref, est, window=0.005)  # mir_eval, +-5 ms (issue 3)
    pairs = mir_eval.util.match_events(ref, est, 0.005)
    err = np.array([abs(est[j] - ref[i]) for i, j in pairs])
    ring = [abs(res.clicks[j].ring_hz / truth["clicks"][i]["ring_hz"] - 1) for i, j in pairs
            if truth["clicks"][i]["kind"] == 0 and res.clicks[j].ring_hz]
    return f, float(np.median(err)), float(np.median(ring))


@pytest.mark.parametrize("seed", [3, 4])
def test_generator_one_click_engine_30db(seed):
    x, truth, fs = _render(click_to_noise_db=30.0, seed=seed)
    res = detect_clicks(x, fs)
    f, err_s, ring = _score(res, truth)
    assert f >= 0.99  # issue 3 target at 30 dB (0.996-1.0 on seeds 3-8)
    assert err_s <= 0.1e-3
    assert ring <= 0.01
    assert res.clicks_per_cycle == 1


def test_generator_20db_timing_and_ring():
    # issue 3: median |timing error| <= 0.3 ms and ring within 2 % at 20 dB
    x, truth, fs = _render(click_to_noise_db=20.0, seed=5, hum_dbfs=-40.0)
    res = detect_clicks(x, fs)
    f, err_s, ring = _score(res, truth)
    assert err_s <= 0.3e-3
    assert ring <= 0.02
    # the generator's default levels (start-up pops to -12 dB, fade pops to
    # -18 dB, some under the noise here): 0.962-0.989 on seeds 3-8 (24 s); the
    # issue's 0.97 with every pop at 20 dB: test_issue_targets_... below
    assert f >= 0.95


def test_generator_12db_one_click_engine():
    # the generator's default levels (faint start-up and fade pops, many under
    # the noise at 12 dB): 0.896-0.908 on seeds 3-8 (24 s); the issue's 0.90
    # with every pop at 12 dB: test_issue_targets_... below
    x, truth, fs = _render(click_to_noise_db=12.0, seed=4)
    res = detect_clicks(x, fs)
    f, _err_s, ring = _score(res, truth)
    assert f >= 0.87
    assert ring <= 0.02


def test_generator_two_click_engine_decided_and_labelled():
    x, truth, fs = _render(click_to_noise_db=30.0, seed=6, clicks_per_cycle=2)
    res = detect_clicks(x, fs)
    f, _, _ = _score(res, truth)
    assert f >= 0.97  # 0.979-0.991 on seeds 3-8
    assert res.clicks_per_cycle == 2
    # kinds agree with the truth on the matched clicks
    ref = np.array([c["time_s"] for c in truth["clicks"]])
    est = np.array([c.time_s for c in res.clicks])
    pairs = mir_eval.util.match_events(ref, est, 0.005)
    agree = np.mean([truth["clicks"][i]["kind"] == res.clicks[j].kind for i, j in pairs])
    assert agree >= 0.95


def test_a_room_answer_found_by_folding_keeps_its_delay_through_start_up_and_fade():
    # a one-click engine ringing at 1.14 kHz in a reverberant room (rt60
    # 0.5 s, 20 dB): a fold finds the room's answer 24 ms after each click
    # at a steady rate and makes a second template of it; the matched
    # filter then finds it in most cycles.  Where the period is longer
    # (start-up, fade) the finds stay 24 ms late instead of keeping their
    # place in the cycle (12 votes to 0): the room, so one click per cycle
    # (F 0.75 before, 0.98 now).  A two-click engine in the same room keeps
    # its second clicks (votes 31:9 for their place in the cycle).
    room = {"duration_s": 60.0, "click_to_noise_db": 20.0, "reverb_rt60_s": 0.5,
            "ring_modes_hz": (1142.7, 2378.2, 3901.3, 4448.7)}
    x, truth, fs = _render_full(seed=1, clicks_per_cycle=1, **room)
    res = detect_clicks(x, fs)
    assert res.clicks_per_cycle == 1
    assert _score(res, truth)[0] >= 0.95
    x2, truth2, fs2 = _render_full(seed=2, clicks_per_cycle=2, steady_rate_hz=16.0, **room)
    res2 = detect_clicks(x2, fs2)
    assert res2.clicks_per_cycle == 2
    assert _score(res2, truth2)[0] >= 0.93


def test_a_two_click_decision_on_few_second_clicks_is_flagged():
    # a one-click engine in a reverberant room (rt60 0.5 s, 20 dB), one of
    # the decisions the detector still gets wrong: the room's answer passes
    # for a second click in 15 % of the cycles; the result says so. A
    # two-click engine's decision carries no such warning.
    x, _truth, fs = _render_full(duration_s=60.0, click_to_noise_db=20.0, seed=6,
                                 clicks_per_cycle=1, reverb_rt60_s=0.5)
    res = detect_clicks(x, fs)
    assert res.clicks_per_cycle == 2  # (wrong; should this fail, the case is solved: pick another)
    flagged = [w for w in res.warnings if "second click was found in only" in w]
    assert len(flagged) == 1 and "reverberant" in flagged[0]
    forced = detect_clicks(x, fs, clicks_per_cycle=1)
    assert not any("second click was found in only" in w for w in forced.warnings)
    x2, _truth2, fs2 = _render(click_to_noise_db=30.0, seed=6, clicks_per_cycle=2)
    res2 = detect_clicks(x2, fs2)
    assert res2.clicks_per_cycle == 2
    assert not any("second click was found in only" in w for w in res2.warnings)


@pytest.mark.parametrize("kind", ["match", "speech"])
def test_match_strike_or_speech_alone_gives_no_click(kind):
    for seed in (1, 2, 3):
        sc = synth.RunScenario(duration_s=10.0, heating_s=9.0, startup_s=0.3, fade_s=0.3,
                               after_s=0.2, click_to_noise_db=30.0, seed=seed,
                               distractors=(synth.Distractor(kind, time_s=2.0),))
        x, _ = synth.render(sc)
        res = detect_clicks(x[: int(8.5 * sc.sample_rate_hz), 0], sc.sample_rate_hz)
        assert res.clicks == [], f"{kind}, seed {seed}"
        assert res.rejected > 0


def test_generator_streamed_equals_whole_with_distractors():
    x, _, fs = _render(click_to_noise_db=20.0, seed=7, clicks_per_cycle=2,
                       distractors=("speech", "splash", "knock"), reverb_rt60_s=0.4)
    whole = detect_clicks(x, fs)
    for block in (37, 2048, 65536):
        streamed = detect_clicks_in_blocks((x[i:i + block] for i in range(0, len(x), block)), fs)
        assert [c.sample for c in streamed.clicks] == [c.sample for c in whole.clicks]
        assert [c.kind for c in streamed.clicks] == [c.kind for c in whole.clicks]
        assert streamed.rejected == whole.rejected


def test_finish_detection_is_the_offline_result():
    from popmeter.detection import finish_detection

    x, _truth, fs = _render(click_to_noise_db=25.0, seed=8, clicks_per_cycle=2)
    det = ClickDetector(fs)
    got = []
    for i in range(0, len(x), 1024):
        got += det.process(x[i:i + 1024])
    got += det.flush()
    live = finish_detection(det, got)
    offline = detect_clicks(x, fs)
    assert [c.sample for c in live.clicks] == [c.sample for c in offline.clicks]
    assert live.clicks_per_cycle == offline.clicks_per_cycle == 2


@pytest.mark.parametrize("fs", [16000, 44100, 96000])
def test_other_sample_rates(fs):
    rng = np.random.default_rng(fs)
    n = int(4.0 * fs)
    x = 0.002 * rng.standard_normal(n)
    onsets = np.arange(int(0.3 * fs), n - int(0.1 * fs), int(0.09 * fs))
    t = np.arange(1, int(0.04 * fs) + 1) / fs
    click = 0.3 * np.exp(-t / 0.006) * np.sin(2 * np.pi * 1800.0 * t)
    for n0 in onsets:
        x[n0:n0 + click.size] += click
    res = detect_clicks(x.astype(np.float32), fs)
    est = np.array([c.sample for c in res.clicks])
    f, _, _ = mir_eval.onset.f_measure(onsets / fs, est / fs, window=0.005)
    assert f == 1.0
    assert np.median(np.abs(est - onsets)) / fs <= 0.1e-3
    assert res.ring_hz == pytest.approx(1800.0, rel=0.01)


# ------------------------------------------------------- matched-filter pass


def _weak_then_strong(seed: int, weak_db: float) -> tuple[np.ndarray, np.ndarray]:
    """Decaying sinusoids on pink noise: ``weak_db`` quieter for the first 3 s."""
    rng = np.random.default_rng(seed)
    n = int(8.0 * FS)
    x = pink_noise(n, 0.003, rng)
    onsets = []
    t = 0.3
    while t < 7.9:
        n0 = round(t * FS)
        m = min(int(0.06 * FS), n - n0)
        amp = 0.3 * (10 ** (weak_db / 20) if t < 3.0 else 1.0)
        x[n0:n0 + m] += ring(m, 1500.0 * (1 + 0.002 * rng.standard_normal()), 0.008, amp)[:m]
        onsets.append(n0)
        t += (1 + 0.02 * rng.standard_normal()) / 11.0
    return x.astype(np.float32), np.array(onsets)


@pytest.mark.parametrize("seed", [0, 1])
def test_matched_filter_finds_weak_clicks_before_the_template_existed(seed):
    # 40 dB under the later clicks, the first 3 s of clicks are at the edge of
    # the frame detector; the template made from the later clicks (matched
    # filter, Turin 1960) finds them on the look-back, without false clicks
    x, onsets = _weak_then_strong(seed, -40.0)
    weak = onsets[onsets < 3.0 * FS] / FS
    got = {}
    for scan in (False, True):
        res = detect_clicks(x, FS, template_scan=scan)
        est = np.array([c.time_s for c in res.clicks])
        _f, _p, r_weak = mir_eval.onset.f_measure(weak, est, window=0.005)  # mir_eval
        f, p, _r = mir_eval.onset.f_measure(onsets / FS, est, window=0.005)
        got[scan] = (r_weak, f, p)
    assert got[True][0] >= 0.95
    assert got[True][2] >= 0.99  # precision
    assert got[True][0] >= got[False][0]
    assert got[True][1] >= 0.98


def test_matched_filter_adds_second_clicks_of_a_two_click_engine():
    x, truth, fs = _render(click_to_noise_db=20.0, seed=3, clicks_per_cycle=2)
    ref = np.array([c["time_s"] for c in truth["clicks"] if c["kind"] == 1])
    rec = {}
    for scan in (False, True):
        res = detect_clicks(x, fs, template_scan=scan)
        est = np.array([c.time_s for c in res.clicks])
        rec[scan] = mir_eval.onset.f_measure(ref, est, window=0.005)[2]  # mir_eval recall
        _f, p, _r = mir_eval.onset.f_measure(
            np.array([c["time_s"] for c in truth["clicks"]]), est, window=0.005)
        assert p >= 0.98
        # every feature a plain Python float, as JSON writes it (the
        # filter's ring was a numpy float32 on its own finds)
        for c in res.clicks:
            assert type(c.time_s) is float and type(c.level_dbfs) is float
            assert type(c.strength) is float
            assert c.ring_hz is None or type(c.ring_hz) is float
            assert c.decay_s is None or type(c.decay_s) is float
    assert rec[True] >= rec[False] + 0.08  # +0.12 to +0.21 over seeds 1-5


def _second_recall_and_precision(res, truth):
    """Recall of the true second clicks and precision over all clicks (mir_eval, +-5 ms)."""
    est = np.array([c.time_s for c in res.clicks])
    ref2 = np.array([c["time_s"] for c in truth["clicks"] if c["kind"] == 1])
    recall2 = mir_eval.onset.f_measure(ref2, est, window=0.005)[2]
    _f, p, _r = mir_eval.onset.f_measure(
        np.array([c["time_s"] for c in truth["clicks"]]), est, window=0.005)
    return recall2, p


@pytest.mark.parametrize("seed", [1, 2])
def test_folding_finds_second_clicks_too_weak_for_the_frame_detector(seed):
    # at 15 dB the second click (6 dB under the main one, half its ring) is
    # seldom a frame-detector candidate, so its template only forms by folding
    # the cycles; before folding, 4-7 % of the second clicks were found
    x, truth, fs = _render(click_to_noise_db=15.0, seed=seed, clicks_per_cycle=2,
                           duration_s=40.0)
    res = detect_clicks(x, fs)
    recall2, p = _second_recall_and_precision(res, truth)
    assert recall2 >= 0.6  # 0.74-0.78 on seeds 1-2
    assert p >= 0.98
    assert res.clicks_per_cycle == 2
    if seed == 1:  # the folds run at fixed click counts: block sizes do not matter
        for block in (4096, 48000):
            streamed = detect_clicks_in_blocks(
                [x[i:i + block] for i in range(0, len(x), block)], fs)
            assert [c.sample for c in streamed.clicks] == [c.sample for c in res.clicks]


def test_a_recording_that_stops_while_the_engine_runs_is_analysed():
    # the first 15 s of a run that goes on (one-click engine, 20 dB, every
    # pop at that level, seed 4): the last fold, made on flushing, came so
    # near the end that a cycle's phase bins reached past the audio (its
    # local period, the median of the 9 around, is longer than the cycle
    # itself) and the detector raised IndexError; so did 12 of 2160 cuts at
    # 10, 15, 20, 30 and 45 s of the bench's recordings
    fs = 48000
    sc = synth.RunScenario(duration_s=60.0, click_to_noise_db=20.0, seed=4,
                           clicks_per_cycle=1, startup_level_db=0.0, fade_level_db=0.0,
                           weak_pop_prob=0.0)
    x, truth = synth.render(sc)
    x = x[:15 * fs, 0]
    res = detect_clicks(x, fs)
    ref = np.array([c["time_s"] for c in truth["clicks"] if c["time_s"] < 15.0])
    est = np.array([c.time_s for c in res.clicks])
    assert mir_eval.onset.f_measure(ref, est, window=0.005)[0] >= 0.99  # 1.000
    assert res.clicks_per_cycle == 1
    streamed = detect_clicks_in_blocks([x[i:i + 4096] for i in range(0, x.size, 4096)], fs)
    assert [c.sample for c in streamed.clicks] == [c.sample for c in res.clicks]


def test_chunks_a_late_main_template_scans_do_not_depend_on_the_calls():
    # a one-click engine at 39 Hz, 8.7 dB, 96 kHz, two stalls, a knock
    # (74 s): the main template formed only from clicks after 40 s.  Streamed,
    # the chunks before 8 s had been given up by then (a chunk waits for a
    # template at most the look-back past its end); handed the whole array,
    # the template existed before any chunk was asked and scanned them all:
    # 463 clicks against 461 in blocks (two matched-filter finds before the
    # first accepted click).  Now where the template formed in the stream
    # decides, and every way of feeding the detector gives 460.
    x, _truth, fs = _render_full(
        seed=986863, sample_rate_hz=96000, duration_s=74.45587300614187,
        steady_rate_hz=38.98543750685275, clicks_per_cycle=1,
        click_to_noise_db=8.676028698567874, stalls=2, missed_pop_prob=0.04535173647148664,
        jitter_pct=1.5811919673071064, distractors=("knock",))
    assert len(_whole_and_in_blocks(x, fs, 4096)) >= 450


def test_a_late_main_template_folds_and_second_scans_do_not_depend_on_the_calls():
    # a two-click engine at 7.4 Hz, 9.1 dB, 96 kHz (80 s): the main template
    # formed only from clicks about 57 s in.  Handed the whole array, the
    # detector still kept the audio from the start: the folds caught up
    # after it read cycles from 0 s, where streamed they read from about
    # 24 s (what a stream still keeps then), so a different fold made the
    # second template; and that template scanned the chunks before 24 s,
    # which a stream had given up.  619 clicks whole against 632 in blocks
    # of 6658 samples (a random search found it).  Now the fold reads from
    # where a stream's audio starts and the second template skips the
    # chunks the main one formed too late for: 634 every way.
    x, _truth, fs = _render_full(
        seed=984250, sample_rate_hz=96000, heating_s=4.641327436798066,
        duration_s=80.30325492932386, steady_rate_hz=7.380282595559868, clicks_per_cycle=2,
        click_to_noise_db=9.077436783231654)
    assert len(_whole_and_in_blocks(x, fs, 6658)) >= 600


def test_folds_do_not_depend_on_the_calls_when_the_engine_starts_late():
    # 50 s of background noise, then a one-click engine in a reverberant
    # room (20 dB, 45 s): the main template formed only about 60 s in.
    # Handed the whole array, the template existed as the main scan passed
    # the chunks it formed too late for, and the folds spent 9 of their 12
    # tries there, on no cycles; streamed, those chunks had passed without
    # it and every try came after the engine started.  388 clicks whole,
    # 536 in blocks of 48000 samples and 642 in blocks of 7000 (a fold then
    # took the room's echo for a second click).  Folds now come at the same
    # places however the audio is handed over.
    fs = 48000
    sc = synth.RunScenario(duration_s=45.0, click_to_noise_db=20.0, seed=1,
                           clicks_per_cycle=1, reverb_rt60_s=0.5)
    x, truth = synth.render(sc)
    x = x[:, 0]
    rng = np.random.default_rng(1)
    rms = float(np.sqrt(np.mean(x[:fs] ** 2)))
    x = np.concatenate([(rms * rng.standard_normal(50 * fs)).astype(np.float32), x])
    whole = detect_clicks(x, fs)
    ref = np.array([c["time_s"] for c in truth["clicks"]]) + 50.0
    est = np.array([c.time_s for c in whole.clicks])
    assert mir_eval.onset.f_measure(ref, est, window=0.005)[2] >= 0.9  # recall 0.937
    for block in (7000, 48000):
        streamed = detect_clicks_in_blocks([x[i:i + block] for i in range(0, x.size, block)], fs)
        assert [c.sample for c in streamed.clicks] == [c.sample for c in whole.clicks]


def test_second_click_phase_does_not_depend_on_the_calls():
    # a two-click engine (22.05 kHz, 30 dB) after 34 s of digital silence,
    # found by a random search over whole-array and block-by-block runs.  The
    # second template formed at the same place either way, but the second
    # click's place in the cycle was read from its examples' main clicks
    # when the template was tried: handed the whole array, every main click
    # was still kept and the places scattered too much to agree (no phase);
    # streamed, the oldest examples' main clicks had been let go and the
    # rest agreed (phase 0.46), and the expected-click search added 11
    # clicks (1274 against 1263).  Each example's place is now read as it is
    # taken.
    fs = 22050
    sc = synth.RunScenario(seed=905207, sample_rate_hz=fs, duration_s=62.0922061009654,
                           clicks_per_cycle=2, click_to_noise_db=30.03218860804406,
                           steady_rate_hz=12.469416147403685)
    x = np.concatenate([np.zeros(747183, np.float32), synth.render(sc)[0][:, 0]])
    whole = [c.sample for c in detect_clicks(x, fs).clicks]
    assert len(whole) >= 1200
    for block in (3125, 48000):
        streamed = detect_clicks_in_blocks([x[i:i + block] for i in range(0, x.size, block)], fs)
        assert [c.sample for c in streamed.clicks] == whole


def test_room_echo_of_the_main_click_is_not_a_second_click():
    # in a reverberant room the main click's echo folds at a fixed place in a
    # steady cycle just like a second click; its gradual build-up refuses it
    x, truth, fs = _render(click_to_noise_db=30.0, seed=1, reverb_rt60_s=0.5,
                           duration_s=40.0)
    res = detect_clicks(x, fs)
    est = np.array([c.time_s for c in res.clicks])
    _f, p, _r = mir_eval.onset.f_measure(
        np.array([c["time_s"] for c in truth["clicks"]]), est, window=0.005)
    assert p >= 0.98  # 0.95 when the echo made a second template
    assert res.clicks_per_cycle == 1


def test_a_main_label_where_the_second_click_belongs_becomes_second():
    from popmeter.detection import _second_at_its_place

    # 20 cycles of 100 ms (slowing to 150 ms over the last 5), second click at
    # 0.45 of the period; the last second click carries a main label, as when
    # only a template like the main click's found it
    mains, t = [], 0.0
    for k in range(20):
        mains.append(t)
        t += 0.100 if k < 15 else 0.150
    times, labels = [], []
    for k, m in enumerate(mains):
        period = 0.100 if k < 15 else 0.150
        times += [m, m + 0.45 * period]
        labels += [0, 1]
    labels[-1] = 0
    out = _second_at_its_place(np.array(times), np.array(labels))
    assert out[-1] == 1
    assert list(out[:-1]) == labels[:-1]
    # a main click after a stall-shortened gap that is not at the phase stays main
    labels2 = list(labels)
    labels2[-1] = 1
    times2 = times[:-1] + [times[-2] + 0.30 * 0.150]
    out2 = _second_at_its_place(np.array(times2), np.array(labels2[:-1] + [0]))
    assert out2[-1] == 0


def _clicks_at(times_s, levels_dbfs):
    return [Click(time_s=t, sample=round(t * FS), level_dbfs=lv, strength=20.0, ring_hz=1200.0,
                  decay_s=0.01, cycle=i) for i, (t, lv) in enumerate(zip(times_s, levels_dbfs))]


def test_one_click_engine_sets_aside_a_quieter_click_a_fraction_of_a_period_later():
    # a one-click engine at 12 Hz: 40 cycles; an echo 18 ms after every third
    # click 8 dB under it, and one 58 ms after click 31 (later than half a
    # period, between two clicks one period apart); one click 18 ms after
    # another only 1 dB under it; and a main pop 8 dB weaker than the one
    # before, in its place (one click per cycle is the definition of the
    # engine; the 3 dB margin, the half period and the 15 % are our own
    # choices, no published source)
    mains = 1.0 + np.arange(40) / 12.0
    echoes_at = list(mains[::3] + 0.018) + [mains[31] + 0.058]
    times = list(mains) + echoes_at + [mains[20] + 0.018]
    main_levels = [-12.0] * 40
    main_levels[25] = -20.0  # a weak pop, not an echo
    levels = main_levels + [-20.0] * len(echoes_at) + [-13.0]
    order = np.argsort(times)
    clicks = _clicks_at(np.array(times)[order], np.array(levels)[order])
    kept, echoes = _one_per_cycle(clicks)
    assert sorted(c.time_s for c in echoes) == pytest.approx(sorted(echoes_at))
    assert len(kept) == 41  # the 1-dB-quieter one and the weak pop stay
    assert any(c.time_s == pytest.approx(mains[25]) for c in kept)
    assert [c.cycle for c in kept] == list(range(41))
    # too few clicks to know the period: nothing is set aside
    few = _clicks_at([1.0, 1.018, 1.083, 1.101], [-12.0, -20.0, -12.0, -20.0])
    assert _one_per_cycle(few) == (few, [])


def test_one_click_engine_sets_aside_two_reflections_the_later_one_louder():
    # a one-click engine at 8 Hz (a slow start-up), 40 cycles, -10 dBFS; every
    # fourth click, the first among them, is answered by the room twice: 40
    # ms later at -20 dB and 66 ms later at -16 dB.  The later reflection is
    # louder than the one before it, but 6 dB under the click that made it;
    # it comes later than half a period, between two clicks one period apart.
    # Before "the one before" was the last click kept (and the period at the
    # start was read from the first 9 intervals rather than a window padded
    # with the first one, a reflection's), all 10 later reflections stayed.
    # (Our own rule, no published source, as above.)
    mains = 1.0 + np.arange(40) / 8.0
    first, later = mains[::4] + 0.040, mains[::4] + 0.066
    times = np.concatenate([mains, first, later])
    levels = np.concatenate([np.full(40, -10.0), np.full(10, -20.0), np.full(10, -16.0)])
    order = np.argsort(times)
    kept, echoes = _one_per_cycle(_clicks_at(times[order], levels[order]))
    want = sorted(np.concatenate([first, later]))
    assert sorted(c.time_s for c in echoes) == pytest.approx(want)
    assert [c.time_s for c in kept] == pytest.approx(list(mains))


def _ramp_mains():
    # a run speeding up from 6 to 12 cycles per second over 40 cycles, then
    # steady at 12 for 60 (the period falls from 167 to 83 ms)
    periods = np.concatenate([1.0 / np.linspace(6.0, 12.0, 40), np.full(60, 1.0 / 12.0)])
    return 1.0 + np.concatenate([[0.0], np.cumsum(periods)])


def test_fixed_delay_tells_a_reflection_from_a_second_click():
    from popmeter.detection import _fixed_delay

    mains = _ramp_mains()
    period = np.diff(mains)

    def labelled(sec):
        times = np.concatenate([mains, sec])
        labels = np.concatenate([np.zeros(mains.size, int), np.ones(sec.size, int)])
        order = np.argsort(times)
        return times[order], labels[order]

    # a wall's reflection 30 ms after every click, whatever the period
    times, labels = labelled(mains[:-1] + 0.030)
    assert _fixed_delay(times, labels) == pytest.approx(0.030)
    # a second snap at 0.45 of each period: its delay follows the period
    times, labels = labelled(mains[:-1] + 0.45 * period)
    assert _fixed_delay(times, labels) is None
    # where the search for expected second clicks alone found them, they
    # say nothing (it looks where the learnt place in the cycle puts them)
    times, labels = labelled(mains[:-1] + 0.030)
    assert _fixed_delay(times, labels, ignore=labels == 1) is None
    # at a steady rate the two cannot be told apart: no answer
    steady = 1.0 + np.arange(100) / 12.0
    times = np.sort(np.concatenate([steady, steady[:-1] + 0.030]))
    labels = np.isin(times, steady[:-1] + 0.030).astype(int)
    assert _fixed_delay(times, labels) is None


def test_one_per_cycle_sets_aside_a_reflection_at_its_known_delay():
    # a reflection 30 ms after every click, measured only 1 dB under it (in
    # noise a reflection 6 dB down may measure so): kept by the 3 dB rule,
    # set aside once its delay is known
    mains = 1.0 + np.arange(40) / 12.0
    times = np.sort(np.concatenate([mains, mains + 0.030]))
    levels = np.where(np.isin(times, mains), -12.0, -13.0)
    clicks = _clicks_at(times, levels)
    kept, echoes = _one_per_cycle(clicks)
    assert echoes == []
    kept, echoes = _one_per_cycle(_clicks_at(times, levels), echo_s=0.030)
    assert [c.time_s for c in kept] == pytest.approx(list(mains))
    assert len(echoes) == 40


@pytest.mark.parametrize("seed, min_precision", [(2, 0.98), (4, 0.97), (9, 0.97)])
def test_reverberant_one_click_engine_has_no_echo_clicks(seed, min_precision):
    # a reverberant room (rt60 0.5 s) at 30 dB, every pop at that level
    # (precision and recall by mir_eval, +-5 ms):
    # - seed 2: during start-up, when the cycles are long, the echo of each
    #   pop some 40 ms later rings exactly like it; before the second look
    #   refused such echoes precision was 0.96;
    # - seeds 4 / 9: the reverberation swelling again 15-25 ms after a click
    #   passed every test of a click; precision 0.950 / 0.929 before the
    #   one-click engine's echoes were set aside, 0.993 / 0.981 after
    x, truth, fs = _render(click_to_noise_db=30.0, seed=seed, reverb_rt60_s=0.5,
                           duration_s=40.0, startup_level_db=0.0, fade_level_db=0.0,
                           weak_pop_prob=0.0)
    res = detect_clicks(x, fs)
    est = np.array([c.time_s for c in res.clicks])
    _f, p, r = mir_eval.onset.f_measure(
        np.array([c["time_s"] for c in truth["clicks"]]), est, window=0.005)
    assert res.clicks_per_cycle == 1
    assert p >= min_precision
    assert r >= 0.98


def test_two_ring_families_set_the_kinds_where_alternation_lost_its_phase():
    from popmeter.detection import Click, _by_ring

    rng = np.random.default_rng(7)
    clicks, truth = [], []
    for k in range(40):
        t = 0.1 * k
        clicks.append(Click(t, int(t * FS), -10.0 + rng.normal(0, 0.5), 20.0,
                            1200.0 * (1 + rng.normal(0, 0.005)), 0.01))
        clicks.append(Click(t + 0.045, int((t + 0.045) * FS), -16.0 + rng.normal(0, 0.5), 15.0,
                            2450.0 * (1 + rng.normal(0, 0.005)), 0.004))
        truth += [0, 1]
    labels = np.array(truth)
    labels[:6] = 1 - labels[:6]  # the first three cycles swapped
    assert list(_by_ring(clicks, labels)) == truth
    # one tight family: nothing to split, the labels stay
    one = [Click(c.time_s, c.sample, c.level_dbfs, c.strength, 1200.0, 0.01) for c in clicks]
    assert list(_by_ring(one, labels)) == list(labels)


_EVEN = {"startup_level_db": 0.0, "fade_level_db": 0.0, "weak_pop_prob": 0.0}


@pytest.mark.parametrize(("cnr", "cpc", "target"), [(20.0, 2, 0.97), (12.0, 1, 0.90),
                                                    (12.0, 2, 0.90)])
def test_issue_targets_with_every_pop_at_the_stated_ratio(cnr, cpc, target):
    # the issue's F targets (mir_eval, +-5 ms) where every pop is at the stated
    # click-to-noise ratio (a second click still 6 dB under its main one);
    # these 40 s recordings give, on seeds 5-7: 20 dB two-click 0.998, 12 dB
    # one-click 0.996-0.999, 12 dB two-click 0.935-0.965
    x, truth, fs = _render(click_to_noise_db=cnr, seed=5, clicks_per_cycle=cpc,
                           duration_s=40.0, **_EVEN)
    res = detect_clicks(x, fs)
    f, err_s, ring = _score(res, truth)
    assert f >= target
    assert res.clicks_per_cycle == cpc
    assert ring <= 0.02
    if cnr == 20.0:
        assert err_s <= 0.3e-3


def test_a_forced_clicks_per_cycle_the_clicks_contradict_gives_a_warning():
    x, _truth, fs = _render(click_to_noise_db=30.0, seed=6, clicks_per_cycle=2)
    forced = detect_clicks(x, fs, clicks_per_cycle=1)
    assert forced.clicks_per_cycle == 1
    assert any("forced to 1" in w and "like 2 per cycle" in w for w in forced.warnings)
    agreed = detect_clicks(x, fs, clicks_per_cycle=2)
    assert not any("forced to" in w for w in agreed.warnings)
    x1, _truth, fs = _render(click_to_noise_db=30.0, seed=6, clicks_per_cycle=1)
    forced2 = detect_clicks(x1, fs, clicks_per_cycle=2)
    assert any("forced to 2" in w and "like 1 per cycle" in w for w in forced2.warnings)


def test_one_click_per_cycle_forced_sets_a_wall_reflection_aside():
    # the generator's wall 15 ms late and 6 dB down, 30 dB: the reflections
    # still make two clicks per cycle (F 0.691: too few of them are found
    # where the period changes); forced to one click per cycle, they are set
    # aside (F 0.962), and the warning names the room
    sc = synth.RunScenario(duration_s=40.0, click_to_noise_db=30.0, seed=1, clicks_per_cycle=1,
                           wall_delay_s=0.015, wall_level_db=-6.0)
    x, truth = synth.render(sc)
    res = detect_clicks(x[:, 0], sc.sample_rate_hz, clicks_per_cycle=1)
    assert res.clicks_per_cycle == 1
    f, _tim, _ring = _score(res, truth)
    assert f >= 0.95
    if any("forced to 1" in w for w in res.warnings):
        assert any("reflection" in w for w in res.warnings)


@pytest.mark.parametrize("cnr, seed", [(30.0, 3), (30.0, 4), (20.0, 7), (20.0, 10)])
def test_reverberant_two_click_engine_finds_its_second_clicks(cnr, seed):
    # a two-click engine at 16 Hz in a reverberant room (rt60 0.5 s), every
    # pop at the stated level; second-click recall (mir_eval, +-5 ms):
    # - 30 dB, seeds 3 / 4: the main click's reverberation fills the second
    #   click's place in the cycle; the folded template weighted by the
    #   click's share of the power there follows the click (0.53 / 0.64 when
    #   the echo's frequencies were kept; 0.96 / 0.98 now);
    # - 20 dB, seeds 7 / 10: the room's field builds up over the cycles, so
    #   many main clicks ring under 8 dB above what was there before and are
    #   only taken back at the end; the search for the second clicks saw
    #   double periods there (0.235 / 0.672 before the quick, loud, main-like
    #   candidates counted for the period; 0.918 / 0.929 after)
    x, truth, fs = _render(click_to_noise_db=cnr, seed=seed, clicks_per_cycle=2,
                           reverb_rt60_s=0.5, steady_rate_hz=16.0, duration_s=40.0,
                           startup_level_db=0.0, fade_level_db=0.0, weak_pop_prob=0.0)
    res = detect_clicks(x, fs)
    recall2, p = _second_recall_and_precision(res, truth)
    assert recall2 >= 0.85
    assert p >= 0.98
    assert res.clicks_per_cycle == 2


@pytest.mark.parametrize("seed", [1, 9])
def test_reverberant_two_click_engine_at_12_db_finds_main_clicks_between_known_ones(seed):
    # a two-click engine at 16 Hz in a reverberant room (rt60 0.5 s), every
    # pop at 12 dB: the reverberation of the clicks before raises the matched
    # filter's noise level, so many main clicks stand just under its
    # threshold; the bounded search at equal steps across an interval of 2-6
    # periods between known main clicks takes them (main-click recall,
    # mir_eval +-5 ms, seeds 1 / 9: 0.885 / 0.873 before, 0.989 / 0.968
    # after; precision 0.987 / 0.988 before, 0.995 / 0.992 after)
    x, truth, fs = _render(click_to_noise_db=12.0, seed=seed, clicks_per_cycle=2,
                           reverb_rt60_s=0.5, steady_rate_hz=16.0, duration_s=40.0,
                           startup_level_db=0.0, fade_level_db=0.0, weak_pop_prob=0.0)
    res = detect_clicks(x, fs)
    est = np.array([c.time_s for c in res.clicks])
    ref = [c["time_s"] for c in truth["clicks"]]
    ref0 = np.array([t for t, c in zip(ref, truth["clicks"]) if c["kind"] == 0])
    main_recall = mir_eval.onset.f_measure(ref0, est, window=0.005)[2]
    _f, precision, _r = mir_eval.onset.f_measure(np.array(ref), est, window=0.005)
    assert main_recall >= 0.93
    assert precision >= 0.98
    assert res.clicks_per_cycle == 2


@pytest.mark.parametrize("clicks_per_cycle, rt60", [(1, None), (2, None), (2, 0.5)])
def test_search_for_missed_main_clicks_puts_none_in_a_stall(clicks_per_cycle, rt60):
    # the search for main clicks missed between known ones spans intervals
    # of 2-6 periods, and a stall of 4.5-8 periods is silent: at 12 dB, every
    # pop at that level, no click may be found inside one (from 20 ms after
    # its last click to 5 ms before the next; seeds 0-3 of these cases had
    # none before the search was added, and none after)
    for seed in (0, 1):
        x, truth, fs = _render(click_to_noise_db=12.0, seed=seed, clicks_per_cycle=clicks_per_cycle,
                               reverb_rt60_s=rt60, duration_s=40.0, fade_s=8.0,
                               startup_level_db=0.0, fade_level_db=0.0, weak_pop_prob=0.0,
                               stalls=2, stall_periods=(4.5, 8.0))
        assert len(truth["stalls"]) == 2
        t = np.array([c.time_s for c in detect_clicks(x, fs).clicks])
        for st in truth["stalls"]:
            assert not np.any((t > st["start_s"] + 0.020) & (t < st["end_s"] - 0.005))


def test_decay_times_alone_do_not_make_two_families():
    # one click family whose measured decay times fall into two groups (a
    # reverberant room does that: 6 ms and 13 ms here, at random), same
    # level and ring: one click per cycle.  Before the level-or-ring
    # condition, the two-means split (Lloyd 1982) called this two families.
    rng = np.random.default_rng(3)
    n = 200
    t = 1.0 + np.cumsum(np.full(n, 1 / 12.0) * (1 + 0.01 * rng.standard_normal(n)))
    decay = np.where(rng.random(n) < 0.3, 0.013, 0.006) * (1 + 0.05 * rng.standard_normal(n))
    clicks = [Click(time_s=float(ti), sample=round(ti * FS),
                    level_dbfs=float(-12 + 0.3 * rng.standard_normal()),
                    strength=20.0, ring_hz=float(1200 * (1 + 0.003 * rng.standard_normal())),
                    decay_s=float(d)) for ti, d in zip(t, decay)]
    _out, cpc = assign_kinds(clicks)
    assert cpc == 1
    # the same clicks with the 30 % group 3 dB quieter are two families
    quieter = [Click(time_s=c.time_s, sample=c.sample,
                     level_dbfs=c.level_dbfs - (3.0 if c.decay_s > 0.0095 else 0.0),
                     strength=20.0, ring_hz=c.ring_hz, decay_s=c.decay_s) for c in clicks]
    _out, cpc = assign_kinds(quieter)
    assert cpc == 2


def test_fold_takes_the_second_click_not_the_rooms_reflection_before_it():
    # a two-click engine at 16 Hz in a reverberant room, 20 dB, generator
    # levels (seed 5): the fold finds the rise at the second click's phase,
    # but a reflection of the main click 6 ms before it rose more sharply in
    # the average, so the onset landed there and the fold was refused:
    # second-click recall 0.000 and one click per cycle before the onset was
    # sought where the bins rose, 0.915 and two after (mir_eval, +-5 ms)
    x, truth, fs = _render(click_to_noise_db=20.0, seed=5, clicks_per_cycle=2,
                           reverb_rt60_s=0.5, steady_rate_hz=16.0, duration_s=40.0)
    res = detect_clicks(x, fs)
    recall2, p = _second_recall_and_precision(res, truth)
    assert res.clicks_per_cycle == 2
    assert recall2 >= 0.8
    assert p >= 0.98


def test_a_group_ringing_where_the_main_click_rings_is_not_the_second_family():
    # a two-click engine at 12 dB, generator levels (seed 3, 60 s): faint
    # start-up and fade pops, their waveforms blurred by noise, formed the
    # first group unlike the main template; it rang at the main click's
    # frequency and became the second template, and the true second clicks
    # were never found: recall of them 0.002 and one click per cycle before
    # such a group was dropped, 0.72 and two after (mir_eval, +-5 ms)
    x, truth, fs = _render(click_to_noise_db=12.0, seed=3, clicks_per_cycle=2,
                           duration_s=60.0, heating_s=4.0, startup_s=8.0, fade_s=8.0,
                           after_s=3.0)  # (the generator's own phases)
    res = detect_clicks(x, fs)
    recall2, p = _second_recall_and_precision(res, truth)
    assert res.clicks_per_cycle == 2
    assert recall2 >= 0.6
    assert p >= 0.98


@pytest.mark.parametrize("seed", [2, 3, 4])
def test_a_main_click_only_the_second_template_found_is_labelled_main(seed):
    # a two-click engine at 16 Hz in a reverberant room, 20 dB, every pop at
    # that level: main clicks the room kept from being accepted and that only
    # the second template found came out as second clicks, two "second"
    # clicks in a row, the later one a whole period after its main click,
    # with the second family's ring.  Share of the true main clicks (mir_eval
    # matching, +-5 ms) labelled main: 0.915 / 0.927 / 0.958 (seeds 2 / 3 /
    # 4) before, 0.970 / 0.958 / 0.996 after; with their ring within 2 % of
    # the truth: 1.000 / 0.938 / 0.968 before, 1.000 / 0.967 / 0.996 after
    # (the ring on the main family's grid).
    x, truth, fs = _render(click_to_noise_db=20.0, seed=seed, clicks_per_cycle=2,
                           reverb_rt60_s=0.5, steady_rate_hz=16.0, duration_s=40.0,
                           startup_level_db=0.0, fade_level_db=0.0, weak_pop_prob=0.0)
    res = detect_clicks(x, fs)
    ref = np.array([c["time_s"] for c in truth["clicks"]])
    est = np.array([c.time_s for c in res.clicks])
    pairs = [(truth["clicks"][i], res.clicks[j])
             for i, j in mir_eval.util.match_events(ref, est, 0.005)
             if truth["clicks"][i]["kind"] == 0]
    assert len(pairs) >= 500
    assert np.mean([c.kind == 0 for _t, c in pairs]) >= 0.95
    assert np.mean([c.ring_hz is not None and abs(c.ring_hz / t["ring_hz"] - 1) <= 0.02
                    for t, c in pairs]) >= 0.95


def test_second_click_relabelled_main_uses_its_own_local_period():
    # a two-click engine whose rate jumps from 10 to 16.7 Hz at cycle 60
    # (second click at 0.45 of the period): the second clicks of every third
    # cycle from 5 to 49 labelled main (relabelled second first), and the
    # main click of cycle 70 labelled second.  That main click lies one local
    # period (60 ms) after the one before; the period must be the one at that
    # main click, not at the main click as many places further on as clicks
    # were relabelled before it (100 ms, from before the jump)
    from popmeter.detection import _second_at_its_place
    periods = np.where(np.arange(120) < 60, 0.100, 0.060)
    mains = 1.0 + np.concatenate([[0.0], np.cumsum(periods[:-1])])
    times, labels = [], []
    for k, (t, p) in enumerate(zip(mains, periods)):
        times += [t, t + 0.45 * p]
        labels += [1 if k == 70 else 0, 0 if 5 <= k < 50 and k % 3 == 2 else 1]
    out = _second_at_its_place(np.array(times), np.array(labels))
    assert out[2 * 70] == 0
    assert all(out[1::2] == 1)


def test_a_run_of_second_clicks_labelled_main_is_relabelled():
    # a two-click engine at 16 Hz (second click at 0.45 of the period), 80
    # cycles; the second clicks of 7 cycles in a row (30-36) labelled main,
    # as when they rang like the main click in a room: around them most
    # main-to-main intervals are split, and over 9 intervals the upper
    # quartile was a split one (the period read about 34 ms instead of 62.5),
    # so none was relabelled; over 25 the quartile is a whole period
    from popmeter.detection import _second_at_its_place
    mains = 1.0 + np.arange(80) * 0.0625
    times, labels = [], []
    for k, t in enumerate(mains):
        times += [t, t + 0.45 * 0.0625]
        labels += [0, 0 if 30 <= k <= 36 else 1]
    out = _second_at_its_place(np.array(times), np.array(labels))
    assert all(out[0::2] == 0)
    assert all(out[1::2] == 1)


def _jittered_mains(seed: int, n: int, period_s: float, jitter: float
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Main-click times from 1 s and each cycle's period: ``period_s`` with
    Gaussian jitter of relative size ``jitter`` (fixed seed)."""
    rng = np.random.default_rng(seed)
    period = period_s * (1.0 + jitter * rng.standard_normal(n))
    return 1.0 + np.concatenate([[0.0], np.cumsum(period[:-1])]), period


def test_a_long_run_of_second_clicks_labelled_main_is_relabelled_by_the_click_times():
    # as above, but the second clicks of 22 cycles in a row (30-51) labelled
    # main, as in a reverberant room where they rang like the main click for
    # over a second: around them even the 25 main-to-main intervals are
    # mostly split (the period read about 31 ms instead of 62.5), and the old
    # code relabelled 6 of the 22.  The click times alone show the period: every click
    # recurs one period later, the second click's delay only every other
    # interval.  A little jitter (0.8 %, fixed seed) keeps it honest.
    from popmeter.detection import _label_free_periods, _second_at_its_place
    mains, period = _jittered_mains(3, 100, 0.0625, 0.008)
    times, labels = [], []
    for k, (t, p) in enumerate(zip(mains, period)):
        times += [t, t + 0.45 * p]
        labels += [0, 0 if 30 <= k <= 51 else 1]
    times = np.array(times)
    free = _label_free_periods(times, np.array([80, 100]))
    np.testing.assert_allclose(free, 0.0625, rtol=0.02)
    out = _second_at_its_place(times, np.array(labels))
    assert all(out[0::2] == 0)
    assert all(out[1::2] == 1)


def test_main_clicks_labelled_second_where_their_second_clicks_were_missed():
    # a two-click engine at 16 Hz (second click at 0.45 of the period, 6 dB
    # quieter), 100 cycles; in cycles 40-59 the second clicks were missed
    # and every other main click (found only by the second template) was
    # labelled second, as in a reverberant room at 20 dB: the main-to-main
    # intervals there read two periods (125 ms), and the old code left all
    # 10 labelled second (steady running then started 6 s late).  Each lies
    # one period after the main click before it and is as loud: a main click
    from popmeter.detection import _second_at_its_place
    mains, period = _jittered_mains(5, 100, 0.0625, 0.008)
    times, labels, levels, truth = [], [], [], []
    for k, (t, p) in enumerate(zip(mains, period)):
        times.append(t)
        labels.append(1 if 40 <= k < 60 and k % 2 else 0)
        levels.append(-10.0)
        truth.append(0)
        if not 40 <= k < 60:
            times.append(t + 0.45 * p)
            labels.append(1)
            levels.append(-16.0)
            truth.append(1)
    out = _second_at_its_place(np.array(times), np.array(labels), levels=np.array(levels))
    assert out.tolist() == truth


@pytest.mark.parametrize("second_db", [-16.0, -12.5])
def test_a_quieter_second_click_half_a_period_late_stays_second(second_db):
    # the start of a run: the second click half a period after its main
    # click (the rate jitters, so 0.45 and 0.55 of the period look alike)
    # and 6 dB (or, in noise that fills the quieter click, 2.5 dB) quieter;
    # from the click times alone the period reads half the true one, so
    # each second click lies "one period" after its main click.  Being
    # quieter than a main click -- nearer the second clicks' median level --
    # it stays a second click (with only a 3 dB test, the 2.5 dB case gave
    # 17 wrong labels)
    from popmeter.detection import _second_at_its_place
    mains, period = _jittered_mains(8, 40, 0.090, 0.08)
    times, labels, levels = [], [], []
    for t, p in zip(mains, period):
        times += [t, t + 0.5 * p]
        labels += [0, 1]
        levels += [-10.0, second_db]
    # the steady run after it, at 16 Hz, so that the start reads slow
    for k in range(120):
        t = mains[-1] + 0.1 + k * 0.0625
        times += [t, t + 0.45 * 0.0625]
        labels += [0, 1]
        levels += [-10.0, second_db]
    out = _second_at_its_place(np.array(times), np.array(labels), levels=np.array(levels))
    assert out.tolist() == labels


def test_label_free_period_with_most_second_clicks_missed():
    # the same engine with 3 of every 4 second clicks missed: the intervals
    # are mostly whole periods, and the period must not read double
    from popmeter.detection import _label_free_periods
    times = []
    for k in range(60):
        t = 1.0 + k * 0.0625
        times.append(t)
        if k % 4 == 0:
            times.append(t + 0.45 * 0.0625)
    times = np.array(times)
    free = _label_free_periods(times, np.array([20, 40, 60]))
    np.testing.assert_allclose(free, 0.0625, rtol=1e-9)


def test_a_room_answering_each_click_below_its_ring_is_not_a_second_click():
    # a one-click engine in a reverberant room (seed 6, 30 dB, every pop at
    # that level, 30 s) where the reverberation of each click swells again
    # about 22 ms later: the fold finds that swell in every cycle, and its
    # average rings at about 0.5 kHz, under the main click's 1.2 kHz.  No
    # mode of the diaphragm lies below the one its click rings at (Leissa,
    # NASA SP-160, Table 2.1), so that is the room: refused, no fold tried
    # again.  The old code made it a second template and decided two clicks
    # per cycle: F 0.632 (precision 0.46); now one click per cycle, F 0.992
    x, truth, fs = _render(click_to_noise_db=30.0, seed=6, clicks_per_cycle=1,
                           reverb_rt60_s=0.5, duration_s=30.0, startup_level_db=0.0,
                           fade_level_db=0.0, weak_pop_prob=0.0)
    det = ClickDetector(fs)
    clicks = list(det.process(x)) + list(det.flush())
    assert det._mf.fold_info["refused_below_main_hz"] < 0.8 * det._mf.templates[0]
    assert len(det._mf.templates) == 1
    res = finish_detection(det, clicks)
    assert res.clicks_per_cycle == 1
    f, _tim, _ring = _score(res, truth)
    assert f >= 0.98


def test_a_template_narrowed_below_the_main_click_is_refused_too(tmp_path):
    # the recording `popmeter simulate --reverb --seed 6` writes (a one-click
    # engine in a reverberant room, 30 dB, the demo boat): the fold's average
    # rings like the main click (1.17 kHz) but the power at its phase rose
    # most at 0.83 kHz, so it was narrowed to the octave there -- and then
    # rang at 0.86 kHz, under the main click, and was installed.  Now the
    # ring under 0.8 of the main click's is tested after the narrowing too.
    # F 0.676 before (precision 0.51), 0.873 after; 0.984 with one click per
    # cycle once the quieter family that rings like the main clicks is taken
    # for the room (the next test)
    import soundfile as sf

    from popmeter.synth import load_truth, simulate_to_file

    path = simulate_to_file(tmp_path / "room.wav", seed=6, reverb=True, click_to_noise_db=30.0)
    x, fs = sf.read(path, dtype="float32")
    det = ClickDetector(fs)
    clicks = list(det.process(x)) + list(det.flush())
    info = det._mf.fold_info
    assert "narrowed_to_hz" in info
    assert info["refused_below_main_hz"] < 0.8 * det._mf.templates[0]
    assert len(det._mf.templates) == 1
    res = finish_detection(det, clicks)
    assert res.clicks_per_cycle == 1
    f, _tim, _ring = _score(res, load_truth(tmp_path / "room.truth.json"))
    assert f >= 0.97


def test_quieter_clicks_ringing_like_the_louder_ones_are_the_room():
    # a one-click engine in the seed-6 reverberant room with the generator's
    # faint start-up pops (30 dB, 30 s): the room's swell 22 ms after each
    # click passes the first stage as a quieter family at one place in the
    # cycle, which the level split and the place test took for second
    # clicks (two per cycle, F 0.915, precision 0.856).  Those clicks ring as
    # the main ones do (a reflection keeps its click's spectrum) and no
    # second template found any: one click per cycle, the echoes set aside
    sc = synth.RunScenario(duration_s=30.0, click_to_noise_db=30.0, seed=6, clicks_per_cycle=1,
                           reverb_rt60_s=0.5)
    x, truth = synth.render(sc)
    res = detect_clicks(x[:, 0], sc.sample_rate_hz)
    assert res.clicks_per_cycle == 1
    f, _tim, _ring = _score(res, truth)
    assert f >= 0.97


@pytest.mark.parametrize("case, f_before", [
    # a one-click engine in a reverberant room (rt60 0.5 s) at 30 dB with the
    # generator's default levels, 60 s: the room answers each click 22 ms
    # (seed 6) or 49 ms (seed 10) later, a fold takes that answer for a
    # second click, and its template rings within 2 % of the main one; its
    # finds, given the second kind, made two clicks per cycle
    ({"seed": 6, "duration_s": 60.0, "reverb_rt60_s": 0.5}, 0.887),
    ({"seed": 10, "duration_s": 60.0, "reverb_rt60_s": 0.5}, 0.947),
    # a dry run, 40 s, with the generator's wall, one reflection of every
    # sound 6 dB down: the reflections, alternating with the clicks, made two
    # clicks per cycle; through the start-up their delay stays fixed while
    # the period falls
    ({"seed": 1, "duration_s": 40.0, "wall_delay_s": 0.025, "wall_level_db": -6.0}, 0.685),
    ({"seed": 1, "duration_s": 40.0, "wall_delay_s": 0.040, "wall_level_db": -6.0}, 0.668),
], ids=["room-6", "room-10", "wall-25ms", "wall-40ms"])
def test_a_reflection_of_each_click_is_not_a_second_click(case, f_before):
    # (F as in f_before before these rooms' and walls' reflections were
    # told from second clicks): one click per cycle, the reflections set aside
    sc = synth.RunScenario(click_to_noise_db=30.0, clicks_per_cycle=1, **case)
    x, truth = synth.render(sc)
    res = detect_clicks(x[:, 0], sc.sample_rate_hz)
    assert res.clicks_per_cycle == 1
    f, _tim, _ring = _score(res, truth)
    assert f >= 0.97 > f_before


def test_quieter_rings_like_louder_by_the_median_rings():
    from popmeter.detection import _quieter_rings_like_louder

    def clicks(rings):
        return [Click(time_s=0.1 * i, sample=4800 * i, level_dbfs=-12.0, strength=20.0,
                      ring_hz=r, decay_s=0.01) for i, r in enumerate(rings)]

    quieter = np.array([False] * 10 + [True] * 10)
    assert _quieter_rings_like_louder(clicks([1200.0] * 10 + [1180.0] * 10), quieter)  # 1.7 %
    assert not _quieter_rings_like_louder(clicks([1200.0] * 10 + [1150.0] * 10), quieter)  # 4.3 %
    assert not _quieter_rings_like_louder(clicks([1200.0] * 10 + [2500.0] * 10), quieter)
    # too few rings on one side to tell
    assert not _quieter_rings_like_louder(clicks([1200.0] * 10 + [1200.0] * 7 + [None] * 3),
                                          quieter)


def test_a_folded_template_full_of_the_rooms_ring_keeps_the_second_clicks_octave():
    # a two-click engine at 16 Hz in a reverberant room, 20 dB, every pop at
    # that level (seed 6): the fold finds the second clicks' place, but the
    # main click's reverberation fills the window there, and the template
    # rang at the main click's 1.2 kHz although the power at the phase rose
    # most at 2.5 kHz (where the second click rings most).  That template
    # found main clicks as second clicks.  Share of the true main clicks
    # (mir_eval matching, +-5 ms) labelled main: 0.656 before, 0.985 with only
    # the octave about 2.5 kHz kept; F 0.877 before, 0.922 after; second-click
    # recall 0.634 before, 0.812 after; precision 0.970 / 0.973
    x, truth, fs = _render(click_to_noise_db=20.0, seed=6, clicks_per_cycle=2,
                           reverb_rt60_s=0.5, steady_rate_hz=16.0, duration_s=40.0,
                           startup_level_db=0.0, fade_level_db=0.0, weak_pop_prob=0.0)
    res = detect_clicks(x, fs)
    f, _tim, _ring = _score(res, truth)
    assert f >= 0.9
    ref = np.array([c["time_s"] for c in truth["clicks"]])
    est = np.array([c.time_s for c in res.clicks])
    mains = [res.clicks[j].kind == 0 for i, j in mir_eval.util.match_events(ref, est, 0.005)
             if truth["clicks"][i]["kind"] == 0]
    assert len(mains) >= 500
    assert np.mean(mains) >= 0.95
    recall2, p = _second_recall_and_precision(res, truth)
    assert recall2 >= 0.75
    assert p >= 0.96
    assert res.clicks_per_cycle == 2


def test_second_look_promotes_no_candidate_a_few_ms_from_a_matched_filter_find():
    # a two-click engine (62.5 ms cycles, second click 28 ms after the main
    # one) in a room whose answer to each main click, 22 ms later, rings as
    # the main click rings, 7 dB down (not the 9 dB of a weak echo); in ten
    # cycles the frame stage missed the second click, which the matched
    # filter found, and rejected the room's answer
    mains = [Click(time_s=0.0625 * i, sample=3000 * i, level_dbfs=-20.0, strength=20.0,
                   ring_hz=1200.0 + i, decay_s=0.004) for i in range(40)]
    seconds = [Click(time_s=0.0625 * i + 0.028, sample=3000 * i + 1344, level_dbfs=-26.0,
                     strength=15.0, ring_hz=2500.0 + i, decay_s=0.002) for i in range(10, 40)]
    kept = sorted(mains + seconds, key=lambda c: c.sample)
    answers = [Click(time_s=0.0625 * i + 0.022, sample=3000 * i + 1056, level_dbfs=-27.0,
                     strength=9.0, ring_hz=1201.0, decay_s=0.01) for i in range(10)]
    finds = np.array([0.0625 * i + 0.028 for i in range(10)])
    # (refractory time 12.5 ms: the detector's default highest rate, 80 Hz)
    assert len(_second_look(kept, answers, refractory_s=0.0125)) == 10
    assert _second_look(kept, answers, refractory_s=0.0125, found_s=finds) == []
    # the filter's find of the candidate itself (0.6 ms off) lets it be promoted
    same = np.array([c.time_s + 0.0006 for c in answers])
    assert len(_second_look(kept, answers, refractory_s=0.0125, found_s=same)) == 10


def _two_click_room(seed):
    """30 s of a two-click engine (16 Hz) in a reverberant room (rt60 0.5 s), 30 dB, every
    pop at the stated level."""
    return _render_full(duration_s=30.0, click_to_noise_db=30.0, seed=seed, clicks_per_cycle=2,
                        reverb_rt60_s=0.5, steady_rate_hz=16.0, startup_level_db=0.0,
                        fade_level_db=0.0, weak_pop_prob=0.0)


def test_two_click_engine_in_a_room_keeps_its_second_clicks_over_the_rooms_answer():
    # generator, 30 s, reverberant room (rt60 0.5 s), 30 dB, every pop at the
    # stated level: the room answers each main click 22 ms later, 6 ms before
    # the second click; where the frame stage rejected that answer and missed
    # the second click, the answer was promoted and hid the matched filter's
    # find of the second click (F 0.855 before, 0.906 after)
    x, truth, fs = _two_click_room(seed=6)
    res = detect_clicks(x, fs)
    assert res.clicks_per_cycle == 2
    f, _, _ = _score(res, truth)
    assert f >= 0.89


def test_two_click_engine_in_a_room_at_12_db_folds_with_the_main_clicks_filled_in():
    # generator, 60 s, reverberant room (rt60 0.5 s), 12 dB, every pop at the
    # stated level, seed 11: the free scan finds so few main clicks that the
    # last fold's 28 s window held 110 whole cycles, no fold formed a
    # template and the engine was taken for a one-click one (F 0.454); from
    # the fifth fold the main clicks found between known ones join the fold
    # (F 0.722)
    x, truth, fs = _render_full(duration_s=60.0, click_to_noise_db=12.0, seed=11,
                                clicks_per_cycle=2, reverb_rt60_s=0.5, steady_rate_hz=16.0,
                                startup_level_db=0.0, fade_level_db=0.0, weak_pop_prob=0.0)
    res = detect_clicks(x, fs)
    assert res.clicks_per_cycle == 2
    f, _, _ = _score(res, truth)
    assert f >= 0.68


def test_reject_atypical_keeps_a_family_known_from_the_templates():
    # 100 main clicks at 1.2 kHz and 4 second clicks at 2.5 kHz (4 % of the
    # clicks, under the 5 % that makes a family on its own): the second
    # template's ring vouches for them
    clicks = [Click(time_s=0.1 * i, sample=4800 * i, level_dbfs=-20.0, strength=20.0,
                    ring_hz=1200.0 * (1 + 0.001 * (i % 5)), decay_s=0.004) for i in range(100)]
    clicks += [Click(time_s=0.1 * i + 0.03, sample=4800 * i + 1440, level_dbfs=-26.0,
                     strength=12.0, ring_hz=2490.0 + i, decay_s=0.002) for i in range(4)]
    clicks.sort(key=lambda c: c.sample)
    kept, dropped = reject_atypical(clicks)
    assert len(kept) == 100 and {c.ring_hz for c in dropped} == {2490.0, 2491.0, 2492.0, 2493.0}
    kept, dropped = reject_atypical(clicks, known_hz=[1201.0, 2500.0])
    assert len(kept) == 104 and dropped == []
    # a template ringing elsewhere vouches for nothing here
    assert len(reject_atypical(clicks, known_hz=[4000.0])[1]) == 4


def test_two_click_engine_in_a_room_keeps_the_second_clicks_the_frame_stage_accepted():
    # the same room, seed 9: the frame stage accepts few second clicks (most
    # come from the matched filter), too few to make a family of the accepted
    # clicks' rings, so the start-up's accepted second clicks were dropped as
    # atypical, and the filter, which leaves accepted clicks alone, had not
    # looked for them (second clicks matched: 289 of 306 before, 303 after)
    x, truth, fs = _two_click_room(seed=9)
    res = detect_clicks(x, fs)
    ref = np.array([c["time_s"] for c in truth["clicks"]])
    est = np.array([c.time_s for c in res.clicks])
    seconds = [i for i, c in enumerate(truth["clicks"]) if c["kind"] == 1]
    matched = {i for i, _ in mir_eval.util.match_events(ref, est, 0.005)}
    assert len(matched.intersection(seconds)) >= 298
    f, _, _ = _score(res, truth)
    assert f >= 0.987
