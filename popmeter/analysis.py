"""The ``analyze`` pipeline: one recording in, one :class:`Analysis` out.

The steps, each owned by its own module::

    audio_io.open_stream      blocks of samples, bounded memory
    detection.ClickDetector   clicks (the same streaming core as live capture)
    timeline.build_timeline   cycles, phases, stalls, summary metrics
    stiffness.estimate_...    diaphragm stiffness (only with a boat profile)
    qc_spec.judge             PASS / FAIL (only with a QC spec)

:func:`analyze_file` runs them; :meth:`Analysis.to_json` gives the
``popmeter.analysis/1`` document described in the README, :func:`write_csv`
one row per cycle, and :func:`write_outputs` everything the command line asks
for. Nothing here prints except :func:`write_outputs`.
"""

from __future__ import annotations

import csv
import json
import math
import os
import tempfile
from dataclasses import asdict, dataclass, field, fields, is_dataclass
from pathlib import Path
from typing import Any

import numpy as np

from popmeter import __version__

SCHEMA = "popmeter.analysis/1"

#: Floor of the steady-rate uncertainty handed to the stiffness inversion, as a
#: fraction of the rate. The timeline's standard error of the median can be
#: tiny on a long steady run; the rate of a real engine also wanders with the
#: flame, so the inversion never treats it as better known than this
#: (common practice, no source: a quarter of a percent is about the drift of a
#: candle-fired engine over a minute in our own generated runs).
RATE_SD_FLOOR_FRACTION = 0.0025


@dataclass
class SourceInfo:
    """Where the samples came from.

    ``duration_s`` is the length of the audio actually read (a damaged file
    yields only its readable part); ``channel_used`` counts from 0.
    """

    path: str | None
    sample_rate_hz: int
    duration_s: float
    channels: int
    channel_used: int


@dataclass
class Analysis:
    """Everything popmeter learnt from one recording.

    Attributes
    ----------
    source : SourceInfo
    detection : popmeter.detection.DetectionResult
        Clicks with their features, the clicks-per-cycle decision, the band.
    timeline : popmeter.timeline.Timeline
        Cycles, phases, stalls and the ``summary`` metrics (SI units).
    stiffness : popmeter.stiffness.StiffnessEstimate or None
        Only when a boat profile was given.
    verdict : popmeter.qc_spec.Verdict or None
        Only when a QC spec was given.
    warnings : list of str
        Everything the user should know, from every step, in plain words.
    profile_name, spec_name : str or None
    """

    source: SourceInfo
    detection: Any
    timeline: Any
    stiffness: Any = None
    verdict: Any = None
    warnings: list[str] = field(default_factory=list)
    profile_name: str | None = None
    spec_name: str | None = None

    @property
    def summary(self) -> dict[str, Any]:
        """The summary metrics (keys as in the README); None where undetermined."""
        return self.timeline.summary

    def to_json(self) -> dict[str, Any]:
        """The analysis as a JSON-ready dict, schema ``popmeter.analysis/1``."""
        det = self.detection
        # (each click's cycle as an index into "cycles": the detector counts
        # main clicks, the timeline also sets lone clicks aside and fills in
        # cycles whose click was missed)
        from popmeter.timeline import cycle_of_times

        cycle_of = cycle_of_times([c.time_s for c in det.clicks], self.timeline.cycles)
        doc: dict[str, Any] = {
            "schema": SCHEMA,
            "popmeter_version": __version__,
            "source": asdict(self.source),
            "clicks_per_cycle": int(det.clicks_per_cycle),
            "detection": {
                "band_hz": list(det.band_hz) if det.band_hz is not None else None,
                "rejected_candidates": int(det.rejected),
                "ring_hz": det.ring_hz,
            },
            "clicks": [
                {
                    "time_s": c.time_s,
                    "sample": c.sample,
                    "level_dbfs": c.level_dbfs,
                    "strength": c.strength,
                    "kind": c.kind,
                    "cycle": cycle,
                    "ring_hz": c.ring_hz,
                    "decay_s": c.decay_s,
                }
                for c, cycle in zip(det.clicks, cycle_of)
            ],
            "cycles": _flat_dicts(self.timeline.cycles),
            "phases": [_plain(p) for p in self.timeline.phases],
            "stalls": [_plain(s) for s in self.timeline.stalls],
            "summary": dict(self.timeline.summary),
        }
        if self.profile_name is not None or self.stiffness is not None:
            doc["profile"] = self.profile_name
            doc["stiffness"] = self.stiffness.to_json() if self.stiffness is not None else None
        if self.verdict is not None:
            doc["spec"] = self.spec_name
            doc["verdict"] = _plain(self.verdict)
        doc["warnings"] = list(self.warnings)
        return _json_clean(doc)


