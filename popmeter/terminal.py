"""Compact terminal views of an analysis (rich).

The summary of one run is built to be read in five seconds at the test tank:
one header line (file, length, clicks), one block of the run's timeline, one
block of the engine figures, then the verdict and any warnings. Numbers carry
their units; a value that could not be determined shows as ``n/a`` and the
reason is among the warnings.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from rich.console import Console, Group
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from popmeter.safety import SAFETY_LINE

#: Colours of popmeter's terminal views (our own palette: harbour blues,
#: brass for the engine figures).
ACCENT = "steel_blue1"
BRASS = "dark_goldenrod"
PASS_STYLE = "bold black on green3"
FAIL_STYLE = "bold white on red3"
ERROR_STYLE = "bold black on orange1"



def channel_label(channel_used: int, channels: int) -> str:
    """The channel analysed, counted from 0 like ``--channel`` and the JSON's
    ``channel_used``: ``mono`` or ``channel 1 of 0-1``."""
    if channels <= 1:
        return "mono"
    return f"channel {channel_used} of 0-{channels - 1}"


def fmt(value: Any, unit: str = "", digits: int = 2) -> str:
    """Format a number with its unit; ``None``/NaN become ``n/a``."""
    if value is None:
        return "n/a"
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(f):
        return "n/a"
    text = f"{f:.{digits}f}"
    return f"{text} {unit}".rstrip()


def _interval(iv: Any, unit: str, digits: int = 1) -> str:
    if iv is None or iv.value is None:
        return "n/a"
    return f"{iv.value:.{digits}f} {unit}  (90 %: {iv.low:.{digits}f} to {iv.high:.{digits}f})"


def verdict_panel(verdict: Any, *, big: bool = False) -> Panel:
    """The PASS / FAIL / ERROR verdict with its reasons."""
    status = str(verdict.status)
    style = {"PASS": PASS_STYLE, "FAIL": FAIL_STYLE}.get(status, ERROR_STYLE)
    word = "   ".join(status) if big else status
    title = Text(f"  {word}  ", style=style, justify="center")
    lines: list[Any] = [title]
    for reason in verdict.reasons:
        lines.append(Text(f"- {reason}"))
    return Panel(Group(*lines), border_style=style.split()[-1], padding=(1 if big else 0, 2))


def analysis_renderable(analysis: Any, *, written: dict[str, Path] | None = None) -> Group:
    """Build the summary of one analysis as a rich renderable."""
    s = analysis.summary
    src = analysis.source
    det = analysis.detection
    head = Text()
    head.append(Path(src.path).name if src.path else "(stream)", style=f"bold {ACCENT}")
    head.append(
        f"   {fmt(src.duration_s, 's', 1)} at {src.sample_rate_hz} Hz, "
        f"{channel_label(src.channel_used, src.channels)}   {len(det.clicks)} clicks, "
        f"{s.get('cycles') or 0} cycles"
    )
    if det.clicks:  # with no click there is nothing to count per cycle
        head.append(f", {det.clicks_per_cycle} click(s) per cycle")
    if det.rejected:
        head.append(f", {det.rejected} other transients ignored", style="dim")

    run = Table.grid(padding=(0, 2))
    run.add_column(style="dim")
    run.add_column(justify="right")
    run.add_column(style="dim")
    run.add_column(justify="right")
    run.add_row("first pop", fmt(s.get("first_click_s"), "s"),
                "steady from", fmt(s.get("steady_start_s"), "s"))
    run.add_row("last pop", fmt(s.get("last_click_s"), "s"),
                "steady until", fmt(s.get("steady_end_s"), "s"))
    run.add_row("running", fmt(s.get("run_s"), "s", 1),
                "time to steady", fmt(s.get("time_to_steady_s"), "s", 1))
    run.add_row("stalls", str(s.get("stalls") if s.get("stalls") is not None else "n/a"),
                "ignition delay", fmt(s.get("ignition_delay_s"), "s", 1))

    eng = Table.grid(padding=(0, 2))
    eng.add_column(style="dim")
    eng.add_column(justify="right", style=f"bold {BRASS}")
    eng.add_row("steady rate", f"{fmt(s.get('steady_rate_hz'), 'Hz', 2)}"
                f"  (IQR {fmt(s.get('steady_rate_iqr_hz'), 'Hz', 2)})")
    eng.add_row("jitter", fmt(s.get("jitter_pct"), "%", 2))
    eng.add_row("drift", fmt(s.get("drift_pct_per_min"), "%/min", 2))
    eng.add_row("diaphragm ring", fmt(s.get("ring_hz"), "Hz", 0))
    if analysis.stiffness is not None:
        st = analysis.stiffness
        eng.add_row("diaphragm stiffness", _interval(st.stiffness_kpa_per_ml, "kPa/mL"))
        eng.add_row("equivalent thickness", _interval(st.thickness_mm, "mm", 3))
        eng.add_row("method", str(st.method or "refused"))

    parts: list[Any] = [head, Panel(run, title="run", title_align="left", border_style=ACCENT),
                        Panel(eng, title="engine", title_align="left", border_style=BRASS)]
    if analysis.verdict is not None:
        parts.append(verdict_panel(analysis.verdict))
    if analysis.warnings:
        warn = Text()
        for w in analysis.warnings:
            warn.append(f"! {w}\n", style="yellow")
        parts.append(warn)
    if written:
        for key, path in written.items():
            parts.append(Text(f"{key}: {path}", style="dim"))
    return Group(*parts)


def print_analysis(analysis: Any, *, written: dict[str, Path] | None = None,
                   console: Console | None = None) -> None:
    """Print the summary of one analysis."""
    console = console or Console()
    console.print(analysis_renderable(analysis, written=written))


def print_safety(console: Console | None = None) -> None:
    """Print the one-line safety caution."""
    (console or Console()).print(Text(SAFETY_LINE, style="italic yellow"))
