"""Tests of the synthetic recording generator (popmeter.synth) and its ground truth."""

from __future__ import annotations

import itertools
import json
import math
from pathlib import Path

import numpy as np
import pytest

from popmeter.errors import InputError, UsageError
from popmeter.synth import (
    CLAMPED_CIRCLE_LAMBDA2,
    Distractor,
    RunScenario,
    load_truth,
    render,
    room_impulse_response,
    simulate_to_file,
    truth_path_for,
)

# A short run: 2 s heating, 3 s startup, 6 s steady, 3 s fade, 1.5 s after.
SHORT = {"duration_s": 15.5, "heating_s": 2.0, "startup_s": 3.0, "fade_s": 3.0, "after_s": 1.5,
             "sample_rate_hz": 24000}


def short(**kw) -> RunScenario:
    return RunScenario(**{**SHORT, **kw})


def _phase(truth: dict, name: str) -> dict | None:
    return next((p for p in truth["phases"] if p["name"] == name), None)


def _brickwall(x: np.ndarray, fs: float, band: tuple[float, float]) -> np.ndarray:
    # independent of popmeter: ideal band-pass by zeroing FFT bins
    spec = np.fft.rfft(x.astype(np.float64))
    f = np.fft.rfftfreq(len(x), 1 / fs)
    spec[(f < band[0]) | (f > band[1])] = 0
    return np.fft.irfft(spec, n=len(x))


def test_deterministic_for_a_seed():
    a, ta = render(short(seed=7, clicks_per_cycle=2, distractors=("knock",)))
    b, tb = render(short(seed=7, clicks_per_cycle=2, distractors=("knock",)))
    c, tc = render(short(seed=8, clicks_per_cycle=2, distractors=("knock",)))
    assert a.dtype == np.float32 and a.shape == (int(15.5 * 24000), 1)
    assert np.array_equal(a, b)
    assert json.dumps(ta, sort_keys=True) == json.dumps(tb, sort_keys=True)
    assert not np.array_equal(a, c)
    assert ta["cycle_starts_s"] != tc["cycle_starts_s"]


def test_same_seed_same_clicks_at_any_noise_level():
    _, quiet = render(short(seed=3, click_to_noise_db=40.0))
    _, noisy = render(short(seed=3, click_to_noise_db=12.0, hum_dbfs=-40.0))
    assert [c["sample"] for c in quiet["clicks"]] == [c["sample"] for c in noisy["clicks"]]


def test_click_onset_is_first_nonzero_sample():
    # no noise, slow rate: each click's tail has died before the next click
    x, truth = render(short(click_to_noise_db=None, steady_rate_hz=8.0, seed=1))
    x = x[:, 0]
    assert len(truth["clicks"]) > 40
    for c in truth["clicks"]:
        n0 = c["sample"]
        assert c["time_s"] == n0 / truth["sample_rate_hz"]
        assert x[n0 - 1] == 0.0 and x[n0] != 0.0


@pytest.mark.parametrize("cpc,rt60_s", [(1, None), (2, None), (1, 0.3), (2, 0.3)])
def test_every_truth_click_sits_at_an_energy_onset(cpc, rt60_s):
    fs = 24000
    # no weak pops here: a pop 20-30 dB down can drown in the previous click's
    # reverberation, as it does in a real room
    x, truth = render(short(click_to_noise_db=50.0, clicks_per_cycle=cpc, seed=2,
                            reverb_rt60_s=rt60_s, weak_pop_prob=0.0))
    x = x[:, 0].astype(np.float64)
    w = int(0.0005 * fs)  # 0.5 ms windows
    ratios = []
    for c in truth["clicks"]:
        n0 = c["sample"]
        after = np.sum(x[n0:n0 + w] ** 2)
        before = np.sum(x[n0 - w:n0] ** 2)
        ratios.append(after / max(before, 1e-30))
    ratios = np.array(ratios)
    kinds = np.array([c["kind"] for c in truth["clicks"]])
    if rt60_s is None:
        # the energy rises by more than 10 dB at every onset (quiet startup
        # pops and the previous click's ring included)
        assert ratios.min() > 10.0, ratios.min()
    else:
        # in a room the second click (6 dB weaker, 18 dB more in the fade)
        # rises out of the main click's reverberation by less, but still rises
        assert ratios[kinds == 0].min() > 10.0, ratios[kinds == 0].min()
        assert ratios.min() > 1.5, ratios.min()
    # and one window later the onset is no longer a rise: the truth is not late
    late = [np.sum(x[c["sample"] + 3 * w:c["sample"] + 4 * w] ** 2)
            / max(np.sum(x[c["sample"] + 2 * w:c["sample"] + 3 * w] ** 2), 1e-30)
            for c in truth["clicks"]]
    assert np.median(late) < 3.0