def _plain(obj: Any) -> Any:
    """A dataclass (or anything with ``to_json``) as plain JSON-ready data."""
    if hasattr(obj, "to_json"):
        return obj.to_json()
    if is_dataclass(obj):
        return asdict(obj)
    return obj


def _flat_dicts(items: list[Any]) -> list[dict[str, Any]]:
    """Dataclass instances of one type, their fields plain values (numbers,
    strings), as dicts: what ``asdict`` gives for them, without its deep copies."""
    if not items:
        return []
    names = [f.name for f in fields(items[0])]
    return [{name: getattr(item, name) for name in names} for item in items]


def _json_clean(value: Any) -> Any:
    """Recursively turn numpy scalars/arrays into Python, and NaN/inf into None."""
    kind = type(value)
    if kind is float:  # (the plain types first: most of a document)
        return value if math.isfinite(value) else None
    if kind is int or kind is str or value is None:
        return value
    if isinstance(value, dict):
        return {str(k): _json_clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_json_clean(v) for v in value.tolist()]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        f = float(value)
        return f if math.isfinite(f) else None
    return value


def analyze_file(
    path: str | os.PathLike[str],
    *,
    boat: Any = None,
    channel: int | None = None,
    band_hz: tuple[float, float] | None = None,
    clicks_per_cycle: int | None = None,
    ignition_at_s: float | None = None,
    spec: Any = None,
) -> Analysis:
    """Analyse one recording.

    Parameters
    ----------
    path : path-like
        Any recording :func:`popmeter.audio_io.open_stream` reads (WAV, FLAC,
        OGG, MP3, AIFF; M4A and others through ffmpeg). Read in blocks, so a
        recording of hours needs little memory.
    boat : path-like or BoatProfile, optional
        Boat profile (TOML). With it, the diaphragm stiffness is estimated.
    channel : int, optional
        Channel to analyse, from 0. Default: the channel with the clearest
        clicks (see :func:`popmeter.audio_io.open_stream`).
    band_hz : (float, float), optional
        Force the click band (Hz). Default: found from the recording.
    clicks_per_cycle : {1, 2}, optional
        Force one or two clicks per engine cycle. Default: decided from the
        alternation of click families in the recording.
    ignition_at_s : float, optional
        Time in the recording (s) at which the flame was lit; gives
        ``ignition_delay_s``.
    spec : path-like or Spec, optional
        QC spec (TOML). With it, :attr:`Analysis.verdict` is PASS or FAIL.

    Returns
    -------
    Analysis

    Raises
    ------
    popmeter.errors.InputError
        The recording cannot be read or holds no usable audio.
    popmeter.errors.ProfileError, popmeter.errors.SpecError
        The profile or spec is invalid (checked before any audio is read).
    """
    from popmeter.audio_io import open_stream
    from popmeter.detection import detect_clicks_in_blocks

    profile = _as_profile(boat)
    qc_spec = _as_spec(spec)

    with open_stream(path, channel=channel) as stream:
        sample_rate_hz = int(stream.info.sample_rate_hz)
        detection = detect_clicks_in_blocks(
            stream, sample_rate_hz, band_hz=band_hz, clicks_per_cycle=clicks_per_cycle
        )
        frames_read = int(stream.frames_read)
        source = SourceInfo(
            path=str(path),
            sample_rate_hz=sample_rate_hz,
            duration_s=frames_read / sample_rate_hz,
            channels=int(stream.info.channels),
            channel_used=int(stream.channel_used),
        )
        warnings = list(stream.warnings)
    return analyze_clicks(
        detection,
        source=source,
        profile=profile,
        spec=qc_spec,
        ignition_at_s=ignition_at_s,
        warnings=warnings,
    )


def analyze_clicks(
    detection: Any,
    *,
    source: SourceInfo,
    profile: Any = None,
    spec: Any = None,
    ignition_at_s: float | None = None,
    warnings: list[str] | None = None,
) -> Analysis:
    """Everything after detection: timeline, stiffness and verdict.

    ``detection`` is a :class:`popmeter.detection.DetectionResult` and
    ``source`` describes the audio it came from; :func:`analyze_file` calls
    this after reading, and any other source of clicks can be judged the
    same way.
    """
    from popmeter.timeline import build_timeline

    warnings = list(warnings or [])
    warnings.extend(detection.warnings)
    timeline = build_timeline(
        detection.clicks,
        duration_s=source.duration_s,
        clicks_per_cycle=detection.clicks_per_cycle,
        ignition_at_s=ignition_at_s,
        ring_hz=detection.ring_hz,
    )
    warnings.extend(timeline.warnings)
    summary = timeline.summary
    summary.setdefault("diaphragm_stiffness_kpa_per_ml", None)

    stiffness = None
    if profile is not None:
        stiffness = _estimate_stiffness(profile, summary, detection)
        if stiffness is not None:
            interval = stiffness.stiffness_kpa_per_ml
            summary["diaphragm_stiffness_kpa_per_ml"] = (
                interval.value if interval is not None else None
            )
            warnings.extend(f"stiffness: {w}" for w in stiffness.warnings)
    if summary.get("diaphragm_stiffness_kpa_per_ml") is None:
        if profile is None:
            warnings.append(
                "diaphragm_stiffness_kpa_per_ml is null: no boat profile given (use --boat)"
            )
        elif stiffness is None:
            warnings.append(
                "diaphragm_stiffness_kpa_per_ml is null: no steady cycle rate to invert"
            )
        elif not any("stiffness" in w for w in warnings):
            warnings.append("diaphragm_stiffness_kpa_per_ml is null: the inversion refused")

    verdict = None
    if spec is not None:
        from popmeter.qc_spec import judge

        verdict = judge(summary, spec)

    return Analysis(
        source=source,
        detection=detection,
        timeline=timeline,
        stiffness=stiffness,
        verdict=verdict,
        warnings=_dedupe(warnings),
        profile_name=getattr(profile, "name", None),
        spec_name=getattr(spec, "name", None),
    )


