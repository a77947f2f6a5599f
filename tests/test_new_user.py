"""What a new user meets at the edges: one-line errors for outputs that cannot
be written, bad option values, the history database a batch wrote, the batch
CSV opened in a spreadsheet, and labels that say what they mean.

Short generated recordings (8 kHz, a few seconds, fixed seeds); no accuracy is
checked here (the detection, timeline and stiffness tests do that).
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

from popmeter.batch import BatchResult, UnitResult, neutralise_cell, write_results_csv
from popmeter.cli import main
from popmeter.errors import OutputError, output_error
from popmeter.qc_spec import Verdict, load_spec
from popmeter.synth import simulate_to_file
from popmeter.terminal import channel_label

BUNDLE = Path(__file__).resolve().parent.parent / "synthetic_audio"
BOAT = BUNDLE / "demo_boat.toml"


@pytest.fixture(scope="module")
def short_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("rec") / "unit-07.wav"
    simulate_to_file(path, boat=BOAT, seed=5, duration_s=10.0, sample_rate_hz=8000)
    return path


def _one_error_line(capsys: pytest.CaptureFixture[str]) -> str:
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


# --- outputs that cannot be written -------------------------------------------


def test_json_under_a_file_is_one_line_naming_both(short_run: Path, tmp_path: Path,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    blocker = tmp_path / "notes.txt"
    blocker.write_text("not a folder\n")
    target = blocker / "a.json"
    code = main(["analyze", str(short_run), "--quiet", "--json", str(target)])
    assert code == 2
    line = _one_error_line(capsys)
    assert str(target) in line and "is a file, not a folder" in line
    assert ".part" not in line  # the user's path, not the temporary file beside it


def test_json_onto_a_folder_says_so(short_run: Path, tmp_path: Path,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["analyze", str(short_run), "--quiet", "--csv", str(tmp_path)])
    assert code == 2
    line = _one_error_line(capsys)
    assert str(tmp_path) in line and "folder" in line


def test_output_error_for_a_report_folder_is_not_told_it_is_a_folder(tmp_path: Path) -> None:
    err = output_error(tmp_path, PermissionError(13, "Permission denied"), folder=True)
    assert isinstance(err, OutputError)
    assert str(err) == f"{tmp_path}: cannot write (Permission denied)"


def test_model_json_in_a_new_folder_is_created(tmp_path: Path) -> None:
    out = tmp_path / "new" / "model.json"
    assert main(["model", str(BOAT), "--json", str(out)]) == 0
    assert json.loads(out.read_text())["schema"] == "popmeter.model/1"


def test_unexpected_os_error_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                         monkeypatch: pytest.MonkeyPatch) -> None:
    # any OSError that escapes a command (here: the model cannot read its file)
    # is one line naming the file, exit 2, no traceback
    import popmeter.engine

    def refuse(*args: object, **kwargs: object) -> None:
        raise PermissionError(13, "Permission denied", "/somewhere/boat.toml")

    monkeypatch.setattr(popmeter.engine, "model_report", refuse)
    assert main(["model", "boat.toml"]) == 2
    assert _one_error_line(capsys) == "popmeter model: error: /somewhere/boat.toml: Permission denied"


# --- option values ------------------------------------------------------------


@pytest.mark.parametrize("option,value", [("--seed", "-1"), ("--stalls", "-3"), ("--channels", "0")])
def test_simulate_refuses_bad_counts_before_any_work(option: str, value: str, tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as stop:
        main(["simulate", "--out", str(tmp_path / "x.wav"), option, value])
    assert stop.value.code == 2
    assert option in capsys.readouterr().err
    assert not (tmp_path / "x.wav").exists()


def test_simulate_says_what_it_wrote(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "sub" / "s.flac"
    assert main(["simulate", "--out", str(out), "--duration", "2", "--samplerate", "8000"]) == 0
    text = capsys.readouterr().out
    assert str(out) in text and "s.truth.json" in text
    assert out.exists() and (out.parent / "s.truth.json").exists()


# --- history ------------------------------------------------------------------


def test_history_without_db_names_where_a_batch_keeps_it(tmp_path: Path,
                                                         capsys: pytest.CaptureFixture[str],
                                                         monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert main(["history"]) == 2
    line = _one_error_line(capsys)
    assert "--db" in line and "OUT/history.sqlite" in line
    assert not (tmp_path / "history.sqlite").exists()  # reading never creates one


def test_history_on_a_file_that_is_not_a_database(tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    notes = tmp_path / "notes.txt"
    notes.write_text("shift notes, not a database\n" * 20)
    assert main(["history", "--db", str(notes)]) == 2
    line = _one_error_line(capsys)
    assert "notes.txt" in line and "not a database" in line


def test_history_on_a_folder_points_at_the_file(tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["history", "--db", str(tmp_path)]) == 2
    assert "history.sqlite" in _one_error_line(capsys)


# --- results.csv in a spreadsheet ---------------------------------------------


def test_neutralise_cell() -> None:
    # OWASP, "CSV Injection": cells starting with = + - @ tab CR are formulas
    for text in ("=1+1", "+41 79", "-T2", "@bob", "\tx", "\rx"):
        assert neutralise_cell(text) == "'" + text
    for text in ("KW-001", "", "12.5", "'=already"):
        assert neutralise_cell(text) == text


def test_results_csv_neutralises_text_not_numbers(tmp_path: Path) -> None:
    spec_path = tmp_path / "spec.toml"
    spec_path.write_text('name = "s"\n[limits.steady_rate_hz]\nmin = 10\nmax = 14\n')
    unit = UnitResult(
        serial='=HYPERLINK("http://example.invalid";"x")', position=0,
        verdict=Verdict(status="FAIL", reasons=["drift_pct_per_min = -3 below min -2"]),
        summary={"steady_rate_hz": 12.5, "drift_pct_per_min": -2.5},
        file="+unit.wav", station="-T2", operator="@bob", recorded_at="2026-11-30",
    )
    result = BatchResult(batch_id="b", spec=load_spec(spec_path), source="x", out_dir=tmp_path,
                         units=[unit], stats={})
    path = write_results_csv(result, tmp_path / "results.csv")
    (row,) = list(csv.DictReader(path.open(encoding="utf-8")))
    assert row["serial"] == "'" + unit.serial
    assert row["file"] == "'+unit.wav" and row["station"] == "'-T2" and row["operator"] == "'@bob"
    assert row["recorded_at"] == "2026-11-30" and row["verdict"] == "FAIL"
    assert row["drift_pct_per_min"] == "-2.5"  # a number stays a number
    assert row["steady_rate_hz"] == "12.5"


# --- labels -------------------------------------------------------------------


def test_channel_label_counts_from_zero_like_the_option() -> None:
    assert channel_label(0, 1) == "mono"
    assert channel_label(1, 2) == "channel 1 of 0-1"


def test_terminal_and_report_say_the_channel_as_channel_accepts_it(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    stereo = tmp_path / "st.wav"
    simulate_to_file(stereo, boat=BOAT, seed=3, duration_s=8.0, sample_rate_hz=8000, channels=2)
    assert main(["analyze", str(stereo), "--channel", "1", "--boat", str(BOAT),
                 "--report", str(tmp_path / "rep")]) == 0
    assert "channel 1 of 0-1" in capsys.readouterr().out
    page = (tmp_path / "rep" / "index.html").read_text(encoding="utf-8")
    assert "channel 1 of 0-1" in page
    # the stiffness table speaks words and units, not JSON key names
    assert "kpa per ml" not in page and "mn m" not in page
    assert "effective gas volume" in page


def test_recording_without_clicks_is_zero_clicks_and_a_warning(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import numpy as np
    import soundfile as sf

    noise = tmp_path / "noise.wav"
    rng = np.random.default_rng(0)
    sf.write(noise, (0.05 * rng.standard_normal(8000 * 3)).astype("float32"), 8000)
    out = tmp_path / "noise.json"
    assert main(["analyze", str(noise), "--json", str(out)]) == 0
    head = capsys.readouterr().out.splitlines()[0]
    assert "0 clicks" in head and "per cycle" not in head
    doc = json.loads(out.read_text())
    assert doc["clicks"] == [] and doc["summary"]["steady_rate_hz"] is None
    assert any("no clicks" in w for w in doc["warnings"])
    # digital silence is refused by the loader: there is nothing to listen to
    silent = tmp_path / "silent.wav"
    sf.write(silent, np.zeros(8000 * 3, dtype="float32"), 8000)
    assert main(["analyze", str(silent), "--quiet"]) == 2
    assert "silent" in _one_error_line(capsys)


# --- batch and history figures ------------------------------------------------


def test_batch_figures_say_what_their_lines_and_axes_are() -> None:
    import numpy as np

    from popmeter.batch_report import control_chart_figure, histogram_figure
    from popmeter.qc_stats import individuals_chart
    from popmeter.run_report import metric_axis_label

    assert metric_axis_label("steady_rate_hz") == "steady cycle rate, median (Hz)"
    assert metric_axis_label("diaphragm_stiffness_kpa_per_ml") == "diaphragm stiffness (kPa/mL)"
    assert metric_axis_label("no_such_metric") == "no_such_metric"

    values = np.array([12.4, 12.6, 12.3, 10.7, 13.7, 12.4, 12.4])
    fig = control_chart_figure(individuals_chart(values), metric="steady_rate_hz",
                               lsl=11.5, usl=13.3)
    top, bottom = fig.axes
    legend = [t.get_text() for t in top.get_legend().get_texts()]
    assert legend == ["centre", "control limits (3 sigma)", "spec limits"]
    assert top.get_ylabel() == "steady cycle rate, median (Hz)"
    assert bottom.get_ylabel() == "moving range (Hz)"

    hist = histogram_figure(values, metric="steady_rate_hz", lsl=11.5, usl=13.3, target=12.4)
    (ax,) = hist.axes
    assert ax.get_xlabel() == "steady cycle rate, median (Hz)"
    assert {t.get_text() for t in ax.texts} == {"min", "max", "target"}


def test_debug_works_before_and_after_the_command(tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    from popmeter.errors import InputError

    missing = str(tmp_path / "none.wav")
    assert main(["analyze", missing]) == 2  # one line without it
    assert "none.wav" in _one_error_line(capsys)
    for argv in (["--debug", "analyze", missing], ["analyze", missing, "--debug"]):
        with pytest.raises(InputError):
            main(argv)


def test_calibration_warns_below_the_five_units_the_readme_asks_for() -> None:
    from popmeter import engine
    from popmeter.profile import load_profile
    from popmeter.stiffness import calibrate

    prof = load_profile(BOAT)
    rate_hz = engine.predict(prof).rate_hz
    few = calibrate(prof, [(rate_hz * f, None) for f in (0.99, 1.0, 1.01)])
    assert any("only 3 reference unit(s)" in w for w in few.warnings)
    enough = calibrate(prof, [(rate_hz * f, None) for f in (0.99, 0.995, 1.0, 1.005, 1.01)])
    assert not any("reference unit(s)" in w for w in enough.warnings)


def test_batch_table_metric_names_copy_cleanly(tmp_path: Path) -> None:
    # a metric name copied from the terminal into a spec must not carry
    # invisible characters (it used to hold zero-width spaces)
    import io

    from rich.console import Console

    from popmeter.batch import batch_statistics
    from popmeter.batch_report import print_batch_summary

    spec_path = tmp_path / "spec.toml"
    spec_path.write_text('name = "s"\n[limits.steady_rate_iqr_hz]\nmax = 0.5\n')
    spec = load_spec(spec_path)
    units = [UnitResult(serial=f"U{i}", position=i, verdict=Verdict(status="PASS"),
                        summary={"steady_rate_iqr_hz": 0.1 + 0.01 * i}) for i in range(5)]
    result = BatchResult(batch_id="b", spec=spec, source="x", out_dir=tmp_path, units=units,
                         stats=batch_statistics(units, spec))
    for width in (60, 160):
        buf = io.StringIO()
        print_batch_summary(result, console=Console(file=buf, width=width, color_system=None))
        text = buf.getvalue()
        assert "\u200b" not in text
        if width == 160:
            assert "steady_rate_iqr_hz" in text


def test_simulate_to_an_unwritable_place_names_the_users_path(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    blocker = tmp_path / "notes.txt"
    blocker.write_text("x\n")
    assert main(["simulate", "--out", str(blocker / "x.wav"), "--duration", "2",
                 "--samplerate", "8000"]) == 2
    line = _one_error_line(capsys)
    assert str(blocker / "x.wav") in line and "is a file, not a folder" in line
    folder = tmp_path / "d.wav"
    folder.mkdir()
    assert main(["simulate", "--out", str(folder), "--duration", "2", "--samplerate", "8000"]) == 2
    line = _one_error_line(capsys)
    assert "it is a folder" in line and ".popmeter-" not in line
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".popmeter-")]