def test_clicks_only_between_heating_and_after():
    _, truth = render(short(seed=4, stalls=1))
    heating, after = _phase(truth, "heating"), _phase(truth, "after")
    times = np.array([c["time_s"] for c in truth["clicks"]])
    assert heating["start_s"] == 0.0 and heating["end_s"] == times.min()
    assert after["start_s"] == times.max() and after["end_s"] == truth["duration_s"]
    assert times.min() >= 2.0 and times.max() <= 15.5 - 1.5
    names = [p["name"] for p in truth["phases"]]
    assert names == ["heating", "startup", "steady", "fade", "after"]
    for a, b in zip(truth["phases"], truth["phases"][1:]):
        assert a["end_s"] == pytest.approx(b["start_s"])


@pytest.mark.parametrize("ctn_db", [30.0, 12.0])
def test_click_to_noise_ratio_measured_back(ctn_db):
    # definition (popmeter.synth docstring): peak of the nominal steady main
    # click over the RMS of the background noise, both in the click band
    fs = 24000
    s = short(click_to_noise_db=ctn_db, seed=5, heating_s=4.0, duration_s=17.5)
    x, truth = render(s)
    clean, _ = render(s.replace(click_to_noise_db=None))  # same seed: the same clicks
    band = tuple(truth["click_band_hz"])
    y = _brickwall(x[:, 0], fs, band)
    y0 = _brickwall(clean[:, 0], fs, band)
    noise_rms = np.sqrt(np.mean(y[int(0.5 * fs):int(3.5 * fs)] ** 2))
    steady = _phase(truth, "steady")
    mains = [c["sample"] for c in truth["clicks"]
             if c["kind"] == 0 and steady["start_s"] <= c["time_s"] < steady["end_s"]]

    def ratio_db(sig: np.ndarray) -> float:
        peaks = [np.max(np.abs(sig[n:n + int(0.003 * fs)])) for n in mains]
        return 20 * math.log10(np.median(peaks) / noise_rms)

    assert ratio_db(y0) == pytest.approx(ctn_db, abs=0.5)
    if ctn_db >= 25:  # at high ratios the noise riding on each peak hardly matters
        assert ratio_db(y) == pytest.approx(ctn_db, abs=1.0)


def test_ring_modes_follow_clamped_circle_roots():
    # Leissa, Vibration of Plates, NASA SP-160 (1969), clamped circular plate:
    # lambda^2 = 10.2158, 21.26, 34.88, 39.771 for the first four modes.
    leissa = (10.2158, 21.26, 34.88, 39.771)
    _, truth = render(short(click_to_noise_db=None))
    modes = np.array(truth["ring_modes_hz"])
    assert len(modes) == 4
    np.testing.assert_allclose(modes / modes[0], np.array(leissa) / leissa[0], rtol=2e-3)
    np.testing.assert_allclose(CLAMPED_CIRCLE_LAMBDA2, leissa, rtol=2e-3)
    assert truth["ring_hz"] == modes[0]


def test_rendered_ring_is_at_the_lowest_mode():
    fs = 48000
    s = short(click_to_noise_db=None, sample_rate_hz=fs, ring_freq_sd_pct=0.0, seed=6,
              ring_modes_hz=tuple(1850.0 * lam / 10.2158 for lam in CLAMPED_CIRCLE_LAMBDA2))
    x, truth = render(s)
    c = next(c for c in truth["clicks"] if c["time_s"] > 6.0)
    seg = x[c["sample"]:c["sample"] + 4096, 0] * np.hanning(4096)
    spec = np.abs(np.fft.rfft(seg, 8 * 4096))
    f = np.fft.rfftfreq(8 * 4096, 1 / fs)
    assert f[np.argmax(spec)] == pytest.approx(1850.0, rel=0.005)
    assert truth["ring_hz"] == pytest.approx(1850.0)


def test_modes_above_nyquist_are_dropped():
    _, truth = render(short(sample_rate_hz=8000, click_to_noise_db=None,
                            ring_modes_hz=(1500.0, 3122.0, 5121.0, 5840.0)))
    assert truth["ring_modes_hz"] == [1500.0, 3122.0]
    assert any("left out" in w for w in truth["warnings"])
    with pytest.raises(UsageError):
        render(short(sample_rate_hz=8000, ring_modes_hz=(4000.0,), ring_mode_amplitudes=(1.0,),
                     ring_mode_decay_s=(0.01,)))


