"""QC specs (TOML) and per-unit verdicts.

A spec puts limits on the summary metrics of an analysis (the keys of
``Analysis.summary``, see the README). Each limit gives ``min``, ``max`` or
both, and an optional ``target``::

    name = "harbour tug production"

    [limits.steady_rate_hz]
    min = 10.0
    max = 15.0
    target = 12.5

:func:`load_spec` validates the whole file and reports every problem at once
(:class:`popmeter.errors.SpecError`, one entry per problem). :func:`judge`
turns a summary into a :class:`Verdict`: PASS only when every limited metric
has a finite value inside its limits. A metric that could not be determined
(``None``) where the spec has a limit is a FAIL with the reason, never a PASS.
A unit that could not be analysed at all gets :func:`error_verdict`.
"""

from __future__ import annotations

import math
import os
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Literal

from popmeter.errors import SpecError
from popmeter.timeline import SUMMARY_KEYS as TIMELINE_SUMMARY_KEYS

#: The summary metrics a spec may limit: the ``summary`` keys of the
#: ``popmeter.analysis/1`` document, defined once by the timeline.
SUMMARY_KEYS = TIMELINE_SUMMARY_KEYS

_TOP_KEYS = ("name", "limits")
_LIMIT_KEYS = ("min", "max", "target")

Status = Literal["PASS", "FAIL", "ERROR"]


@dataclass(frozen=True)
class Limit:
    """Limits of one metric, in the metric's own unit (its name says which).

    ``min``/``max`` are inclusive bounds; either may be None (one-sided).
    ``target`` is the nominal value (optional; used for reports only).
    """

    min: float | None = None
    max: float | None = None
    target: float | None = None

    def contains(self, value: float) -> bool:
        """True when ``value`` lies inside the limits (bounds included)."""
        if self.min is not None and value < self.min:
            return False
        return not (self.max is not None and value > self.max)


@dataclass(frozen=True)
class Spec:
    """A validated QC spec: a name and one :class:`Limit` per limited metric."""

    name: str
    limits: dict[str, Limit]
    source: str | None = None

    def to_json(self) -> dict[str, Any]:
        """The spec as JSON-ready data (``{"name", "limits": {metric: {...}}}``)."""
        return {"name": self.name, "limits": {k: asdict(v) for k, v in self.limits.items()}}


@dataclass(frozen=True)
class Check:
    """One limited metric of one unit: its value, the limits and the outcome."""

    metric: str
    value: float | None
    min: float | None
    max: float | None
    ok: bool


@dataclass
class Verdict:
    """The verdict on one unit.

    ``status`` is "PASS", "FAIL" (``reasons`` names each failing metric with
    its value and limit) or "ERROR" (the unit could not be analysed;
    ``reasons`` says why). ``checks`` holds one :class:`Check` per limit.
    """

    status: Status
    reasons: list[str] = field(default_factory=list)
    checks: list[Check] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        """True only for PASS."""
        return self.status == "PASS"

    def to_json(self) -> dict[str, Any]:
        """JSON-ready form: ``{"status", "reasons", "checks": [...]}``."""
        return {
            "status": self.status,
            "reasons": list(self.reasons),
            "checks": [asdict(c) for c in self.checks],
        }


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def spec_from_dict(data: dict[str, Any], *, source: str = "<spec>") -> Spec:
    """Validate a parsed spec document and build a :class:`Spec`.

    Parameters
    ----------
    data : dict
        The parsed TOML document.
    source : str
        Name used in error messages (the file path). Default ``"<spec>"``.

    Raises
    ------
    popmeter.errors.SpecError
        With one entry per problem: unknown keys, unknown metrics, values that
        are not finite numbers, a limit with neither min nor max, min > max,
        target outside [min, max].
    """
    problems: list[str] = []
    for key in data:
        if key not in _TOP_KEYS:
            problems.append(f"unknown key {key!r} (allowed: {', '.join(_TOP_KEYS)})")
    name = data.get("name", Path(source).stem if source != "<spec>" else "spec")
    if not isinstance(name, str) or not name.strip():
        problems.append("'name' must be a non-empty string")
        name = "spec"
    raw_limits = data.get("limits", {})
    limits: dict[str, Limit] = {}
    if not isinstance(raw_limits, dict):
        problems.append("'limits' must be a table of [limits.METRIC] sections")
        raw_limits = {}
    elif not raw_limits:
        problems.append("no limits: add at least one [limits.METRIC] section")
    for metric, entry in raw_limits.items():
        where = f"limits.{metric}"
        if metric not in SUMMARY_KEYS:
            problems.append(f"{where}: unknown metric (allowed: {', '.join(SUMMARY_KEYS)})")
            continue
        if not isinstance(entry, dict):
            problems.append(f"{where}: must be a table with min, max and/or target")
            continue
        values: dict[str, float | None] = {"min": None, "max": None, "target": None}
        bad = False
        for key, value in entry.items():
            if key not in _LIMIT_KEYS:
                problems.append(f"{where}.{key}: unknown key (allowed: {', '.join(_LIMIT_KEYS)})")
                bad = True
                continue
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                problems.append(f"{where}.{key}: must be a number, got {value!r}")
                bad = True
                continue
            if not math.isfinite(value):
                problems.append(f"{where}.{key}: must be finite, got {value!r}")
                bad = True
                continue
            values[key] = float(value)
        lo, hi, target = values["min"], values["max"], values["target"]
        if not bad and lo is None and hi is None:
            problems.append(f"{where}: gives neither min nor max")
            continue
        if lo is not None and hi is not None and lo > hi:
            problems.append(f"{where}: min {_fmt(lo)} is greater than max {_fmt(hi)}")
            bad = True
        if target is not None and (
            (lo is not None and target < lo) or (hi is not None and target > hi)
        ):
            problems.append(f"{where}: target {_fmt(target)} lies outside [min, max]")
            bad = True
        if not bad:
            limits[metric] = Limit(min=lo, max=hi, target=target)
    if problems:
        raise SpecError(source, problems)
    ordered = {k: limits[k] for k in SUMMARY_KEYS if k in limits}
    return Spec(name=name.strip(), limits=ordered, source=None if source == "<spec>" else source)


