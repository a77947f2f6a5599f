"""The live terminal view of ``popmeter listen`` (rich), and the device list.

Laid out to be read from a step away while the boat runs: a status line (time,
phase, clicks), an input level bar with clipping / too-quiet warnings, the
current cycle rate with a sparkline of the last cycles, and the health of the
capture (stalls, input overflows, dropped frames, queue fill). The view pulls
a :class:`popmeter.capture.LiveState` snapshot a few times per second; the
renderable is rebuilt only then, so the view costs little CPU.

Without a live view (``--no-view``) :class:`LiveDisplay` prints one plain
progress line every few seconds instead, which suits logs and scripts.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from pathlib import Path
from typing import Any, Self

import numpy as np
from rich.align import Align
from rich.console import Console, Group
from rich.live import Live
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from popmeter.safety import SAFETY_LINE

#: Our own palette for the live view: deep water blue, brass, signal colours.
FRAME_STYLE = "deep_sky_blue3"
BRASS = "dark_goldenrod"
WARN_STYLE = "bold yellow"
ALARM_STYLE = "bold white on red3"

#: Redraws per second of the live view (a few are enough to follow a run).
REFRESH_PER_S = 4

#: Wall seconds between progress lines without the live view.
PLAIN_EVERY_S = 5.0


_SPARKS = "▁▂▃▄▅▆▇█"

#: Level bar range (dBFS).
METER_FLOOR_DBFS = -80.0


def sparkline(values: Sequence[float], *, width: int = 40, min_span: float = 0.1) -> str:
    """The last ``width`` values as a one-line bar chart.

    Scaled to their own range, but never to less than ``min_span`` times their
    median (default 10 %), so the jitter of a steady engine does not fill the
    chart from top to bottom.
    """
    vals = [v for v in values[-width:] if v is not None and math.isfinite(v)]
    if not vals:
        return ""
    lo, hi = min(vals), max(vals)
    span = min_span * abs(float(np.median(vals)))
    if hi - lo < span:  # widen around the middle of the range: every value stays inside
        mid = 0.5 * (lo + hi)
        lo, hi = mid - 0.5 * span, mid + 0.5 * span
    if hi - lo < 1e-9:
        return _SPARKS[3] * len(vals)
    scale = (len(_SPARKS) - 1) / (hi - lo)
    top = len(_SPARKS) - 1
    return "".join(_SPARKS[min(top, max(0, round((v - lo) * scale)))] for v in vals)


def level_bar(dbfs: float, *, width: int = 30) -> Text:
    """A horizontal level meter from :data:`METER_FLOOR_DBFS` to 0 dBFS."""
    if not math.isfinite(dbfs):
        frac = 0.0
    else:
        frac = min(1.0, max(0.0, (dbfs - METER_FLOOR_DBFS) / -METER_FLOOR_DBFS))
    n = round(frac * width)
    style = "green3" if dbfs < -12 else ("yellow" if dbfs < -1 else "red3")
    bar = Text("█" * n, style=style)
    bar.append("·" * (width - n), style="grey37")
    return bar


def _db(value: float) -> str:
    return f"{value:6.1f} dBFS" if math.isfinite(value) else "  -inf dBFS"


def render(state: Any) -> Panel:
    """The live view of one :class:`popmeter.capture.LiveState`."""
    head = Text()
    minutes, seconds = divmod(state.elapsed_s, 60.0)
    head.append(f"{int(minutes):02d}:{seconds:05.2f}", style="bold")
    limit = f" / {state.max_seconds:g} s" if state.max_seconds else ""
    head.append(f" audio{limit}   ")
    head.append("phase ", style="dim")
    head.append(f"{state.phase}", style=f"bold {BRASS}")
    head.append("   clicks ", style="dim")
    head.append(f"{state.clicks}", style="bold")

    grid = Table.grid(padding=(0, 1))
    grid.add_column(style="dim", justify="right")
    grid.add_column()

    level = Text()
    level.append_text(level_bar(state.peak_dbfs))
    level.append(f"  peak {_db(state.peak_dbfs)}  rms {_db(state.rms_dbfs)}")
    grid.add_row("input", level)
    alerts = Text()
    if state.clipping_now:
        alerts.append(" CLIPPING: lower the gain or move the microphone back ", style=ALARM_STYLE)
    elif state.too_quiet:
        alerts.append(" too quiet: is the microphone on and close to the boat? ", style=WARN_STYLE)
    if state.clipped_blocks:
        alerts.append(f"  clipped blocks so far: {state.clipped_blocks}", style="yellow")
    if alerts.plain:
        grid.add_row("", alerts)

    rate = Text()
    if state.rate_hz is not None:
        rate.append(f"{state.rate_hz:6.2f} Hz ", style=f"bold {BRASS}")
    else:
        rate.append("   -- Hz ", style="dim")
    rate.append(sparkline(state.rate_trace_hz, width=32), style=BRASS)
    if getattr(state, "clicks_per_cycle", 1) == 2:
        rate.append("  (2 clicks/cycle)", style="dim")
    grid.add_row("cycle rate", rate)

    if state.last_click_s is not None:
        since = state.analysed_s - state.last_click_s
        run = Text(f"first click {state.first_click_s:.2f} s, last {state.last_click_s:.2f} s "
                   f"({since:.1f} s ago)")
        if state.silence_stop_s:
            run.append(f"; ends after {state.silence_stop_s:g} s silent", style="dim")
        grid.add_row("run", run)
    else:
        grid.add_row("run", Text("waiting for the first click…", style="dim"))

    health = Text(f"stalls {state.stalls}   overflows {state.overflows}   ")
    if state.dropped_frames:
        health.append(f"dropped {state.dropped_frames} frames (filled with silence)   ",
                      style=WARN_STYLE)
    health.append(f"queue {100 * state.queue_fill:.0f} %   saved {state.written_s:.1f} s",
                  style="dim")
    grid.add_row("capture", health)
    for fault in state.faults:
        grid.add_row("fault", Text(fault, style="bold red"))

    footer = Text("Ctrl-C ends the capture; the recording is kept and analysed.", style="dim")
    return Panel(Group(head, grid, footer), title="popmeter listen", border_style=FRAME_STYLE,
                 expand=False)


def plain_line(state: Any) -> str:
    """One progress line without the live view."""
    rate = f"{state.rate_hz:.2f} Hz" if state.rate_hz is not None else "--"
    extra = []
    if state.overflows:
        extra.append(f"overflows {state.overflows}")
    if state.dropped_frames:
        extra.append(f"dropped {state.dropped_frames} frames")
    if state.clipping_now:
        extra.append("CLIPPING")
    elif state.too_quiet:
        extra.append("too quiet")
    tail = ("  " + ", ".join(extra)) if extra else ""
    return (f"{state.elapsed_s:7.1f} s  clicks {state.clicks:5d}  rate {rate:>9}  "
            f"phase {state.phase:<8} peak {_db(state.peak_dbfs).strip()}{tail}")


class LiveDisplay:
    """Shows the live state while the capture runs.

    ``snapshot`` returns a LiveState. With ``live=True`` a rich ``Live`` view
    redraws :data:`REFRESH_PER_S` times per second from its own thread;
    otherwise :meth:`tick` prints a plain line every :data:`PLAIN_EVERY_S`
    seconds. Call :meth:`tick` from the waiting loop in both cases. A failure
    while drawing never reaches the capture: the view shows one line with
    the error instead, and the recording goes on.
    """

    def __init__(self, snapshot: Callable[[], Any], *, console: Console | None = None,
                 live: bool = True, clock: Callable[[], float] | None = None):
        import time

        self.snapshot = snapshot
        self.console = console or Console()
        self.live = live and self.console.is_terminal
        self._clock = clock or time.monotonic
        self._next_plain = 0.0
        self._live: Live | None = None

    def __enter__(self) -> Self:
        if self.live:
            self._live = Live(get_renderable=self.renderable,
                              console=self.console, refresh_per_second=REFRESH_PER_S,
                              transient=False, redirect_stdout=False, redirect_stderr=False)
            self._live.__enter__()
        return self

    def renderable(self) -> Any:
        """The live view of the current snapshot (or the error that prevented it)."""
        try:
            return render(self.snapshot())
        except Exception as exc:  # noqa: BLE001 - the view must not stop the capture
            return Text(f"live view failed ({type(exc).__name__}: {exc}); recording continues",
                        style=WARN_STYLE)

    def tick(self) -> None:
        if self._live is not None:
            return
        now = self._clock()
        if now >= self._next_plain:
            self._next_plain = now + PLAIN_EVERY_S
            try:
                line = plain_line(self.snapshot())
            except Exception as exc:  # noqa: BLE001 - the view must not stop the capture
                line = f"progress line failed ({type(exc).__name__}: {exc}); recording continues"
            self.console.print(line, highlight=False)

    def __exit__(self, *exc: object) -> None:
        if self._live is not None:
            self._live.refresh()
            self._live.__exit__(*exc)
            self._live = None


def print_start(console: Console, *, device: Any, sample_rate_hz: int, out: Path,
                max_seconds: float | None, silence_stop_s: float | None) -> None:
    """The start screen: the caution line, the device and where the recording goes."""
    console.print(Text(SAFETY_LINE, style="bold yellow"))
    ends = []
    if silence_stop_s:
        ends.append(f"{silence_stop_s:g} s without a click after the run")
    if max_seconds:
        ends.append(f"{max_seconds:g} s of audio")
    ends.append("Ctrl-C")
    console.print(f"Listening on input {device.index} ({device.name}) at {sample_rate_hz} Hz; "
                  f"saving to {out}. Ends at: {', '.join(ends)}.", highlight=False)


def print_capture_end(console: Console, result: Any, *, out: Path) -> None:
    """One line on how the capture ended, and one per fault."""
    saved = result.frames_written / result.sample_rate_hz
    line = f"Capture ended ({result.stop_reason or 'stream closed'}); saved {saved:.2f} s to {out}"
    if result.overflows or result.dropped_frames:
        line += (f"; input overflows {result.overflows}, dropped frames {result.dropped_frames}"
                 " (filled with silence)")
    console.print(line, highlight=False)
    for fault in result.faults:
        console.print(Text(f"fault: {fault}", style="bold red"))


# Block letters (5 rows) for the verdict, drawn with full blocks; our own glyphs.
_GLYPHS = {
    "P": ["████ ", "█   █", "████ ", "█    ", "█    "],
    "A": [" ███ ", "█   █", "█████", "█   █", "█   █"],
    "S": [" ████", "█    ", " ███ ", "    █", "████ "],
    "F": ["█████", "█    ", "████ ", "█    ", "█    "],
    "I": ["█████", "  █  ", "  █  ", "  █  ", "█████"],
    "L": ["█    ", "█    ", "█    ", "█    ", "█████"],
    "E": ["█████", "█    ", "████ ", "█    ", "█████"],
    "R": ["████ ", "█   █", "████ ", "█  █ ", "█   █"],
    "O": [" ███ ", "█   █", "█   █", "█   █", " ███ "],
}


def big_text(word: str) -> str:
    """``word`` in 5-row block letters (letters of PASS, FAIL, ERROR)."""
    rows = ["", "", "", "", ""]
    for ch in word.upper():
        glyph = _GLYPHS.get(ch, ["     "] * 5)
        for i in range(5):
            rows[i] += glyph[i] + "  "
    return "\n".join(r[:-2] for r in rows)  # equal widths: the rows stay aligned when centred


def print_big_verdict(console: Console, status: str, reasons: Iterable[str]) -> None:
    """The verdict in letters big enough to read from a step away, with its reasons."""
    style = {"PASS": "bold green3", "FAIL": "bold red3"}.get(status, "bold orange1")
    body: list[Any] = [Align.center(Text(big_text(status), style=style, no_wrap=True))]
    for reason in reasons:
        body.append(Text(f"• {reason}"))
    console.print(Panel(Group(*body), title="verdict", border_style=style, expand=False))


def print_devices(devices: Sequence[Any], console: Console | None = None) -> None:
    """Table of input devices (``popmeter devices``), the default marked with ``*``."""
    console = console or Console()
    if not devices:
        console.print("No audio input device found. Plug in a microphone or audio interface "
                      "(and check that PortAudio sees it).")
        return
    table = Table(title="audio inputs", title_style=f"bold {FRAME_STYLE}")
    table.add_column("", width=1)
    table.add_column("index", justify="right")
    table.add_column("name")
    table.add_column("channels", justify="right")
    table.add_column("default rate", justify="right")
    table.add_column("host API")
    for d in devices:
        table.add_row("*" if d.is_default else "", str(d.index), d.name,
                      str(d.max_input_channels), f"{d.default_samplerate_hz:g} Hz",
                      getattr(d, "hostapi", ""))
    console.print(table)
    console.print("* default input; `popmeter listen --device INDEX` picks another.", style="dim")