def test_steady_rate_matches_cycle_start_intervals():
    _, truth = render(short(seed=9, steady_rate_hz=14.0, jitter_pct=1.0))
    starts = np.array(truth["cycle_starts_s"])
    steady = _phase(truth, "steady")
    inside = (starts >= steady["start_s"] - 1e-9) & (starts < steady["end_s"] - 1e-9)
    idx = np.flatnonzero(inside)
    rates = 1.0 / (starts[idx + 1] - starts[idx])
    assert truth["steady_rate_hz"] == pytest.approx(float(np.median(rates)), rel=1e-9)
    assert truth["steady_rate_hz"] == pytest.approx(14.0, rel=0.01)
    # the main clicks in steady running are the cycle starts themselves
    mains = {c["sample"] for c in truth["clicks"] if c["kind"] == 0}
    fs = truth["sample_rate_hz"]
    assert all(round(t * fs) in mains for t in starts[idx])


def test_stalls_are_real_gaps():
    _, truth = render(short(seed=11, stalls=2, fade_s=5.0, duration_s=17.5))
    assert len(truth["stalls"]) == 2
    times = np.array([c["time_s"] for c in truth["clicks"]])
    period = 1.0 / truth["steady_rate_hz"]
    fade = _phase(truth, "fade")
    for st in truth["stalls"]:
        assert fade["start_s"] <= st["start_s"] < st["end_s"] <= fade["end_s"]
        assert not np.any((times > st["start_s"]) & (times < st["end_s"]))
        assert st["start_s"] in times and st["end_s"] in times
        assert st["end_s"] - st["start_s"] > 2.5 * period
    # outside stalls no gap in the fade is that long
    in_fade = times[(times >= fade["start_s"]) & (times <= fade["end_s"])]
    gaps = np.diff(in_fade)
    assert np.sum(gaps > 2.5 * period) == 2


def test_two_click_engine_alternates_kinds():
    _, truth = render(short(seed=12, clicks_per_cycle=2))
    kinds = [c["kind"] for c in truth["clicks"]]
    assert kinds[0] == 0
    assert all(a != b for a, b in itertools.pairwise(kinds))
    cycles = [c["cycle"] for c in truth["clicks"]]
    assert cycles[0::2] == cycles[1::2]
    steady = _phase(truth, "steady")
    lv = {k: np.median([c["level_dbfs"] for c in truth["clicks"] if c["kind"] == k
                        and steady["start_s"] <= c["time_s"] < steady["end_s"]]) for k in (0, 1)}
    assert lv[1] == pytest.approx(lv[0] - 6.0, abs=1.5)


def test_startup_has_missed_and_weak_pops():
    _, truth = render(short(seed=13, missed_pop_prob=0.3, weak_pop_prob=0.3))
    startup = _phase(truth, "startup")
    assert truth["missed_pops"]
    assert all(startup["start_s"] < m["time_s"] < startup["end_s"] for m in truth["missed_pops"])
    clicked = {c["cycle"] for c in truth["clicks"]}
    assert not clicked & {m["cycle"] for m in truth["missed_pops"]}
    assert any(c["weak"] for c in truth["clicks"])


def test_start_and_end_mid_run():
    _, truth = render(short(seed=14, start_mid_run=True, end_mid_run=True))
    assert [p["name"] for p in truth["phases"]] == ["steady"]
    assert truth["clicks"][0]["time_s"] < 1.0 / 12.0 * 1.1
    assert truth["duration_s"] - truth["clicks"][-1]["time_s"] < 1.0 / 12.0 * 1.2
    assert truth["starts_mid_run"] and truth["ends_mid_run"]
    _, truth = render(short(seed=14, end_mid_run=True))
    assert [p["name"] for p in truth["phases"]] == ["heating", "startup", "steady"]


def test_never_settles_has_no_steady_phase():
    _, truth = render(short(seed=15, never_settles=True, duration_s=25.0))
    assert truth["steady_rate_hz"] is None
    assert "steady" not in [p["name"] for p in truth["phases"]]
    starts = np.array(truth["cycle_starts_s"])
    rates = 1 / np.diff(starts[(starts > 6) & (starts < 20)])
    assert np.ptp(rates) / np.median(rates) > 0.2  # wanders by far more than a steady run


