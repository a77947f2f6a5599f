"""The `analyze` pipeline end to end, through the library and the command line.

Recordings are made by popmeter's own generator (short, fixed seeds); the
figures checked here are the interface (JSON schema of the README, CSV, exit
codes, one-line errors), not accuracy, which the detection, timeline and
stiffness tests check against outside references.
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import pytest

from popmeter.analysis import SCHEMA, analyze_file
from popmeter.cli import main
from popmeter.synth import load_truth, simulate_to_file

BUNDLE = Path(__file__).resolve().parent.parent / "synthetic_audio"
BOAT = BUNDLE / "demo_boat.toml"
SPEC = BUNDLE / "demo_spec.toml"

SUMMARY_KEYS = {
    "first_click_s", "last_click_s", "steady_start_s", "steady_end_s",
    "steady_rate_hz", "steady_rate_iqr_hz", "jitter_pct", "drift_pct_per_min",
    "stalls", "cycles", "run_s", "time_to_steady_s", "ignition_delay_s",
    "ring_hz", "diaphragm_stiffness_kpa_per_ml",
}


@pytest.fixture(scope="module")
def recording(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("rec") / "unit-A17.wav"
    simulate_to_file(path, boat=BOAT, seed=11, duration_s=30.0, sample_rate_hz=22050,
                     click_to_noise_db=30.0)
    return path


def test_json_has_every_key_of_the_schema(recording: Path, tmp_path: Path) -> None:
    out = tmp_path / "a.json"
    code = main(["analyze", str(recording), "--boat", str(BOAT), "--json", str(out),
                 "--ignition-at", "0.5", "--quiet"])
    assert code == 0
    doc = json.loads(out.read_text())
    assert doc["schema"] == SCHEMA == "popmeter.analysis/1"
    assert set(doc["source"]) >= {"path", "sample_rate_hz", "duration_s", "channels", "channel_used"}
    assert doc["source"]["sample_rate_hz"] == 22050
    assert doc["clicks_per_cycle"] in (1, 2)
    assert doc["clicks"] and set(doc["clicks"][0]) >= {"time_s", "level_dbfs", "strength", "kind", "cycle"}
    assert doc["cycles"] and set(doc["cycles"][0]) >= {"start_s", "period_s", "rate_hz", "phase"}
    names = [p["name"] for p in doc["phases"]]
    assert names[0] == "heating" and "steady" in names
    assert set(doc["summary"]) >= SUMMARY_KEYS
    st = doc["stiffness"]
    assert st["method"] in ("rate+ring", "rate")
    for key in ("diaphragm_stiffness_kpa_per_ml", "diaphragm_rigidity_mn_m",
                "equivalent_thickness_mm", "gas_volume_ml"):
        assert set(st[key]) >= {"value", "low", "high"}
    assert isinstance(doc["warnings"], list)
    # the summary's stiffness is the inversion's median, and the truth's
    # steady rate is recovered (accuracy proper is benchmarked elsewhere)
    assert doc["summary"]["diaphragm_stiffness_kpa_per_ml"] == st["diaphragm_stiffness_kpa_per_ml"]["value"]
    truth = load_truth(recording)
    assert doc["summary"]["steady_rate_hz"] == pytest.approx(truth["steady_rate_hz"], rel=0.01)
    first_truth = truth["clicks"][0]["time_s"]
    assert doc["summary"]["ignition_delay_s"] == pytest.approx(first_truth - 0.5, abs=0.01)


def test_null_values_come_with_reasons(recording: Path) -> None:
    analysis = analyze_file(recording)  # no boat: no stiffness, no ignition time
    doc = analysis.to_json()
    assert doc["summary"]["diaphragm_stiffness_kpa_per_ml"] is None
    assert doc["summary"]["ignition_delay_s"] is None
    assert "stiffness" not in doc
    joined = " ".join(doc["warnings"])
    assert "diaphragm_stiffness_kpa_per_ml" in joined and "--boat" in joined
    assert "ignition" in joined


def test_csv_has_one_row_per_cycle(recording: Path, tmp_path: Path) -> None:
    out = tmp_path / "cycles.csv"
    assert main(["analyze", str(recording), "--csv", str(out), "--quiet"]) == 0
    analysis = analyze_file(recording)
    with open(out, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == len(analysis.timeline.cycles) > 50
    assert set(rows[0]) >= {"start_s", "period_s", "rate_hz", "phase"}
    assert float(rows[10]["rate_hz"]) == pytest.approx(1.0 / float(rows[10]["period_s"]), rel=1e-4)


def test_spec_verdict_sets_exit_code(recording: Path, tmp_path: Path) -> None:
    assert main(["analyze", str(recording), "--boat", str(BOAT), "--spec", str(SPEC), "--quiet"]) == 0
    strict = tmp_path / "strict.toml"
    strict.write_text('name = "too strict"\n[limits.steady_rate_hz]\nmin = 30.0\n')
    out = tmp_path / "a.json"
    code = main(["analyze", str(recording), "--spec", str(strict), "--json", str(out), "--quiet"])
    assert code == 1
    doc = json.loads(out.read_text())
    assert doc["verdict"]["status"] == "FAIL"
    assert any("steady_rate_hz" in r for r in doc["verdict"]["reasons"])


def _run_cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "popmeter", *args], check=False, capture_output=True,
                          text=True, timeout=120)


def test_missing_file_is_one_line_exit_2(tmp_path: Path) -> None:
    missing = tmp_path / "no-such-recording.wav"
    proc = _run_cli("analyze", str(missing))
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert "no-such-recording.wav" in lines[0]
    assert "Traceback" not in proc.stderr


def test_bad_profile_is_exit_2_with_every_problem(recording: Path, tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text('name = "x"\n[tubes]\ncount = -1\ninner_diameter_mm = 3\nlength_mm = 150\n'
                   'colour = "red"\n')
    proc = _run_cli("analyze", str(recording), "--boat", str(bad))
    assert proc.returncode == 2
    assert "bad.toml" in proc.stderr and "Traceback" not in proc.stderr
    assert "count" in proc.stderr and "colour" in proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) >= 2  # one line per problem, each naming the file
    assert all("bad.toml" in line for line in lines)


def test_usage_errors_exit_2() -> None:
    assert _run_cli().returncode == 2
    assert _run_cli("analyze").returncode == 2
    proc = _run_cli("analyze", "x.wav", "--band", "6000-800")
    assert proc.returncode == 2 and "--band" in proc.stderr


def test_version() -> None:
    proc = _run_cli("--version")
    assert proc.returncode == 0 and proc.stdout.startswith("popmeter ")


def test_terminal_summary_is_readable(recording: Path) -> None:
    proc = _run_cli("analyze", str(recording), "--boat", str(BOAT))
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout
    for label in ("steady rate", "first pop", "diaphragm stiffness", "kPa/mL", "Hz"):
        assert label in out


def test_json_cycles_equal_dataclasses_asdict(recording: Path) -> None:
    # reference: dataclasses.asdict, the general conversion the cycle rows skip
    from dataclasses import asdict

    from popmeter.analysis import _json_clean

    analysis = analyze_file(recording)
    cycles = analysis.timeline.cycles
    assert cycles
    rows = analysis.to_json()["cycles"]
    reference = _json_clean([asdict(c) for c in cycles])
    assert [list(r.items()) for r in rows] == [list(r.items()) for r in reference]  # key order too
    # and the plain values pass through unchanged, NaN and infinities become null
    assert _json_clean({"a": [1, "x", None, 2.5, float("nan"), float("-inf"), True]}) == {
        "a": [1, "x", None, 2.5, None, None, True]}


def test_each_click_s_cycle_indexes_the_cycle_that_holds_it(tmp_path: Path) -> None:
    # a splash during heating (a lone click the timeline sets aside) and a
    # two-click engine with stalls (clicks in no cycle, cycles filled in
    # across missed clicks): a click's "cycle" is the index in "cycles" of
    # the cycle holding it, null outside every cycle
    import soundfile as sf

    from popmeter import synth

    sc = synth.RunScenario(duration_s=40.0, heating_s=10.0, click_to_noise_db=25.0, seed=3,
                           distractors=(synth.Distractor("splash", time_s=4.0),))
    x, _ = synth.render(sc)
    lone = tmp_path / "splash.wav"
    sf.write(lone, x, sc.sample_rate_hz, subtype="PCM_16")
    two = tmp_path / "two.wav"
    simulate_to_file(two, boat=BOAT, seed=2, duration_s=40.0, clicks_per_cycle=2, stalls=1,
                     click_to_noise_db=20.0)
    docs = {path: analyze_file(path).to_json() for path in (lone, two)}
    for doc in docs.values():
        cycles = doc["cycles"]
        held = [c for c in doc["clicks"] if c["cycle"] is not None]
        assert len(held) >= 0.95 * len(doc["clicks"])
        for c in held:
            cyc = cycles[c["cycle"]]
            assert cyc["start_s"] <= c["time_s"] < cyc["start_s"] + cyc["period_s"]
        # (a main click the timeline set aside as an extra one inside a cycle,
        # a double trigger, is held by that cycle without starting it)
        mains = [c for c in held if c["kind"] == 0]
        starting = [c for c in mains if c["time_s"] == cycles[c["cycle"]]["start_s"]]
        assert len(starting) >= 0.98 * len(mains)
        # the last main click starts no complete cycle
        last_main = [c for c in doc["clicks"] if c["kind"] == 0][-1]
        assert last_main["cycle"] is None
    doc = docs[lone]
    assert [c["cycle"] for c in doc["clicks"] if c["time_s"] < 9.0] == [None, None]
    assert any(cyc["missed_clicks"] for cyc in doc["cycles"])  # (filled-in cycles)
