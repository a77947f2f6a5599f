"""The batch runner: every unit of a production batch analysed and judged.

:func:`run_batch` takes a folder of recordings (serial = file name stem) or a
manifest CSV (``serial,file`` and optional ``station,operator,recorded_at``),
analyses the units in parallel worker processes, judges each against the QC
spec (PASS / FAIL / ERROR), computes the batch statistics
(:mod:`popmeter.qc_stats`), writes ``results.csv``, ``results.json``,
``index.html`` and one report sub-folder per unit, and records everything in
the history database (:mod:`popmeter.history`).

A unit that cannot be analysed (unreadable file, missing file, duplicate
serial, a path that leaves the manifest's folder, a crash in the analysis)
is an ERROR with the reason: it never stops the batch and never passes.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import os
import re
import time
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from popmeter.errors import InputError, PopmeterError, UsageError
from popmeter.qc_spec import SUMMARY_KEYS, Spec, Verdict, error_verdict, judge, load_spec
from popmeter.qc_stats import MetricStats, metric_stats

#: File name extensions taken as recordings when the batch source is a folder
#: (what popmeter.audio_io reads directly or through ffmpeg). Other files
#: (ground-truth JSON, notes, pictures) are ignored.
AUDIO_EXTENSIONS = frozenset({
    ".wav", ".wave", ".flac", ".ogg", ".oga", ".opus", ".mp3", ".aif", ".aiff", ".aifc",
    ".m4a", ".mp4", ".aac", ".wma", ".caf", ".w64", ".rf64", ".webm",
})

MANIFEST_COLUMNS = ("serial", "file")
MANIFEST_OPTIONAL = ("station", "operator", "recorded_at")
BATCH_SCHEMA = "popmeter.batch/1"

#: Folder names Windows refuses whatever the extension.
_RESERVED_NAMES = frozenset(
    {"CON", "PRN", "AUX", "NUL"} | {f"COM{i}" for i in range(1, 10)} | {f"LPT{i}" for i in range(1, 10)}
)
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")

Analyzer = Callable[..., Any]


# --- inputs ------------------------------------------------------------------


@dataclass
class UnitInput:
    """One unit to analyse, as found in the folder or manifest.

    ``problem`` is set when the unit cannot be analysed at all (missing or
    duplicate file, path outside the manifest's folder); it becomes ERROR.
    """

    serial: str
    position: int
    path: Path | None
    file: str | None = None
    station: str | None = None
    operator: str | None = None
    recorded_at: str | None = None
    problem: str | None = None


def safe_folder_name(serial: str) -> str:
    """A file-system-safe folder name for a unit's report.

    Letters, digits, ``.``, ``_`` and ``-`` are kept; anything else becomes
    ``_``. When that changed the serial (or it is a reserved device name on
    Windows, or longer than 64 characters), 8 hex digits of the serial's
    SHA-1 are appended so that different serials never share a folder.
    """
    base = _UNSAFE.sub("_", serial).strip("._-")[:64] or "unit"
    if base != serial or base.upper().split(".")[0] in _RESERVED_NAMES:
        digest = hashlib.sha1(serial.encode("utf-8")).hexdigest()[:8]
        base = f"{base}-{digest}"
    return base


def _inside(path: Path, folder: Path) -> bool:
    try:
        return path.resolve().is_relative_to(folder.resolve())
    except (OSError, RuntimeError):  # symlink loops
        return False


def collect_units(source: str | os.PathLike[str]) -> tuple[list[UnitInput], list[str]]:
    """The units of a batch source, and a list of problems that are not units.

    Parameters
    ----------
    source : path-like
        A folder (every file with an extension in :data:`AUDIO_EXTENSIONS`,
        not hidden, not in sub-folders; serial = file name stem, sorted by
        file name) or a manifest CSV (UTF-8, header row with at least
        ``serial`` and ``file``; optional ``station``, ``operator``,
        ``recorded_at``; relative paths are relative to the manifest's
        folder, and a file must stay inside that folder once resolved).

    Returns
    -------
    units : list of UnitInput
        One entry per serial, in input order. Duplicate serials, missing
        files and paths that leave the folder become units with a ``problem``
        (ERROR); such files are not opened.
    problems : list of str
        Rows that name no serial, and unknown manifest columns.

    Raises
    ------
    popmeter.errors.InputError
        The source does not exist, is neither a folder nor a ``.csv`` file,
        has no recordings, or the manifest lacks a required column.
    """
    src = Path(source)
    if src.is_dir():
        return _from_folder(src)
    if src.is_file():
        if src.suffix.lower() != ".csv":
            raise InputError(f"{src}: a batch needs a folder of recordings or a manifest .csv")
        return _from_manifest(src)
    raise InputError(f"{src}: no such folder or manifest")


def _from_folder(folder: Path) -> tuple[list[UnitInput], list[str]]:
    files = sorted(
        p for p in folder.iterdir()
        if p.suffix.lower() in AUDIO_EXTENSIONS and not p.name.startswith(".") and p.is_file()
    )
    if not files:
        raise InputError(
            f"{folder}: no recordings found (looked for {', '.join(sorted(AUDIO_EXTENSIONS))})"
        )
    by_serial: dict[str, list[Path]] = {}
    for path in files:
        by_serial.setdefault(path.stem, []).append(path)
    units: list[UnitInput] = []
    for position, (serial, paths) in enumerate(by_serial.items()):
        unit = UnitInput(serial=serial, position=position, path=paths[0], file=paths[0].name)
        if len(paths) > 1:
            names = ", ".join(p.name for p in paths)
            unit.path = None
            unit.file = names
            unit.problem = f"duplicate serial {serial!r}: several recordings ({names}); none analysed"
        elif not _inside(paths[0], folder):
            unit.path = None
            unit.problem = f"{paths[0].name} is a link that leaves the batch folder; not followed"
        units.append(unit)
    return units, []


def _clean(value: str | None) -> str | None:
    if value is None:
        return None
    value = value.strip()
    return value or None


def _from_manifest(manifest: Path) -> tuple[list[UnitInput], list[str]]:
    folder = manifest.parent
    try:
        with manifest.open(newline="", encoding="utf-8-sig") as handle:
            reader = csv.reader(handle)
            rows = list(reader)
    except (OSError, UnicodeDecodeError, csv.Error) as error:
        raise InputError(f"{manifest}: cannot read the manifest ({error})") from None
    if not rows:
        raise InputError(f"{manifest}: empty manifest (needs a header row: serial,file)")
    header = [h.strip().lower() for h in rows[0]]
    missing = [c for c in MANIFEST_COLUMNS if c not in header]
    if missing:
        raise InputError(f"{manifest}: missing column(s) {', '.join(missing)} in the header row")
    problems = [
        f"{manifest.name}: column {h!r} ignored (known: {', '.join(MANIFEST_COLUMNS + MANIFEST_OPTIONAL)})"
        for h in header if h and h not in MANIFEST_COLUMNS + MANIFEST_OPTIONAL
    ]
    index = {name: header.index(name) for name in MANIFEST_COLUMNS + MANIFEST_OPTIONAL if name in header}

    def cell(row: list[str], name: str) -> str | None:
        i = index.get(name)
        return _clean(row[i]) if i is not None and i < len(row) else None

    entries: dict[str, list[tuple[int, list[str]]]] = {}
    for line, row in enumerate(rows[1:], start=2):
        if not any(c.strip() for c in row):
            continue
        serial = cell(row, "serial")
        if serial is None:
            problems.append(f"{manifest.name} line {line}: no serial; row skipped")
            continue
        entries.setdefault(serial, []).append((line, row))
    if not entries:
        raise InputError(f"{manifest}: no units listed")
    units: list[UnitInput] = []
    for position, (serial, listed) in enumerate(entries.items()):
        line, row = listed[0]
        file_text = cell(row, "file")
        unit = UnitInput(
            serial=serial, position=position, path=None, file=file_text,
            station=cell(row, "station"), operator=cell(row, "operator"),
            recorded_at=cell(row, "recorded_at"),
        )
        if len(listed) > 1:
            lines = ", ".join(str(n) for n, _ in listed)
            unit.problem = f"duplicate serial {serial!r} in the manifest (lines {lines}); none analysed"
        elif file_text is None:
            unit.problem = f"{manifest.name} line {line}: no file given"
        else:
            candidate = Path(file_text).expanduser()
            if not candidate.is_absolute():
                candidate = folder / candidate
            if not _inside(candidate, folder):
                unit.problem = f"file {file_text!r} leaves the manifest's folder; not followed"
            elif not candidate.is_file():
                unit.problem = f"file not found: {file_text}"
            else:
                unit.path = candidate.resolve()
        units.append(unit)
    return units, problems


# --- per-unit work (runs in worker processes) ---------------------------------


@dataclass
class _Task:
    serial: str
    path: str
    unit_dir: str
    out_dir: str
    spec: Spec
    boat: str | None
    analyzer: Analyzer | None
    report_writer: Callable[..., Any] | None
    default_report: bool


def _json_value(value: Any) -> Any:
    if value is None or isinstance(value, (str, bool)):
        return value
    if isinstance(value, (int, np.integer)):
        return int(value)
    try:
        f = float(value)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _analyse_unit(task: _Task) -> dict[str, Any]:
    """Analyse, judge and report one unit; never raises for a bad unit."""
    started = time.perf_counter()
    analyzer = task.analyzer
    if analyzer is None:
        from popmeter.analysis import analyze_file

        analyzer = analyze_file
    try:
        analysis = analyzer(task.path, boat=task.boat, spec=task.spec)
    except PopmeterError as error:
        return {"error": str(error), "elapsed_s": time.perf_counter() - started}
    except Exception as error:  # noqa: BLE001 - a bad unit must never stop the batch
        return {
            "error": f"analysis failed ({type(error).__name__}: {error})",
            "elapsed_s": time.perf_counter() - started,
        }
    summary = {key: _json_value(value) for key, value in dict(analysis.timeline.summary).items()}
    warnings = [str(w) for w in getattr(analysis, "warnings", [])]
    verdict = judge(summary, task.spec)
    try:  # the run report then shows the verdict of this spec
        analysis.verdict = verdict
        analysis.spec_name = task.spec.name
    except AttributeError:
        pass
    unit_dir = Path(task.unit_dir)
    report: str | None = None
    try:
        unit_dir.mkdir(parents=True, exist_ok=True)
        if hasattr(analysis, "to_json"):
            (unit_dir / "analysis.json").write_text(
                json.dumps(analysis.to_json(), indent=1, allow_nan=False), encoding="utf-8"
            )
        writer = task.report_writer
        if writer is None and task.default_report:
            from popmeter.run_report import write_run_report

            writer = write_run_report
        if writer is not None:
            page = Path(writer(analysis, unit_dir))
            report = page.relative_to(Path(task.out_dir)).as_posix()
    except Exception as error:  # noqa: BLE001 - a report problem does not change the verdict
        warnings.append(f"unit report not written ({type(error).__name__}: {error})")
    return {
        "summary": summary,
        "warnings": warnings,
        "verdict": verdict.to_json(),
        "report": report,
        "elapsed_s": time.perf_counter() - started,
    }


# --- results -------------------------------------------------------------------


@dataclass
class UnitResult:
    """One judged unit.

    ``summary`` holds the summary metrics (None where undetermined; empty
    for ERROR units); ``report`` is the unit's report page relative to the
    batch output folder (None when none was written).
    """

    serial: str
    position: int
    verdict: Verdict
    summary: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    file: str | None = None
    station: str | None = None
    operator: str | None = None
    recorded_at: str | None = None
    report: str | None = None
    elapsed_s: float = 0.0

    @property
    def status(self) -> str:
        """"PASS", "FAIL" or "ERROR"."""
        return self.verdict.status

    def to_json(self) -> dict[str, Any]:
        """JSON-ready form of the unit's row."""
        return {
            "serial": self.serial,
            "position": self.position,
            "verdict": self.verdict.status,
            "reasons": list(self.verdict.reasons),
            "checks": self.verdict.to_json()["checks"],
            "summary": {k: _json_value(v) for k, v in self.summary.items()},
            "warnings": list(self.warnings),
            "file": self.file,
            "station": self.station,
            "operator": self.operator,
            "recorded_at": self.recorded_at,
            "report": self.report,
            "elapsed_s": round(self.elapsed_s, 3),
        }


@dataclass
class BatchResult:
    """A judged batch.

    ``units`` in input order; ``stats`` per limited metric (in spec order);
    ``problems`` lists input rows that are not units (and history trouble).
    """

    batch_id: str
    spec: Spec
    source: str
    out_dir: Path
    units: list[UnitResult]
    stats: dict[str, MetricStats]
    problems: list[str] = field(default_factory=list)
    jobs: int = 1
    elapsed_s: float = 0.0
    created_at: str = ""
    db: str | None = None

    @property
    def counts(self) -> dict[str, int]:
        """Units per verdict: {"PASS": n, "FAIL": n, "ERROR": n}."""
        out = {"PASS": 0, "FAIL": 0, "ERROR": 0}
        for unit in self.units:
            out[unit.status] += 1
        return out

    @property
    def all_passed(self) -> bool:
        """True when there is at least one unit and every unit passed."""
        return bool(self.units) and all(u.status == "PASS" for u in self.units)

    def to_json(self) -> dict[str, Any]:
        """The ``results.json`` document (schema ``popmeter.batch/1``)."""
        return {
            "schema": BATCH_SCHEMA,
            "batch_id": self.batch_id,
            "created_at": self.created_at,
            "source": self.source,
            "spec": self.spec.to_json(),
            "counts": self.counts,
            "all_passed": self.all_passed,
            "problems": list(self.problems),
            "units": [u.to_json() for u in self.units],
            "statistics": {name: s.to_json() for name, s in self.stats.items()},
            "history_db": self.db,
        }


def batch_statistics(units: list[UnitResult], spec: Spec) -> dict[str, MetricStats]:
    """Per limited metric, the statistics over the units (ERROR units count as
    missing values, so they lower the yield)."""
    ordered = sorted(units, key=lambda u: u.position)
    return {
        metric: metric_stats(
            metric,
            [u.summary.get(metric) for u in ordered],
            lsl=limit.min, usl=limit.max, target=limit.target,
        )
        for metric, limit in spec.limits.items()
    }


#: First characters that make a spreadsheet read a cell as a formula (OWASP,
#: "CSV Injection"): ``=``, ``+``, ``-``, ``@``, and tab / carriage return.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def neutralise_cell(text: str) -> str:
    """A text cell made safe to open in a spreadsheet.

    A text that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage
    return (serials, operators and file names come from the user's manifest)
    gets a leading ``'`` so that a spreadsheet shows it as text instead of
    running it as a formula (OWASP, "CSV Injection"). Numbers are never passed
    here, so a negative drift stays a number.
    """
    return "'" + text if text.startswith(_FORMULA_START) else text


def write_results_csv(result: BatchResult, path: Path) -> Path:
    """``results.csv``: serial, verdict, reasons, one column per summary
    metric (SI names as in the analysis JSON), then file, station, operator,
    recorded_at, report.

    Text cells (serial, verdict, reasons, file, station, operator,
    recorded_at, report) that a spreadsheet would run as a formula are
    prefixed with ``'`` (see :func:`neutralise_cell`); the metric columns are
    numbers and are written as they are. ``results.json`` keeps the texts
    unchanged."""
    extra = ("file", "station", "operator", "recorded_at", "report")
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(["serial", "verdict", "reasons", *SUMMARY_KEYS, *extra])
        for unit in result.units:
            values = []
            for key in SUMMARY_KEYS:
                v = _json_value(unit.summary.get(key))
                values.append("" if v is None else repr(v) if isinstance(v, float) else v)
            texts = [unit.serial, unit.status, "; ".join(unit.verdict.reasons)]
            tail = ["" if getattr(unit, k) is None else str(getattr(unit, k)) for k in extra]
            writer.writerow(
                [*(neutralise_cell(x) for x in texts), *values, *(neutralise_cell(x) for x in tail)]
            )
    return path


# --- the runner ---------------------------------------------------------------


def _default_jobs() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


def run_batch(
    source: str | os.PathLike[str],
    *,
    spec: Spec | str | os.PathLike[str],
    boat: str | os.PathLike[str] | None = None,
    out_dir: str | os.PathLike[str],
    jobs: int | None = None,
    db: str | os.PathLike[str] | None = None,
    batch_id: str | None = None,
    progress: bool = True,
    analyzer: Analyzer | None = None,
    report_writer: Callable[..., Any] | None = None,
    unit_reports: bool = True,
) -> BatchResult:
    """Analyse and judge every unit of a batch; write results, report and history.

    Parameters
    ----------
    source : path-like
        Folder of recordings or manifest CSV (see :func:`collect_units`).
    spec : Spec or path-like
        The QC spec (object or TOML file).
    boat : path-like, optional
        Boat profile (TOML), needed for diaphragm stiffness; validated once
        before any unit is analysed. Default None (no stiffness; a spec that
        limits ``diaphragm_stiffness_kpa_per_ml`` then is a usage error).
    out_dir : path-like
        Output folder (created): ``results.csv``, ``results.json``,
        ``index.html``, ``units/<serial>/`` (each unit's run report and
        ``analysis.json``; for an ERROR unit a page with the reason) and, unless
        ``db`` says otherwise, ``history.sqlite``.
    jobs : int, optional
        Worker processes. Default: the number of usable cores.
    db : str or path-like, optional
        History database: SQLite file path or ``sqlite:///`` URL, or
        ``postgresql://`` URL. Default ``out_dir/history.sqlite``.
    batch_id : str, optional
        Name of the batch in the history. Default: the folder name or the
        manifest's file name stem. Re-running with the same id replaces
        the units' earlier records (idempotent).
    progress : bool
        Show a progress bar (on stderr) and the final summary (stdout).
        Default True.
    analyzer : callable, optional
        ``analyzer(path, *, boat, spec) -> Analysis``; default
        :func:`popmeter.analysis.analyze_file`. Must be picklable (a module
        level function) because units run in worker processes.
    report_writer : callable, optional
        ``report_writer(analysis, unit_dir) -> Path`` of the unit's report
        page; default :func:`popmeter.run_report.write_run_report`.
    unit_reports : bool
        Write each unit's run report. Default True.

    Returns
    -------
    BatchResult

    Raises
    ------
    popmeter.errors.PopmeterError
        Bad spec, profile, source, jobs or database (before any analysis);
        :class:`popmeter.history.HistoryError` when the history cannot be
        written at the end (the result files are written first).
    """
    from popmeter.history import History, UnitRecord

    started = time.perf_counter()
    the_spec = spec if isinstance(spec, Spec) else load_spec(spec)
    if boat is None and "diaphragm_stiffness_kpa_per_ml" in the_spec.limits:
        raise UsageError(
            f"spec {the_spec.name!r} limits diaphragm_stiffness_kpa_per_ml: give the boat "
            "profile with --boat"
        )
    if boat is not None and analyzer is None:
        from popmeter.profile import load_profile

        load_profile(boat)  # fail once, clearly, instead of once per unit
    if jobs is not None and jobs < 1:
        raise UsageError(f"--jobs must be at least 1, got {jobs}")
    src = Path(source)
    inputs, problems = collect_units(src)
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise InputError(f"{out}: cannot create the output folder ({error})") from None
    the_batch_id = batch_id or (src.name if src.is_dir() else src.stem)
    history = History(db, default_path=out / "history.sqlite")  # a bad --db fails now
    created_at = datetime.now(UTC).isoformat(timespec="seconds")

    results: dict[str, UnitResult] = {}
    tasks: list[_Task] = []
    for unit in inputs:
        if unit.problem is not None or unit.path is None:
            results[unit.serial] = _unit_result(unit, {"error": unit.problem or "no file"})
            continue
        tasks.append(
            _Task(
                serial=unit.serial, path=str(unit.path),
                unit_dir=str(out / "units" / safe_folder_name(unit.serial)), out_dir=str(out),
                spec=the_spec, boat=None if boat is None else str(boat), analyzer=analyzer,
                report_writer=report_writer, default_report=unit_reports and report_writer is None,
            )
        )
    by_serial = {u.serial: u for u in inputs}
    if tasks:
        _preload(analyzer is None, unit_reports and report_writer is None)
    n_jobs = min(jobs or _default_jobs(), max(1, len(tasks)))

    def done(task: _Task, outcome: dict[str, Any]) -> None:
        results[task.serial] = _unit_result(by_serial[task.serial], outcome)

    _run_tasks(tasks, n_jobs, done, results, len(inputs), progress)

    units = sorted(results.values(), key=lambda u: u.position)
    for unit in units:
        if unit.report is None and unit.status == "ERROR":
            unit.report = _write_error_page(unit, out)
    result = BatchResult(
        batch_id=the_batch_id, spec=the_spec, source=str(src.resolve()), out_dir=out,
        units=units, stats=batch_statistics(units, the_spec), problems=problems, jobs=n_jobs,
        created_at=created_at, db=history.display_url,
    )
    result.elapsed_s = time.perf_counter() - started

    from popmeter.batch_report import print_batch_summary, write_batch_report

    write_results_csv(result, out / "results.csv")
    (out / "results.json").write_text(
        json.dumps(result.to_json(), indent=1, allow_nan=False), encoding="utf-8"
    )
    write_batch_report(result, out)
    try:
        history.record_batch(
            the_batch_id, spec_name=the_spec.name,
            spec_limits=the_spec.to_json()["limits"], source=result.source,
        )
        history.record_units(
            the_batch_id,
            [
                UnitRecord(
                    serial=u.serial, position=u.position, status=u.status,
                    reasons=list(u.verdict.reasons),
                    summary={k: u.summary.get(k) for k in SUMMARY_KEYS if k in u.summary},
                    file=u.file, station=u.station, operator=u.operator,
                    recorded_at=u.recorded_at,
                )
                for u in units
            ],
            spec_name=the_spec.name,
        )
    finally:
        history.close()
    if progress:
        print_batch_summary(result)
    return result


def _write_error_page(unit: UnitResult, out: Path) -> str | None:
    """A small page in the unit's sub-folder saying why it could not be analysed."""
    import html

    folder = out / "units" / safe_folder_name(unit.serial)
    reasons = "".join(f"<li>{html.escape(r)}</li>" for r in unit.verdict.reasons)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        page = folder / "index.html"
        page.write_text(
            '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
            f"<title>{html.escape(unit.serial)}: ERROR</title></head><body>"
            f"<h1>{html.escape(unit.serial)}: ERROR</h1>"
            f"<p>file: {html.escape(unit.file or '—')}</p><ul>{reasons}</ul>"
            "<p>The unit could not be analysed; it does not pass.</p></body></html>",
            encoding="utf-8",
        )
    except OSError:
        return None
    return page.relative_to(out).as_posix()


def _preload(pipeline: bool, reports: bool) -> None:
    """Import the pipeline once in this process: forked workers inherit the
    modules instead of each importing numpy/scipy/librosa again."""
    import importlib

    names = []
    if pipeline:
        names += ["popmeter.analysis", "popmeter.audio_io", "popmeter.detection",
                  "popmeter.timeline", "popmeter.stiffness", "popmeter.engine"]
    if reports:
        names += ["popmeter.run_report"]
    for name in names:
        try:
            importlib.import_module(name)
        except ImportError:  # the worker reports it as the unit's error
            pass


def _unit_result(unit: UnitInput, outcome: dict[str, Any]) -> UnitResult:
    if "error" in outcome:
        verdict = error_verdict(str(outcome["error"]))
        summary: dict[str, Any] = {}
    else:
        doc = outcome["verdict"]
        from popmeter.qc_spec import Check

        verdict = Verdict(
            status=doc["status"], reasons=list(doc["reasons"]),
            checks=[Check(**c) for c in doc["checks"]],
        )
        summary = dict(outcome["summary"])
    return UnitResult(
        serial=unit.serial, position=unit.position, verdict=verdict, summary=summary,
        warnings=list(outcome.get("warnings", [])), file=unit.file, station=unit.station,
        operator=unit.operator, recorded_at=unit.recorded_at, report=outcome.get("report"),
        elapsed_s=float(outcome.get("elapsed_s", 0.0)),
    )


def _run_tasks(
    tasks: list[_Task],
    jobs: int,
    done: Callable[[_Task, dict[str, Any]], None],
    results: dict[str, UnitResult],
    total: int,
    show: bool,
) -> None:
    """Run the tasks in worker processes; a crashed worker costs only its unit."""
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeElapsedColumn,
        TimeRemainingColumn,
    )

    progress = Progress(
        TextColumn("[bold]units"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
        TimeRemainingColumn(), TextColumn("{task.description}"),
        console=Console(stderr=True), disable=not show, transient=False,
    )

    def counts() -> str:
        c = {"PASS": 0, "FAIL": 0, "ERROR": 0}
        for r in results.values():
            c[r.status] += 1
        return f"[green]PASS {c['PASS']}[/] [red]FAIL {c['FAIL']}[/] [yellow]ERROR {c['ERROR']}[/]"

    with progress:
        bar = progress.add_task(counts(), total=total, completed=len(results))

        def finish(task: _Task, outcome: dict[str, Any]) -> None:
            done(task, outcome)
            progress.update(bar, advance=1, description=counts())

        lost = _pool_pass(tasks, jobs, finish)
        # a worker that died (killed, out of memory, crashed in native code)
        # breaks the whole pool; run the units it took down one by one, each
        # in its own process, so only the culprit becomes ERROR
        for task in lost:
            again = _pool_pass([task], 1, finish)
            for t in again:
                finish(t, {"error": "the analysis process died (crash or out of memory)"})


def _ignore_sigint() -> None:
    """Worker initializer: Ctrl-C is the main process's business (it stops the pool)."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _pool_pass(
    tasks: list[_Task], jobs: int, finish: Callable[[_Task, dict[str, Any]], None]
) -> list[_Task]:
    if not tasks:
        return []
    lost: list[_Task] = []
    pool = ProcessPoolExecutor(max_workers=jobs, initializer=_ignore_sigint)
    try:
        futures = {pool.submit(_analyse_unit, t): t for t in tasks}
        for future in as_completed(futures):
            task = futures[future]
            try:
                outcome = future.result()
            except BrokenProcessPool:
                lost.append(task)
                continue
            except Exception as error:  # noqa: BLE001 - e.g. an unpicklable analyzer result
                outcome = {"error": f"analysis failed ({type(error).__name__}: {error})"}
            finish(task, outcome)
    except BaseException:
        # Ctrl-C (or any failure of the runner itself): do not wait for the
        # remaining units; stop the workers now
        workers = list((getattr(pool, "_processes", None) or {}).values())
        pool.shutdown(wait=False, cancel_futures=True)
        for process in workers:
            process.terminate()
        raise
    pool.shutdown(wait=True)
    return lost


__all__ = [
    "AUDIO_EXTENSIONS",
    "BatchResult",
    "UnitInput",
    "UnitResult",
    "batch_statistics",
    "collect_units",
    "neutralise_cell",
    "run_batch",
    "safe_folder_name",
    "write_results_csv",
]