def test_distractors_are_placed_and_audible():
    fs = 24000
    x, truth = render(short(seed=16, click_to_noise_db=30.0,
                            distractors=(Distractor("match", time_s=0.3),
                                         Distractor("speech", time_s=1.0), "splash", "knock")))
    types = sorted(d["type"] for d in truth["distractors"])
    assert types == ["knock", "match", "speech", "splash"]
    noise_rms = np.sqrt(np.mean(x[int(15.0 * fs):, 0] ** 2))
    for d in truth["distractors"]:
        seg = x[int(d["time_s"] * fs):int(d["end_s"] * fs), 0]
        assert np.max(np.abs(seg)) > 10 * noise_rms
    match = next(d for d in truth["distractors"] if d["type"] == "match")
    assert match["time_s"] == 0.3


def test_room_impulse_response_rt60():
    # Schroeder backward integration (Schroeder, JASA 37, 1965); T20 from the
    # -5 to -25 dB span of the decay curve, extrapolated to 60 dB (ISO 3382-1).
    fs = 16000
    h = room_impulse_response(sample_rate_hz=fs, rt60_s=0.6, rng=np.random.default_rng(0))
    tail = h[int(0.003 * fs):]
    edc = np.cumsum(tail[::-1] ** 2)[::-1]
    edc_db = 10 * np.log10(edc / edc[0])
    t = np.arange(len(tail)) / fs
    sel = (edc_db <= -5) & (edc_db >= -25)
    slope_db_per_s = np.polyfit(t[sel], edc_db[sel], 1)[0]
    assert -60.0 / slope_db_per_s == pytest.approx(0.6, rel=0.08)
    drr_db = 10 * np.log10(h[0] ** 2 / np.sum(tail**2))
    assert drr_db == pytest.approx(3.0, abs=0.01)


def test_a_wall_adds_one_delayed_quieter_copy_of_every_sound():
    # a single specular reflection: the recording is the wall-less one plus
    # itself delayed and scaled (noise off: the noise is not reflected);
    # 6.4 ms is 2.2 m of extra path at 343 m/s (20 C, from memory)
    fs = 24000
    base = short(click_to_noise_db=None, distractors=("knock",), seed=5)
    x0, truth0 = render(base)
    x1, truth1 = render(base.replace(wall_delay_s=0.0064, wall_level_db=-12.0))
    k, g = round(0.0064 * fs), 10 ** (-12.0 / 20)
    expect = x0[:, 0].astype(np.float64)
    expect[k:] += g * x0[:-k, 0]
    assert np.allclose(x1[:, 0], expect, atol=2e-6)
    assert truth1["clicks"] == truth0["clicks"]  # a reflection is not a click
    assert truth1["scenario"]["wall_delay_s"] == 0.0064
    with pytest.raises(UsageError, match="wall_level_db"):
        render(base.replace(wall_delay_s=0.01, wall_level_db=3.0))
    with pytest.raises(UsageError, match="wall_delay_s"):
        render(base.replace(wall_delay_s=-0.01))


def test_click_channel_is_the_loudest():
    fs = 24000
    x, truth = render(short(channels=3, click_channel=2, seed=17))
    assert x.shape[1] == 3 and truth["click_channel"] == 2
    c = [c for c in truth["clicks"] if c["time_s"] > 6.0][:20]
    peaks = [np.median([np.max(np.abs(x[k["sample"]:k["sample"] + 48, ch])) for k in c])
             for ch in range(3)]
    assert int(np.argmax(peaks)) == 2
    # independent noise on every channel
    assert not np.allclose(x[:fs, 0], x[:fs, 1])


def test_bad_scenarios_raise_usage_errors():
    with pytest.raises(UsageError, match="do not fit"):
        render(RunScenario(duration_s=10.0))
    with pytest.raises(UsageError, match="unknown distractor"):
        render(short(distractors=("thunder",)))
    with pytest.raises(UsageError, match="clicks_per_cycle"):
        render(short(clicks_per_cycle=3))


