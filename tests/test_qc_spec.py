"""QC spec loading/validation and per-unit verdicts (popmeter.qc_spec)."""

from __future__ import annotations

import math

import pytest

from popmeter.errors import PopmeterError, SpecError
from popmeter.qc_spec import (
    SUMMARY_KEYS,
    Limit,
    error_verdict,
    judge,
    load_spec,
    spec_from_dict,
)

GOOD = """
name = "harbour tug production"

[limits.steady_rate_hz]
min = 10.0
max = 15.0
target = 12.5

[limits.time_to_steady_s]
max = 20.0

[limits.diaphragm_stiffness_kpa_per_ml]
min = 120
max = 220
"""


def test_load_the_readme_example(tmp_path):
    path = tmp_path / "tug.toml"
    path.write_text(GOOD)
    spec = load_spec(path)
    assert spec.name == "harbour tug production"
    assert spec.limits["steady_rate_hz"] == Limit(min=10.0, max=15.0, target=12.5)
    assert spec.limits["time_to_steady_s"] == Limit(min=None, max=20.0, target=None)
    assert spec.limits["diaphragm_stiffness_kpa_per_ml"].min == 120.0
    # SpecError is a PopmeterError so the CLI prints it on one line (exit 2)
    assert issubclass(SpecError, PopmeterError)


def test_every_problem_is_listed_once(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(
        """
name = "bad"
colour = "red"

[limits.steady_rate_hz]
min = 15.0
max = 10.0

[limits.speed_knots]
max = 3

[limits.ring_hz]
min = 900
max = 1200
target = 1500

[limits.jitter_pct]
max = "five"

[limits.stalls]
maximum = 1

[limits.run_s]
target = 30
"""
    )
    with pytest.raises(SpecError) as info:
        load_spec(path)
    problems = info.value.problems
    text = "\n".join(problems)
    assert str(path) in str(info.value)
    assert "unknown key 'colour'" in text
    assert "limits.steady_rate_hz: min 15 is greater than max 10" in text
    assert "limits.speed_knots: unknown metric" in text
    assert "limits.ring_hz: target 1500 lies outside" in text
    assert "limits.jitter_pct.max: must be a number" in text
    assert "limits.stalls.maximum: unknown key" in text
    assert "limits.run_s: gives neither min nor max" in text
    assert len(problems) == 7


def test_non_finite_bool_and_missing_file(tmp_path):
    with pytest.raises(SpecError, match="must be finite"):
        spec_from_dict({"limits": {"ring_hz": {"max": math.inf}}})
    with pytest.raises(SpecError, match="must be a number"):
        spec_from_dict({"limits": {"ring_hz": {"max": True}}})
    with pytest.raises(SpecError, match="file not found"):
        load_spec(tmp_path / "nope.toml")
    bad = tmp_path / "broken.toml"
    bad.write_text("[limits.ring_hz\nmax=3")
    with pytest.raises(SpecError, match="not valid TOML"):
        load_spec(bad)
    with pytest.raises(SpecError, match="no limits"):
        spec_from_dict({"name": "empty"})


def test_spec_name_defaults_to_file_stem(tmp_path):
    path = tmp_path / "line3.toml"
    path.write_text("[limits.cycles]\nmin = 100\n")
    assert load_spec(path).name == "line3"


def _spec():
    return spec_from_dict(
        {
            "name": "t",
            "limits": {
                "steady_rate_hz": {"min": 10.0, "max": 15.0},
                "time_to_steady_s": {"max": 20.0},
            },
        }
    )


def test_judge_pass_and_bounds_inclusive():
    verdict = judge({"steady_rate_hz": 15.0, "time_to_steady_s": 20.0}, _spec())
    assert verdict.status == "PASS" and verdict.passed
    assert verdict.reasons == []
    assert [c.ok for c in verdict.checks] == [True, True]


def test_judge_fail_names_value_and_limit():
    verdict = judge({"steady_rate_hz": 9.5, "time_to_steady_s": 31.25}, _spec())
    assert verdict.status == "FAIL"
    assert verdict.reasons == [
        "steady_rate_hz = 9.5 below min 10",
        "time_to_steady_s = 31.25 above max 20",
    ]
    assert verdict.checks[0].value == 9.5 and not verdict.checks[0].ok


@pytest.mark.parametrize("missing", [None, float("nan"), "absent"])
def test_missing_metric_never_passes(missing):
    summary = {"steady_rate_hz": 12.0}
    if missing != "absent":
        summary["time_to_steady_s"] = missing
    verdict = judge(summary, _spec())
    assert verdict.status == "FAIL"
    assert verdict.reasons == ["time_to_steady_s: no value (could not be determined)"]
    assert verdict.checks[1].value is None and verdict.checks[1].ok is False


def test_error_verdict():
    verdict = error_verdict("cannot read unit7.wav: not an audio file")
    assert verdict.status == "ERROR" and not verdict.passed
    assert verdict.to_json() == {
        "status": "ERROR",
        "reasons": ["cannot read unit7.wav: not an audio file"],
        "checks": [],
    }


def test_summary_keys_match_the_documented_json_schema():
    # interfaces.md, JSON output of `analyze`: the required summary keys, plus
    # steady_rate_sem_hz which the README's summary table adds
    required = {
        "first_click_s", "last_click_s", "steady_start_s", "steady_end_s",
        "steady_rate_hz", "steady_rate_iqr_hz", "jitter_pct", "drift_pct_per_min",
        "stalls", "cycles", "run_s", "time_to_steady_s", "ignition_delay_s",
        "ring_hz", "diaphragm_stiffness_kpa_per_ml",
    }
    assert set(SUMMARY_KEYS) == required | {"steady_rate_sem_hz"}
    assert len(SUMMARY_KEYS) == len(set(SUMMARY_KEYS))


def test_summary_keys_cover_what_the_pipeline_produces():
    # every key the real pipeline puts in a summary can be limited and
    # appears in results.csv
    np = pytest.importorskip("numpy")
    timeline = pytest.importorskip("popmeter.timeline")
    detection = pytest.importorskip("popmeter.detection")
    fs = 22050
    t = np.arange(int(6 * fs)) / fs
    signal = np.zeros_like(t, dtype=np.float32)
    for start in np.arange(1.0, 5.0, 1 / 12.0):
        i = int(start * fs)
        n = int(0.01 * fs)
        signal[i:i + n] += (0.5 * np.exp(-np.arange(n) / (0.002 * fs))
                            * np.sin(2 * np.pi * 1500 * np.arange(n) / fs)).astype(np.float32)
    det = detection.detect_clicks(signal, fs)
    tl = timeline.build_timeline(det.clicks, duration_s=6.0, clicks_per_cycle=det.clicks_per_cycle)
    produced = set(tl.summary) | {"diaphragm_stiffness_kpa_per_ml"}
    assert produced <= set(SUMMARY_KEYS), produced - set(SUMMARY_KEYS)
