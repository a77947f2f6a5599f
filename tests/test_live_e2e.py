"""End to end through the real audio stack: JACK dummy server -> PortAudio -> ``popmeter listen``.

A generated test-tank recording is played into a private JACK dummy server (a
clocked virtual sound card); ``python -m popmeter listen`` records it as a
subprocess. Checks: the saved file holds the source samples bit for bit (both
are float32), the live clicks equal the offline clicks of the same file within
1 ms for >= 98 % of them, silence after the run ends the capture in audio time,
and a server that dies mid-run is reported while the audio already captured is
kept. Skipped, with the reason, only where jackd, JACK-Client or PortAudio
cannot be used.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
import soundfile as sf
from live_feeder import DummyJackServer, JackUnavailable, Player, align

pytestmark = pytest.mark.live

SR = 48000


def _start_server(name, log_dir):
    # A 2048-frame period (43 ms): the dummy server runs without real-time
    # priority on a shared 2-core machine, and the capture's Python callback
    # must win the interpreter lock within one period; sound-card drivers
    # commonly buffer as much or more (common practice, no source).
    server = DummyJackServer(name, sample_rate_hz=SR, period_frames=2048,
                             log_path=log_dir / f"{name}.log")
    try:
        server.start()
    except JackUnavailable as exc:
        pytest.skip(f"live end-to-end test needs a JACK dummy server: {exc}")
    probe = subprocess.run(
        [sys.executable, "-c",
         ("import sounddevice as sd; print(sum(1 for d in sd.query_devices() "
          "if d['max_input_channels'] > 0 and "
          "sd.query_hostapis(d['hostapi'])['name'].startswith('JACK')))")],
        check=False, env=server.env, capture_output=True, text=True, timeout=20)
    if probe.returncode != 0 or probe.stdout.strip() in ("", "0"):
        server.stop()
        pytest.skip("PortAudio does not see the JACK server (libportaudio2 without JACK "
                    f"support?): {probe.stderr.strip()[-200:]}")
    return server


@pytest.fixture(scope="module")
def jack_server(tmp_path_factory):
    """One private dummy server for the tests that leave it running."""
    server = _start_server(f"popmeter-e2e-{os.getpid()}", tmp_path_factory.mktemp("jack"))
    try:
        yield server
    finally:
        server.stop()  # always: the finalizer kills jackd by its pid


@pytest.fixture
def own_jack_server(tmp_path):
    """A server of its own, for a test that kills it."""
    server = _start_server(f"popmeter-e2e-lost-{os.getpid()}", tmp_path)
    try:
        yield server
    finally:
        server.stop()


def _source(seed=3):
    from popmeter.synth import RunScenario, render

    samples, truth = render(RunScenario(duration_s=4.5, heating_s=0.3, startup_s=1.0,
                                        fade_s=1.0, after_s=0.5, seed=seed))
    x = samples[:, 0].astype(np.float32)
    assert x[0] != 0  # the first sample marks where playback starts in the capture
    return x, truth


def _listen(server, out, *args):
    cmd = [sys.executable, "-m", "popmeter", "listen", "--out", str(out), "--no-view", *args]
    return subprocess.Popen(cmd, env=server.env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def _capture(server, src, tmp_path, name):
    out = tmp_path / f"{name}.wav"
    player = Player(server, src)
    try:
        t0 = time.monotonic()
        proc = _listen(server, out, "--max-seconds", "12", "--silence-stop", "1.0",
                       "--json", str(tmp_path / f"{name}.json"))
        player.connect_when_ready()
        stdout, stderr = proc.communicate(timeout=40)
        wall_s = time.monotonic() - t0
    finally:
        player.close()
    assert proc.returncode == 0, stderr + stdout
    live = json.loads((tmp_path / f"{name}.live.json").read_text())
    return out, live, wall_s


def test_listen_keeps_every_sample_and_live_clicks_match_offline(jack_server, tmp_path):
    src, _truth = _source()
    # The dummy server runs on the wall clock without real-time priority: on
    # an overloaded machine a JACK cycle can be missed (an xrun), PortAudio
    # flags it as an input overflow and samples may be lost -- which popmeter
    # must count and report. Exactness is checked on a run without any; one
    # retry is allowed.
    for attempt in range(2):
        out, live, wall_s = _capture(jack_server, src, tmp_path, f"tank{attempt}")
        if live["input_overflows"] == 0:
            break
    else:
        pytest.fail(f"input overflows in both attempts ({live['input_overflows']} in the last): "
                    "the machine is too busy for a real-time capture")
    name = out.stem

    saved, rate = sf.read(out, dtype="float32")
    assert rate == SR
    # The stream may start before playback: find the offset, then compare exactly.
    offset, skipped = align(saved, src)
    assert skipped == 0 and np.all(saved[:offset] == 0)
    n = min(len(src), len(saved) - offset)
    assert n >= 0.75 * len(src)  # the run up to 1 s of audio after its last detected click
    np.testing.assert_array_equal(saved[offset:offset + n], src[:n])

    assert live["stop_reason"].startswith("no click for 1 s")
    assert live["dropped_frames"] == 0 and live["faults"] == []
    # audio time, not wall time: the capture ended ~1 s of audio after the last click
    live_t = np.array([c["time_s"] for c in live["clicks"]])
    assert len(saved) / SR == pytest.approx(live_t[-1] + 1.0, abs=0.1)
    assert wall_s < 30

    offline = json.loads((tmp_path / f"{name}.json").read_text())
    off_t = np.array([c["time_s"] for c in offline["clicks"]])
    assert len(off_t) >= 20
    matched = sum(bool(np.min(np.abs(live_t - t)) <= 1e-3) for t in off_t)
    assert matched >= 0.98 * len(off_t)  # the criterion
    extra = [t for t in live_t if np.min(np.abs(off_t - t)) > 1e-3]
    assert len(extra) <= 0.02 * len(live_t)
    # The clicks as the streaming detector reported them, before the
    # whole-run passes: each is an offline click or a candidate the offline
    # passes set aside (atypical ring).
    from popmeter.detection import detect_clicks

    full = detect_clicks(saved, SR)
    assert len(full.clicks) == len(off_t)
    known = np.concatenate([[c.time_s for c in full.clicks], full.rejected_times_s])
    stream_t = [c["time_s"] for c in live["stream_clicks"]]
    assert len(stream_t) >= 0.5 * len(off_t)
    assert [t for t in stream_t if np.min(np.abs(known - t)) > 1e-3] == []
    # detection latency as the tank sees it: onset -> audio received when the
    # click reached the live state. The detector's own latency (50 ms of audio
    # + the block) is asserted exactly in test_detection; here the wall clock
    # adds the analysis thread's scheduling on a shared machine (one CI run
    # saw a single click at 128 ms), so the typical click must meet the
    # target and every click a quarter second: an analysis that stalls or
    # only catches up in large batches fails both. bench_live measures the
    # figure (max 48.7 ms on an idle machine).
    latency_s = [(c["frames_received"] - c["sample"]) / SR for c in live["stream_clicks"]]
    assert float(np.median(latency_s)) <= 0.050 + jack_server.period_frames / SR
    assert max(latency_s) <= 0.25


def test_devices_lists_the_jack_input_as_default(jack_server):
    r = subprocess.run([sys.executable, "-m", "popmeter", "devices"], env=jack_server.env,
                       check=False, capture_output=True, text=True, timeout=30)
    assert r.returncode == 0, r.stderr
    assert "system" in r.stdout and "*" in r.stdout and "48000 Hz" in r.stdout


def test_missing_device_is_one_line_and_exit_2(jack_server, tmp_path):
    out = tmp_path / "none.wav"
    r = subprocess.run([sys.executable, "-m", "popmeter", "listen", "--out", str(out),
                        "--device", "99", "--no-view"], env=jack_server.env,
                       check=False, capture_output=True, text=True, timeout=30)
    assert r.returncode == 2
    assert r.stderr.strip().splitlines()[-1] == (
        "popmeter listen: error: input device 99: no such input device (see `popmeter devices`)")
    assert not out.exists()


def test_device_lost_mid_run_keeps_the_audio_and_says_so(own_jack_server, tmp_path):
    jack_server = own_jack_server
    src, _ = _source(seed=5)
    out = tmp_path / "lost.wav"
    player = Player(jack_server, src)
    proc = _listen(jack_server, out, "--max-seconds", "20")
    try:
        player.connect_when_ready()
        time.sleep(2.0)
    finally:
        player.close()
    jack_server.stop()  # the "cable is pulled"
    _stdout, stderr = proc.communicate(timeout=30)
    assert proc.returncode != 0
    assert "input device" in stderr and "lost" in stderr, stderr
    saved, _ = sf.read(out, dtype="float32")
    offset, skipped = align(saved, src)
    played = player.pos - skipped  # source samples that reached the capture
    assert played > SR  # more than a second was captured and kept
    np.testing.assert_array_equal(saved[offset:offset + played], src[skipped:skipped + played])


def test_ctrl_c_ends_the_capture_cleanly_and_analyses_it(jack_server, tmp_path):
    src, _ = _source(seed=7)
    out = tmp_path / "interrupted.wav"
    player = Player(jack_server, src)
    proc = _listen(jack_server, out, "--max-seconds", "20", "--json",
                   str(tmp_path / "interrupted.json"))
    try:
        player.connect_when_ready()
        time.sleep(2.0)
        proc.send_signal(signal.SIGINT)  # what Ctrl-C sends
        stdout, stderr = proc.communicate(timeout=30)
    finally:
        player.close()
    assert proc.returncode == 0, stderr + stdout
    live = json.loads((tmp_path / "interrupted.live.json").read_text())
    assert live["stop_reason"] == "stopped by Ctrl-C"
    analysis = json.loads((tmp_path / "interrupted.json").read_text())
    saved, _ = sf.read(out, dtype="float32")
    assert analysis["source"]["duration_s"] == pytest.approx(len(saved) / SR)
    assert 1.5 < len(saved) / SR < 5.0
    if live["input_overflows"] == 0:
        offset, skipped = align(saved, src)
        np.testing.assert_array_equal(saved[offset:], src[skipped:skipped + len(saved) - offset])