def test_simulate_to_file_and_load_truth(tmp_path):
    import soundfile as sf

    out = simulate_to_file(tmp_path / "unit.wav", seed=3, duration_s=12.0, sample_rate_hz=16000,
                           click_to_noise_db=25.0, clicks_per_cycle=2, stalls=1,
                           distractors=("knock", "hum"), reverb=True, wall_ms=12.5,
                           wall_db=-8.0)
    assert out == tmp_path / "unit.wav" and out.exists()
    assert truth_path_for(out) == tmp_path / "unit.truth.json"
    truth = load_truth(out)
    assert truth == load_truth(tmp_path / "unit.truth.json")
    assert truth["schema"] == "popmeter.truth/1"
    info = sf.info(str(out))
    assert info.samplerate == 16000 and info.frames == truth["frames"] == 12 * 16000
    assert truth["clicks_per_cycle"] == 2 and truth["hum_hz"] == 50.0
    assert [d["type"] for d in truth["distractors"]] == ["knock"]
    assert truth["reverb_rt60_s"] == 0.5
    assert truth["scenario"]["wall_delay_s"] == 0.0125
    assert truth["scenario"]["wall_level_db"] == -8.0
    assert truth["clicks"] and len(truth["stalls"]) == 1
    with pytest.raises(UsageError, match="thunder"):
        simulate_to_file(tmp_path / "x.wav", duration_s=12.0, distractors=("thunder",))


def test_load_truth_errors(tmp_path):
    with pytest.raises(InputError, match="not found"):
        load_truth(tmp_path / "nothing.wav")
    bad = tmp_path / "bad.truth.json"
    bad.write_text("{not json")
    with pytest.raises(InputError, match="bad.truth.json"):
        load_truth(bad)
    other = tmp_path / "other.truth.json"
    other.write_text('{"schema": "something/1"}')
    with pytest.raises(InputError, match="schema"):
        load_truth(other)


# --- clicks from a boat profile ------------------------------------------------------

BRASS_E_PA, BRASS_NU, BRASS_RHO = 110e9, 0.33, 8530.0  # handbook brass 70/30 (physics.md)


def _clamped_circle_ring_hz(diameter_m: float, thickness_m: float) -> float:
    # f = lambda^2 / (2 pi a^2) sqrt(D / (rho h)), lambda^2 = 10.2158 (Leissa, NASA SP-160)
    a = diameter_m / 2
    d = BRASS_E_PA * thickness_m**3 / (12 * (1 - BRASS_NU**2))
    return 10.2158 / (2 * math.pi * a**2) * math.sqrt(d / (BRASS_RHO * thickness_m))


@pytest.mark.parametrize("factor", [0.7, 1.0, 1.3])
def test_profile_clicks_ring_at_the_plate_modes(factor):
    from popmeter.engine import predict
    from popmeter.profile import example_profile
    from popmeter.synth import scenario_from_profile

    prof = example_profile()  # 25 mm round brass diaphragm, 0.10 mm
    s = scenario_from_profile(prof, thickness_factor=factor, **SHORT, click_to_noise_db=None)
    h = 0.10e-3 * factor
    assert s.ring_modes_hz[0] == pytest.approx(_clamped_circle_ring_hz(25e-3, h), rel=1e-3)
    # Leissa, NASA SP-160: mode ratios = ratios of lambda^2 (10.2158, 21.26, 34.88, 39.771)
    np.testing.assert_allclose(np.array(s.ring_modes_hz) / s.ring_modes_hz[0],
                               np.array([10.2158, 21.26, 34.88, 39.771]) / 10.2158, rtol=2e-3)
    assert s.steady_rate_hz == pytest.approx(predict(prof, thickness_m=h).rate_hz)
    _, truth = render(s)
    assert truth["ring_hz"] == pytest.approx(s.ring_modes_hz[0])


def test_simulate_to_file_records_the_diaphragm(tmp_path):
    from popmeter.profile import example_profile, write_profile

    boat = tmp_path / "boat.toml"
    write_profile(example_profile(), boat)
    thin = simulate_to_file(tmp_path / "thin.flac", boat=boat, duration_s=10.0,
                            sample_rate_hz=22050, thickness_factor=0.8)
    nominal = simulate_to_file(tmp_path / "nominal.flac", boat=boat, duration_s=10.0,
                               sample_rate_hz=22050)
    t_thin, t_nom = load_truth(thin), load_truth(nominal)
    assert t_thin["profile"]["diaphragm"]["thickness_mm"] == 0.10
    assert t_thin["diaphragm"]["thickness_m"] == pytest.approx(0.08e-3)
    # clamped circle: K_p = 192 D / (pi a^6), D ~ h^3 (Timoshenko & Woinowsky-Krieger, sec. 15)
    a = 12.5e-3
    d = BRASS_E_PA * (0.1e-3) ** 3 / (12 * (1 - BRASS_NU**2))
    k_kpa_per_ml = 192 * d / (math.pi * a**6) * 1e-9
    assert t_nom["diaphragm"]["stiffness_kpa_per_ml"] == pytest.approx(k_kpa_per_ml, rel=1e-3)
    assert t_thin["diaphragm"]["stiffness_kpa_per_ml"] == pytest.approx(
        k_kpa_per_ml * 0.8**3, rel=1e-3)
    # a thinner plate rings lower (f ~ h) and the engine runs slower
    assert t_thin["ring_hz"] == pytest.approx(0.8 * t_nom["ring_hz"], rel=1e-6)
    assert t_thin["steady_rate_hz"] < t_nom["steady_rate_hz"]


