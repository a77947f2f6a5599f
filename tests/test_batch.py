"""The batch runner and batch report (popmeter.batch, popmeter.batch_report).

Most tests use a fake analyzer (a module-level function, so worker processes
can run it) that reads a small JSON "recording" and returns an analysis-like
object: the verdict logic, inputs, outputs, history and report are tested
without the audio pipeline. One end-to-end test runs the real pipeline on a
few short generated recordings.
"""

from __future__ import annotations

import csv
import io
import json
import os
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from popmeter.batch import collect_units, run_batch, safe_folder_name
from popmeter.batch_report import show_history
from popmeter.errors import InputError, UsageError
from popmeter.history import History, HistoryError
from popmeter.qc_spec import SUMMARY_KEYS, spec_from_dict

SPEC = spec_from_dict({
    "name": "harbour tug production",
    "limits": {
        "steady_rate_hz": {"min": 10.0, "max": 15.0, "target": 12.5},
        "time_to_steady_s": {"max": 20.0},
        "stalls": {"max": 1},
        "diaphragm_stiffness_kpa_per_ml": {"min": 120.0, "max": 220.0},
    },
})


RATE_ONLY = spec_from_dict({"name": "rate", "limits": {"steady_rate_hz": {"min": 10.0, "max": 15.0}}})


@dataclass
class _Timeline:
    summary: dict


@dataclass
class FakeAnalysis:
    timeline: _Timeline
    warnings: list = field(default_factory=list)
    verdict: object = None
    spec_name: str | None = None

    def to_json(self):
        return {"schema": "popmeter.analysis/1", "summary": self.timeline.summary,
                "warnings": self.warnings}


def fake_analyzer(path, *, boat=None, spec=None, **_):
    """Reads the fake recording (JSON) and behaves as told."""
    from popmeter.errors import InputError

    doc = json.loads(Path(path).read_text())
    kind = doc.get("kind")
    if kind == "corrupt":
        raise InputError(f"{path}: not an audio file (unknown format)")
    if kind == "bug":
        raise ZeroDivisionError("division by zero")
    if kind == "crash":
        os._exit(3)  # a worker dying in native code
    summary = {key: None for key in SUMMARY_KEYS}
    summary.update(doc.get("summary", {}))
    return FakeAnalysis(_Timeline(summary), warnings=list(doc.get("warnings", [])))


def fake_report(analysis, unit_dir):
    page = Path(unit_dir) / "index.html"
    page.write_text(f"<p>{analysis.verdict.status}</p>")
    return page


def _good(**over):
    s = {"steady_rate_hz": 12.4, "time_to_steady_s": 9.0, "stalls": 0, "cycles": 420,
         "diaphragm_stiffness_kpa_per_ml": 170.0, "ring_hz": 1500.0}
    s.update(over)
    return {"summary": s}


# the known-defect batch: serial -> (fake recording, expected verdict, reason fragment)
DEFECTS = {
    "HT-0001": (_good(), "PASS", None),
    "HT-0002": (_good(steady_rate_hz=12.9), "PASS", None),
    "HT-0003": (_good(steady_rate_hz=10.6, diaphragm_stiffness_kpa_per_ml=95.0), "FAIL",
                "diaphragm_stiffness_kpa_per_ml = 95 below min 120"),          # thin diaphragm
    "HT-0004": (_good(steady_rate_hz=14.2, diaphragm_stiffness_kpa_per_ml=260.0), "FAIL",
                "diaphragm_stiffness_kpa_per_ml = 260 above max 220"),         # thick diaphragm
    "HT-0005": ({"summary": {"cycles": 0, "stalls": 0}}, "FAIL",
                "steady_rate_hz: no value"),                                   # never starts
    "HT-0006": (_good(time_to_steady_s=31.5), "FAIL",
                "time_to_steady_s = 31.5 above max 20"),                       # slow starter
    "HT-0007": (_good(stalls=3), "FAIL", "stalls = 3 above max 1"),            # staller
    "HT-0008": ({"kind": "corrupt"}, "ERROR", "not an audio file"),            # corrupt file
    "HT-0009": ({"kind": "bug"}, "ERROR", "ZeroDivisionError"),                # analysis bug
}