def load_spec(path: str | os.PathLike[str]) -> Spec:
    """Read and validate a QC spec TOML file.

    Parameters
    ----------
    path : path-like
        The spec file (TOML, layout in the README). The spec's ``name``
        defaults to the file name stem.

    Returns
    -------
    Spec

    Raises
    ------
    popmeter.errors.SpecError
        The file is missing, is not valid TOML, or has problems (all listed).
    """
    source = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SpecError(source, ["file not found"]) from None
    except (OSError, UnicodeDecodeError) as error:
        raise SpecError(source, [f"cannot read ({error})"]) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise SpecError(source, [f"not valid TOML ({error})"]) from None
    return spec_from_dict(data, source=source)


def judge(summary: dict[str, Any], spec: Spec) -> Verdict:
    """Judge one unit's summary metrics against a spec.

    Parameters
    ----------
    summary : dict
        Summary metrics (``Analysis.summary``); a value may be None where the
        analysis could not determine it.
    spec : Spec

    Returns
    -------
    Verdict
        PASS when every limited metric is a finite number inside its limits;
        otherwise FAIL, with one reason per failing metric giving its value and
        the limit it broke ("no value" when the metric is missing or None).
    """
    checks: list[Check] = []
    reasons: list[str] = []
    for metric, limit in spec.limits.items():
        raw = summary.get(metric)
        value: float | None
        if raw is None or isinstance(raw, bool):
            value = None
        else:
            try:
                value = float(raw)
            except (TypeError, ValueError):
                value = None
        if value is None or not math.isfinite(value):
            checks.append(Check(metric, None, limit.min, limit.max, False))
            reasons.append(f"{metric}: no value (could not be determined)")
            continue
        ok = limit.contains(value)
        checks.append(Check(metric, value, limit.min, limit.max, ok))
        if not ok:
            if limit.min is not None and value < limit.min:
                reasons.append(f"{metric} = {_fmt(value)} below min {_fmt(limit.min)}")
            else:
                assert limit.max is not None
                reasons.append(f"{metric} = {_fmt(value)} above max {_fmt(limit.max)}")
    return Verdict(status="FAIL" if reasons else "PASS", reasons=reasons, checks=checks)


def error_verdict(reason: str) -> Verdict:
    """The verdict on a unit that could not be analysed at all (ERROR, never PASS)."""
    return Verdict(status="ERROR", reasons=[reason], checks=[])


__all__ = [
    "SUMMARY_KEYS",
    "Check",
    "Limit",
    "Spec",
    "Verdict",
    "error_verdict",
    "judge",
    "load_spec",
    "spec_from_dict",
]