def test_never_starts_is_background_only():
    x, truth = render(short(seed=18, never_starts=True, click_to_noise_db=30.0))
    assert truth["clicks"] == [] and truth["cycle_starts_s"] == []
    assert truth["steady_rate_hz"] is None and truth["first_click_s"] is None
    assert [p["name"] for p in truth["phases"]] == ["heating"]
    assert np.std(x) > 0  # background noise is there


def test_scenario_from_truth_reproduces_the_recording():
    from popmeter.synth import scenario_from_truth

    s = short(seed=19, clicks_per_cycle=2, stalls=1,
              distractors=(Distractor("match", time_s=1.0), "knock"))
    x, truth = render(s)
    again = scenario_from_truth(json.loads(json.dumps(truth)))
    assert again == s
    y, truth2 = render(again)
    assert np.array_equal(x, y) and truth2 == truth


BUNDLE = Path(__file__).resolve().parent.parent / "synthetic_audio"


@pytest.mark.skipif(not (BUNDLE / "clean_run.flac").exists(), reason="no synthetic_audio/ bundle")
@pytest.mark.parametrize("name", ["clean_run.flac", "two_click_run.flac",
                                  "batch_demo/KW-2611-008.flac"])
def test_bundled_recordings_match_their_truth(name):
    # the shipped audio is the generator's output for the scenario in its truth
    # (regenerate with benchmarks/make_synthetic_audio.py when the generator changes)
    import soundfile as sf

    from popmeter.synth import scenario_from_truth

    path = BUNDLE / name
    truth = load_truth(path)
    audio, fs = sf.read(str(path), dtype="float32", always_2d=True)
    assert fs == truth["sample_rate_hz"] and len(audio) == truth["frames"]
    x, again = render(scenario_from_truth(truth))
    assert [c["sample"] for c in again["clicks"]] == [c["sample"] for c in truth["clicks"]]
    assert np.max(np.abs(audio - x)) <= 1.0 / 32768  # 16-bit rounding only


@pytest.mark.skipif(not (BUNDLE / "demo_spec.toml").exists(), reason="no synthetic_audio/ bundle")
def test_bundled_boat_and_spec_load():
    from popmeter.engine import predict
    from popmeter.profile import load_profile
    from popmeter.qc_spec import load_spec

    boat = load_profile(BUNDLE / "demo_boat.toml")
    spec = load_spec(BUNDLE / "demo_spec.toml")
    assert spec is not None
    truth = load_truth(BUNDLE / "clean_run.flac")
    assert truth["profile"]["name"] == boat.name
    assert truth["ring_hz"] == pytest.approx(predict(boat).ring_hz)


def test_schema_doc_names_every_truth_key(tmp_path):
    from popmeter.synth import truth_schema_doc

    truth = load_truth(simulate_to_file(tmp_path / "a.wav", duration_s=5.0, sample_rate_hz=16000))
    doc = truth_schema_doc()
    missing = [k for k in truth if k not in doc]
    assert not missing, missing


def test_simulate_command_line(tmp_path):
    from popmeter.cli import main

    out = tmp_path / "sub" / "run.flac"
    rc = main(["simulate", "--out", str(out), "--duration", "6", "--samplerate", "16000",
               "--clicks-per-cycle", "2", "--snr", "20", "--distractors", "splash,hum",
               "--thickness-factor", "0.9", "--seed", "4"])
    assert rc == 0 and out.exists()
    truth = load_truth(out)
    assert truth["clicks_per_cycle"] == 2 and truth["click_to_noise_db"] == 20.0
    assert truth["diaphragm"]["thickness_factor"] == 0.9 and truth["seed"] == 4
    assert main(["simulate", "--out", str(tmp_path / "x.wav"), "--distractors", "thunder"]) == 2