def _write_folder(folder: Path, units: dict) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for serial, (doc, *_rest) in units.items():
        (folder / f"{serial}.wav").write_text(json.dumps(doc))
    (folder / "notes.txt").write_text("not a recording")
    (folder / "HT-0001.truth.json").write_text("{}")
    return folder


def _run(source, out, **kw):
    kw.setdefault("spec", SPEC)
    kw.setdefault("boat", "unused-by-fake.toml")
    kw.setdefault("progress", False)
    kw.setdefault("analyzer", fake_analyzer)
    kw.setdefault("report_writer", fake_report)
    kw.setdefault("jobs", 2)
    return run_batch(source, out_dir=out, **kw)


def test_known_defects_get_exactly_the_expected_verdicts(tmp_path):
    src = _write_folder(tmp_path / "B-0412", DEFECTS)
    result = _run(src, tmp_path / "out")
    got = {u.serial: u for u in result.units}
    assert list(got) == sorted(DEFECTS)  # folder order, non-audio files ignored
    for serial, (_doc, status, fragment) in DEFECTS.items():
        assert got[serial].status == status, serial
        if fragment:
            assert any(fragment in r for r in got[serial].verdict.reasons), got[serial].verdict
    assert not result.all_passed
    assert result.counts == {"PASS": 2, "FAIL": 5, "ERROR": 2}
    assert result.batch_id == "B-0412"

    out = tmp_path / "out"
    rows = list(csv.DictReader((out / "results.csv").open()))
    assert [r["serial"] for r in rows] == sorted(DEFECTS)
    assert list(rows[0])[:3] == ["serial", "verdict", "reasons"]
    assert list(rows[0])[3:3 + len(SUMMARY_KEYS)] == list(SUMMARY_KEYS)
    assert rows[6]["verdict"] == "FAIL" and rows[6]["stalls"] == "3"
    assert rows[7]["reasons"].endswith("not an audio file (unknown format)")

    doc = json.loads((out / "results.json").read_text())
    assert doc["schema"] == "popmeter.batch/1"
    assert doc["counts"] == {"PASS": 2, "FAIL": 5, "ERROR": 2}
    stiff = doc["statistics"]["diaphragm_stiffness_kpa_per_ml"]
    assert stiff["n"] == 6 and stiff["n_missing"] == 3
    assert stiff["yield_frac"] == pytest.approx(4 / 9)  # 4 in spec of 9 units
    assert "cpk_low" in stiff and "control_chart" in stiff

    # each analysed unit has its report sub-folder, linked from index.html
    assert (out / "units" / "HT-0003" / "index.html").read_text() == "<p>FAIL</p>"
    assert (out / "units" / "HT-0003" / "analysis.json").exists()
    page = (out / "index.html").read_text()
    assert 'href="units/HT-0003/index.html"' in page
    assert page.count("data:image/png;base64,") >= 4  # histograms and charts inline
    assert "<script>" in page and "sortable" in page

    # the history holds every unit and verdict
    with History(out / "history.sqlite", create=False) as h:
        stored = {u.serial: u.status for u in h.units_of("B-0412")}
    assert stored == {s: v[1] for s, v in DEFECTS.items()}


def test_all_pass_and_the_progress_output(tmp_path, capsys):
    src = _write_folder(tmp_path / "good", {"A1": (_good(),), "A2": (_good(stalls=1),)})
    result = _run(src, tmp_path / "out", progress=True, jobs=1)
    assert result.all_passed
    captured = capsys.readouterr()
    assert "PASS 2" in captured.out and "batch statistics" in captured.out


def test_rerun_is_idempotent(tmp_path):
    src = _write_folder(tmp_path / "B1", DEFECTS)
    db = tmp_path / "shared.sqlite"
    for _ in range(2):
        _run(src, tmp_path / "out", db=db, batch_id="line-3/2026-11-30")
    with History(db, create=False) as h:
        assert h.batch_ids() == ["line-3/2026-11-30"]
        assert len(h.units_of("line-3/2026-11-30")) == len(DEFECTS)
        # two ERROR units and the unit that never started have no rate
        assert len(h.series("steady_rate_hz")) == 6


