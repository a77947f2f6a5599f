"""Tests of popmeter.run_report: files, offline-only references, escaping, figures."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import soundfile as sf

from popmeter.run_report import _envelope, typical_click_spectrum, write_run_report
from popmeter.timeline import build_timeline

FS = 16000
RING_HZ = 1500.0
EVIL = "tug <script>alert(1)"


def make_recording(path: Path, *, seconds: float = 12.0) -> np.ndarray:
    """Damped 1.5 kHz clicks at 10 Hz from 2 s to 10 s over faint noise; returns the click times."""
    rng = np.random.default_rng(0)
    x = 0.003 * rng.standard_normal(int(seconds * FS))
    times = np.arange(2.0, 10.0, 0.1) + 0.002 * rng.standard_normal(80)
    tt = np.arange(int(0.03 * FS)) / FS
    click = 0.5 * np.sin(2 * np.pi * RING_HZ * tt) * np.exp(-tt / 0.006)
    for t in times:
        n0 = round(t * FS)
        x[n0 : n0 + click.size] += click
    sf.write(path, x.astype(np.float32), FS)
    return np.round(times * FS) / FS


def fake_click(t: float, kind: int = 0) -> SimpleNamespace:
    return SimpleNamespace(
        time_s=float(t),
        sample=round(t * FS),
        level_dbfs=-6.0 - 3 * kind,
        strength=1.0,
        ring_hz=RING_HZ,
        decay_s=0.006,
        kind=kind,
        cycle=None,
    )


def make_analysis(wav: Path, times: np.ndarray, *, with_extras: bool = True) -> SimpleNamespace:
    clicks = [fake_click(t) for t in times] + [fake_click(t + 0.045, 1) for t in times[:5]]
    tl = build_timeline(
        clicks, duration_s=12.0, clicks_per_cycle=2, ring_hz=RING_HZ, steady_min_cycles=20
    )
    det = SimpleNamespace(
        clicks=clicks,
        clicks_per_cycle=2,
        rejected=3,
        band_hz=(800.0, 6000.0),
        ring_hz=RING_HZ,
        warnings=[],
    )
    stiffness = verdict = None
    if with_extras:
        iv = SimpleNamespace(value=160.0, low=140.0, high=182.0)
        doc = {
            "method": "rate+ring",
            "diaphragm_stiffness_kpa_per_ml": {"value": 160.0, "low": 140.0, "high": 182.0},
            "gas_volume_ml": {"value": 1.0, "low": 0.9, "high": 1.1},
            "warnings": [],
        }
        stiffness = SimpleNamespace(
            method="rate+ring",
            stiffness_kpa_per_ml=iv,
            nominal_stiffness_kpa_per_ml=150.0,
            samples_kpa_per_ml=np.random.default_rng(1).normal(160, 12, 5000),
            to_json=lambda: doc,
        )
        verdict = SimpleNamespace(status="FAIL", reasons=["steady_rate_hz below <min>"])
    return SimpleNamespace(
        source=SimpleNamespace(
            path=str(wav), sample_rate_hz=FS, duration_s=12.0, channels=1, channel_used=0
        ),
        detection=det,
        timeline=tl,
        stiffness=stiffness,
        verdict=verdict,
        warnings=[*tl.warnings, "a warning with <b>markup</b>"],
        profile_name="boat <img src=x onerror=alert(2)>",
    )


class _Refs(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.refs: list[str] = []
        self.tags: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        for name, value in attrs:
            if name in ("src", "href") and value is not None:
                self.refs.append(value)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    d = tmp_path_factory.mktemp("rep")
    wav = d / f"{EVIL}.wav"
    times = make_recording(wav)
    analysis = make_analysis(wav, times)
    index = write_run_report(analysis, d / "out")
    return index, analysis


def test_report_files_exist(report):
    index, _ = report
    assert index.name == "index.html" and index.exists()
    for name in (
        "rate.png",
        "levels.png",
        "waveform.png",
        "detail.png",
        "click_spectrum.png",
        "stiffness.png",
    ):
        data = (index.parent / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n", name


def test_report_references_only_local_files(report):
    index, _ = report
    text = index.read_text(encoding="utf-8")
    parser = _Refs()
    parser.feed(text)
    assert parser.refs, "the page shows its figures"
    for ref in parser.refs:
        assert not re.match(r"^[a-z]+:", ref), ref  # no http:, https:, data:, javascript:
        assert (index.parent / ref).exists(), ref
    assert "http://" not in text and "https://" not in text
    assert "script" not in parser.tags and "link" not in parser.tags


def test_report_escapes_file_and_profile_names(report):
    index, _ = report
    text = index.read_text(encoding="utf-8")
    assert "<script" not in text.lower()
    assert "&lt;script&gt;alert(1)" in text
    assert "<img src=x" not in text and "&lt;img src=x onerror=alert(2)&gt;" in text
    assert "<b>markup</b>" not in text and "&lt;b&gt;markup&lt;/b&gt;" in text
    assert "&lt;min&gt;" in text


def test_report_content(report):
    index, analysis = report
    text = index.read_text(encoding="utf-8")
    s = analysis.timeline.summary
    assert f"{s['steady_rate_hz']:.3f} Hz" in text
    assert "FAIL" in text
    assert "Diaphragm stiffness" in text
    assert "does not certify" in text  # the safety note
    for phase in analysis.timeline.phases:
        assert f'title="{phase.name} ' in text  # the phase strip


def test_report_without_audio_or_extras(tmp_path):
    wav = tmp_path / "gone.wav"
    times = make_recording(wav)
    analysis = make_analysis(wav, times, with_extras=False)
    wav.unlink()
    index = write_run_report(analysis, tmp_path / "out")
    text = index.read_text(encoding="utf-8")
    assert "recording was not available" in text
    assert not (tmp_path / "out" / "waveform.png").exists()
    assert (tmp_path / "out" / "rate.png").exists()
    assert "Diaphragm stiffness" not in text and "Verdict" not in text


def test_click_spectrum_peaks_at_the_ring(tmp_path):
    # The spectrum of an exponentially damped sinusoid peaks at its frequency
    # (a Lorentzian line; textbook Fourier analysis, e.g. Oppenheim & Schafer,
    # Discrete-Time Signal Processing).
    wav = tmp_path / "c.wav"
    times = make_recording(wav)
    f, db, used = typical_click_spectrum(
        wav, times[10:30], sample_rate_hz=FS, duration_s=12.0, channel=0, length_s=0.04
    )
    assert used == 20
    peak = f[1:][np.argmax(db[1:])]
    assert abs(peak / RING_HZ - 1) < 0.01


def test_envelope_matches_numpy_min_max(tmp_path):
    # Reference: numpy min/max over the whole signal held in memory.
    wav = tmp_path / "e.wav"
    make_recording(wav)
    x, _ = sf.read(wav, dtype="float32")
    lo, hi, col_s = _envelope(wav, 0, 12.0)
    per_col = round(col_s * FS)
    whole = (x.size // per_col) * per_col
    ref = x[:whole].reshape(-1, per_col)
    assert np.allclose(lo[: ref.shape[0]], ref.min(axis=1))
    assert np.allclose(hi[: ref.shape[0]], ref.max(axis=1))
    assert lo.min() == pytest.approx(x.min()) and hi.max() == pytest.approx(x.max())