def _estimate_stiffness(profile: Any, summary: dict[str, Any], detection: Any) -> Any:
    from popmeter.stiffness import estimate_stiffness

    rate_hz = summary.get("steady_rate_hz")
    if rate_hz is None:
        return None
    sem = summary.get("steady_rate_sem_hz") or 0.0
    rate_sd_hz = max(float(sem), RATE_SD_FLOOR_FRACTION * float(rate_hz))
    return estimate_stiffness(profile, rate_hz=float(rate_hz), rate_sd_hz=rate_sd_hz,
                              ring_hz=detection.ring_hz)


def _as_profile(boat: Any) -> Any:
    if boat is None:
        return None
    if isinstance(boat, (str, os.PathLike)):
        from popmeter.profile import load_profile

        return load_profile(boat)
    return boat


def _as_spec(spec: Any) -> Any:
    if spec is None:
        return None
    if isinstance(spec, (str, os.PathLike)):
        from popmeter.qc_spec import load_spec

        return load_spec(spec)
    return spec


def _dedupe(items: list[str]) -> list[str]:
    seen: set[str] = set()
    out = []
    for item in items:
        if item not in seen:
            seen.add(item)
            out.append(item)
    return out


# --- writing -----------------------------------------------------------------

CSV_COLUMNS = ("cycle", "start_s", "period_s", "rate_hz", "phase", "missed_clicks")


def write_json(analysis: Analysis, path: str | os.PathLike[str]) -> Path:
    """Write :meth:`Analysis.to_json` to ``path`` (atomically: a reader never
    sees half a file)."""
    text = json.dumps(analysis.to_json(), indent=2, allow_nan=False)
    return _atomic_write_text(Path(path), text + "\n")


def write_csv(analysis: Analysis, path: str | os.PathLike[str]) -> Path:
    """Write one row per cycle: index, start (s), period (s), rate (Hz), phase,
    missed clicks bridged by the cycle."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".part")
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(CSV_COLUMNS)
        for i, c in enumerate(analysis.timeline.cycles):
            writer.writerow([i, _num(c.start_s), _num(c.period_s), _num(c.rate_hz), c.phase,
                             getattr(c, "missed_clicks", 0)])
    os.replace(tmp, path)
    return path


def _num(x: Any) -> str:
    if x is None:
        return ""
    f = float(x)
    return "" if not math.isfinite(f) else f"{f:.6f}"


def _atomic_write_text(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=path.name + ".", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def write_outputs(
    analysis: Analysis,
    *,
    json_path: str | os.PathLike[str] | None = None,
    csv_path: str | os.PathLike[str] | None = None,
    report_dir: str | os.PathLike[str] | None = None,
    quiet: bool = False,
    console: Any = None,
) -> dict[str, Path]:
    """Write the files asked for and print the summary (unless ``quiet``).

    Returns the paths written, keyed ``json``, ``csv`` and ``report``.
    A path that cannot be written raises :class:`popmeter.errors.OutputError`
    naming it.
    """
    from popmeter.errors import output_error

    written: dict[str, Path] = {}
    target: Any = None
    try:
        if json_path is not None:
            target = json_path
            written["json"] = write_json(analysis, json_path)
        if csv_path is not None:
            target = csv_path
            written["csv"] = write_csv(analysis, csv_path)
        if report_dir is not None:
            from popmeter.run_report import write_run_report

            target = report_dir
            written["report"] = write_run_report(analysis, Path(report_dir))
    except OSError as error:
        raise output_error(target, error, folder=target is report_dir) from None
    if not quiet:
        from popmeter.terminal import print_analysis

        print_analysis(analysis, written=written, console=console)
    return written