def test_manifest_problems_are_reported_not_followed(tmp_path):
    base = tmp_path / "station"
    base.mkdir()
    outside = tmp_path / "secret.wav"
    outside.write_text(json.dumps(_good()))
    (base / "u1.wav").write_text(json.dumps(_good()))
    (base / "sub").mkdir()
    (base / "sub" / "u2.wav").write_text(json.dumps(_good(steady_rate_hz=9.0)))
    (base / "link.wav").symlink_to(outside)
    manifest = base / "batch.csv"
    manifest.write_text(
        "serial,file,station,operator,recorded_at,colour\n"
        "U1,u1.wav,tank A,kim,2026-11-30T09:00,red\n"
        "U2,sub/u2.wav,tank B,lee,,\n"
        "U3,../secret.wav,tank A,kim,,\n"
        f"U4,{outside},tank A,kim,,\n"
        "U5,link.wav,tank A,kim,,\n"
        "U6,missing.wav,tank A,kim,,\n"
        "U7,u1.wav,tank A,kim,,\n"
        "U7,sub/u2.wav,tank A,kim,,\n"
        ",u1.wav,tank A,kim,,\n"
        "U8,,tank A,kim,,\n"
    )
    result = _run(manifest, tmp_path / "out", jobs=1)
    got = {u.serial: u for u in result.units}
    assert [u.serial for u in result.units] == ["U1", "U2", "U3", "U4", "U5", "U6", "U7", "U8"]
    assert got["U1"].status == "PASS" and got["U1"].station == "tank A"
    assert got["U1"].recorded_at == "2026-11-30T09:00"
    assert got["U2"].status == "FAIL"
    for serial in ("U3", "U4", "U5"):
        assert got[serial].status == "ERROR"
        assert "leaves the manifest's folder; not followed" in got[serial].verdict.reasons[0]
    assert got["U6"].verdict.reasons == ["file not found: missing.wav"]
    assert "duplicate serial 'U7' in the manifest (lines 8, 9)" in got["U7"].verdict.reasons[0]
    assert "no file given" in got["U8"].verdict.reasons[0]
    assert any("line 10: no serial" in p for p in result.problems)
    assert any("'colour' ignored" in p for p in result.problems)
    # nothing outside the folder was analysed: U3's sub-folder holds only the
    # page that gives the reason
    assert [p.name for p in (tmp_path / "out" / "units" / "U3").iterdir()] == ["index.html"]
    assert "not followed" in (tmp_path / "out" / "units" / "U3" / "index.html").read_text()


def test_folder_duplicates_and_bad_sources(tmp_path):
    folder = tmp_path / "b"
    folder.mkdir()
    (folder / "X1.wav").write_text("{}")
    (folder / "X1.flac").write_text("{}")
    (folder / "X2.WAV").write_text("{}")
    units, problems = collect_units(folder)
    assert problems == []
    assert [(u.serial, u.problem is None) for u in units] == [("X1", False), ("X2", True)]
    assert "several recordings (X1.flac, X1.wav)" in units[0].problem
    with pytest.raises(InputError, match="no such folder"):
        collect_units(tmp_path / "nope")
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(InputError, match="no recordings found"):
        collect_units(empty)
    bad = tmp_path / "m.csv"
    bad.write_text("serial,path\nA,a.wav\n")
    with pytest.raises(InputError, match="missing column"):
        collect_units(bad)


def test_html_escapes_serials_and_file_names(tmp_path):
    base = tmp_path / "m"
    base.mkdir()
    evil_file = "a&<b>\"'.wav"
    (base / evil_file).write_text(json.dumps(_good(steady_rate_hz=9.0)))
    (base / "ok.wav").write_text(json.dumps(_good()))
    manifest = base / "manifest.csv"
    with manifest.open("w", newline="") as handle:
        w = csv.writer(handle)
        w.writerow(["serial", "file", "operator"])
        w.writerow(["<script>alert('x')</script>", evil_file, "<img src=x onerror=alert(1)>"])
        w.writerow(["../../etc", "ok.wav", ""])
    result = _run(manifest, tmp_path / "out", jobs=1)
    page = (tmp_path / "out" / "index.html").read_text()
    assert "<script>alert" not in page
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in page
    assert "<img src=x" not in page and "&lt;img src=x onerror=alert(1)&gt;" in page
    assert "a&amp;&lt;b&gt;&quot;&#x27;.wav" in page
    # serials become safe folder names inside the output folder
    units_dir = tmp_path / "out" / "units"
    names = sorted(p.name for p in units_dir.iterdir())
    assert len(names) == 2  # both analysed (the file name is odd, not bad)
    assert all("<" not in n and "/" not in n and not n.startswith(".") for n in names)
    for unit in result.units:
        assert (tmp_path / "out" / unit.report).resolve().is_relative_to(units_dir.resolve())


def test_safe_folder_name():
    assert safe_folder_name("HT-0001") == "HT-0001"
    a, b = safe_folder_name("a/b"), safe_folder_name("a_b")
    assert a != b and a.startswith("a_b-")
    assert safe_folder_name("..").startswith("unit-")
    assert safe_folder_name("CON").startswith("CON-")


def test_a_crashing_unit_costs_only_itself(tmp_path):
    units = {"C1": (_good(),), "C2": ({"kind": "crash"},), "C3": (_good(),), "C4": (_good(),)}
    src = _write_folder(tmp_path / "crashy", units)
    result = _run(src, tmp_path / "out", jobs=2)
    got = {u.serial: u.status for u in result.units}
    assert got == {"C1": "PASS", "C2": "ERROR", "C3": "PASS", "C4": "PASS"}
    crashed = next(u for u in result.units if u.serial == "C2")
    assert "process died" in crashed.verdict.reasons[0]


def test_stiffness_limit_without_boat_is_a_usage_error(tmp_path):
    src = _write_folder(tmp_path / "b", {"A": (_good(),)})
    with pytest.raises(UsageError, match="--boat"):
        _run(src, tmp_path / "out", boat=None)


def test_history_command_terminal_and_report(tmp_path):
    from rich.console import Console

    db = tmp_path / "h.sqlite"
    for i, rate in enumerate((12.0, 12.2, 13.9)):
        units = {f"B{i}-{k}": (_good(steady_rate_hz=rate + 0.05 * k),) for k in range(4)}
        src = _write_folder(tmp_path / f"batch{i}", units)
        _run(src, tmp_path / f"out{i}", db=db, jobs=1, spec=RATE_ONLY, boat=None)
    buf = io.StringIO()
    show_history(db=db, metric="steady_rate_hz", report_dir=tmp_path / "hist",
                 console=Console(file=buf, width=200))
    text = buf.getvalue()
    assert "steady_rate_hz" in text and "3 batch(es)" in text
    # the last batch shifted up: a Western Electric violation is listed
    assert "rule violations" in text.lower()
    assert (tmp_path / "hist" / "steady_rate_hz.png").stat().st_size > 1000
    assert 'src="steady_rate_hz.png"' in (tmp_path / "hist" / "index.html").read_text()
    with pytest.raises(UsageError, match="unknown metric"):
        show_history(db=db, metric="speed", console=Console(file=io.StringIO()))
    with pytest.raises(HistoryError, match="no history database"):
        show_history(db=tmp_path / "none.sqlite", console=Console(file=io.StringIO()))


def test_end_to_end_with_the_real_pipeline(tmp_path):
    # a few short generated recordings through popmeter.analysis and
    # popmeter.run_report: a good unit, a thin diaphragm, an engine that never
    # starts, and a WAV whose header promises audio that is not there
    synth = pytest.importorskip("popmeter.synth")
    pytest.importorskip("popmeter.analysis")
    from popmeter.profile import parse_profile, write_profile

    boat = tmp_path / "boat.toml"
    write_profile(dict(synth.DEMO_BOAT_RAW), boat, comment="invented test boat")
    profile = parse_profile(json.loads(json.dumps(synth.DEMO_BOAT_RAW)), source=str(boat))
    src = tmp_path / "KW-test"
    base = {"sample_rate_hz": 22050, "duration_s": 14.0, "heating_s": 1.5, "startup_s": 3.0,
            "fade_s": 3.0, "after_s": 1.0, "click_to_noise_db": 28.0}
    plan = {"KW-1": (1.0, 1, {}), "KW-2": (0.8, 2, {}), "KW-3": (1.0, 4, {"never_starts": True})}
    for serial, (factor, seed, extra) in plan.items():
        scenario = synth.scenario_from_profile(profile, thickness_factor=factor,
                                               **{**base, "seed": seed, **extra})
        synth.write_run(src / f"{serial}.flac", scenario)
    header = (b"RIFF" + (36 + 44100).to_bytes(4, "little") + b"WAVEfmt "
              + (16).to_bytes(4, "little") + (1).to_bytes(2, "little") + (1).to_bytes(2, "little")
              + (22050).to_bytes(4, "little") + (44100).to_bytes(4, "little")
              + (2).to_bytes(2, "little") + (16).to_bytes(2, "little")
              + b"data" + (44100).to_bytes(4, "little"))
    (src / "KW-4.wav").write_bytes(header)
    spec = spec_from_dict({"name": "e2e", "limits": {
        "steady_rate_hz": {"min": 11.5, "max": 13.3},
        "time_to_steady_s": {"max": 15.0},
        "diaphragm_stiffness_kpa_per_ml": {"min": 105.0, "max": 190.0},
    }})
    out = tmp_path / "out"
    result = run_batch(src, spec=spec, boat=boat, out_dir=out, jobs=2, progress=False)
    got = {u.serial: u for u in result.units}
    assert {s: u.status for s, u in got.items()} == {
        "KW-1": "PASS", "KW-2": "FAIL", "KW-3": "FAIL", "KW-4": "ERROR",
    }, {s: u.verdict.reasons for s, u in got.items()}
    assert any(r.startswith("diaphragm_stiffness_kpa_per_ml = ") and "below min 105" in r
               for r in got["KW-2"].verdict.reasons)
    assert "steady_rate_hz: no value (could not be determined)" in got["KW-3"].verdict.reasons
    # the real run report is linked from the batch page
    assert got["KW-1"].report == "units/KW-1/index.html"
    assert (out / got["KW-1"].report).is_file()
    assert 'href="units/KW-1/index.html"' in (out / "index.html").read_text()
    analysis = json.loads((out / "units" / "KW-1" / "analysis.json").read_text())
    assert analysis["schema"] == "popmeter.analysis/1"


def _station(src, out, db, barrier):
    barrier.wait(timeout=60)
    _run(src, out, db=db, jobs=1)


def test_two_stations_write_one_history_at_once(tmp_path):
    # two stations run their batches at the same moment into one database
    import multiprocessing

    db = tmp_path / "line.sqlite"
    ctx = multiprocessing.get_context("fork" if hasattr(os, "fork") else "spawn")
    barrier = ctx.Barrier(2)
    procs = []
    for name in ("tankA", "tankB"):
        units = {f"{name}-{k:02d}": (_good(steady_rate_hz=12.0 + 0.01 * k),) for k in range(12)}
        src = _write_folder(tmp_path / name, units)
        procs.append(ctx.Process(target=_station, args=(src, tmp_path / f"out-{name}", db, barrier)))
    for p in procs:
        p.start()
    for p in procs:
        p.join(timeout=300)
    assert [p.exitcode for p in procs] == [0, 0]
    with History(db, create=False) as h:
        assert sorted(h.batch_ids()) == ["tankA", "tankB"]
        assert len(h.units_of("tankA")) == len(h.units_of("tankB")) == 12
        assert len(h.series("steady_rate_hz")) == 24
