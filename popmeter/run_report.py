"""The one-run report: a self-contained HTML page plus PNG figures.

:func:`write_run_report` writes ``index.html`` and its figures into a folder.
The page has no external assets (inline CSS, no scripts, images are local
PNG files beside it) and opens offline. Figures are drawn with matplotlib's
Agg renderer (no display needed).

Audio is read only in bounded pieces: the overview waveform is a min/max
envelope built block by block from :func:`popmeter.audio_io.open_stream`, and
the detail, the click spectrum and the click marks use short segments read
with :func:`popmeter.audio_io.read_segment`. A two-hour recording is never
loaded whole.
"""

from __future__ import annotations

import html
import itertools
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from popmeter.errors import PopmeterError
from popmeter.safety import SAFETY_NOTE
from popmeter.terminal import channel_label

__all__ = ["PHASE_COLOURS", "SUMMARY_LABELS", "metric_axis_label", "typical_click_spectrum",
           "write_run_report"]

#: One colour per phase, used in every figure and in the phase strip.
PHASE_COLOURS: dict[str, str] = {
    "heating": "#e3a72f",
    "startup": "#4f9fcf",
    "steady": "#2f9e74",
    "fade": "#a173b8",
    "after": "#a5a29a",
}
_INK = "#22303c"
_PAPER = "#fbf8f1"
_STALL = "#d1495b"
_KIND_COLOURS = ("#22303c", "#e07a2f")
_KIND_NAMES = ("main click", "second click")

#: Overview envelope resolution (columns across the figure).
_ENVELOPE_COLUMNS = 2400
#: At most this many clicks are averaged for the typical-click spectrum.
_SPECTRUM_CLICKS = 24

_SUMMARY_ROWS: tuple[tuple[str, str, str], ...] = (
    ("first_click_s", "first click", "s"),
    ("last_click_s", "last click", "s"),
    ("run_s", "run length (first to last click)", "s"),
    ("ignition_delay_s", "ignition to first click", "s"),
    ("time_to_steady_s", "first click to steady running", "s"),
    ("steady_start_s", "steady running from", "s"),
    ("steady_end_s", "steady running until", "s"),
    ("steady_rate_hz", "steady cycle rate (median)", "Hz"),
    ("steady_rate_iqr_hz", "steady rate spread (IQR)", "Hz"),
    ("steady_rate_sem_hz", "steady rate standard error", "Hz"),
    ("jitter_pct", "cycle-to-cycle jitter", "%"),
    ("drift_pct_per_min", "rate drift in steady running", "%/min"),
    ("cycles", "cycles", ""),
    ("stalls", "stalls", ""),
    ("ring_hz", "diaphragm ring", "Hz"),
    ("diaphragm_stiffness_kpa_per_ml", "diaphragm stiffness", "kPa/mL"),
)


#: Readable label and unit of each summary metric, for figures and tables
#: elsewhere (the batch and history charts).
SUMMARY_LABELS: dict[str, tuple[str, str]] = {key: (label, unit) for key, label, unit in _SUMMARY_ROWS}


def metric_axis_label(metric: str) -> str:
    """Axis label of a summary metric in words with its unit, e.g.
    ``steady cycle rate, median (Hz)``; an unknown key is returned as it is."""
    if metric not in SUMMARY_LABELS:
        return metric
    label, unit = SUMMARY_LABELS[metric]
    if label.endswith(")") and " (" in label:  # "rate (median)" -> "rate, median"
        label = label[:-1].replace(" (", ", ", 1)
    return f"{label} ({unit})" if unit else label


def write_run_report(analysis: Any, out_dir: Path, *, audio_path: Path | None = None) -> Path:
    """Write the HTML report of one analysed run, with its figures.

    Parameters
    ----------
    analysis : popmeter.analysis.Analysis
        Uses ``source``, ``detection``, ``timeline``, ``stiffness``,
        ``verdict``, ``warnings`` and ``profile_name``.
    out_dir : Path
        Folder to write into (created if needed). Files: ``index.html``,
        ``rate.png``, ``levels.png`` and, when the audio can be read,
        ``waveform.png``, ``detail.png``, ``click_spectrum.png``; with a
        stiffness estimate also ``stiffness.png``.
    audio_path : Path or None
        The recording, for the waveform and spectrum figures. Default None:
        ``analysis.source.path``. When neither can be read the report says so
        instead of drawing those figures.

    Returns
    -------
    Path
        The path of ``index.html``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    src = analysis.source
    tl = analysis.timeline
    det = analysis.detection
    if audio_path is None and src.path is not None:
        audio_path = Path(src.path)
    notes: list[str] = []

    figures: list[tuple[str, str, str]] = []  # (file, title, caption)
    _rate_figure(tl, src.duration_s, out / "rate.png")
    figures.append(
        (
            "rate.png",
            "Cycle rate",
            (
                "Each dot is one cycle (hollow: its click was missed and filled in); the line is "
                "the smoothed rate. Bands show the phases, red hatching the stalls."
            ),
        )
    )
    _levels_figure(det.clicks, tl, src.duration_s, out / "levels.png")
    figures.append(("levels.png", "Click level", "Peak level of every click, by kind."))

    audio_ok = audio_path is not None and Path(audio_path).exists()
    if not audio_ok:
        notes.append("the recording was not available: no waveform or spectrum figures")
    else:
        try:
            _overview_figure(Path(audio_path), src, tl, det.clicks, out / "waveform.png")
            figures.insert(
                0,
                (
                    "waveform.png",
                    "Whole recording",
                    (
                        "Waveform envelope (min/max per column) with each main click marked on "
                        "the strip above it."
                    ),
                ),
            )
            if _detail_figure(Path(audio_path), src, tl, det.clicks, out / "detail.png"):
                figures.insert(
                    1,
                    (
                        "detail.png",
                        "A few cycles up close",
                        (
                            "A few cycles of steady running (or of the run's middle). Click the "
                            "image to open it at full size."
                        ),
                    ),
                )
            ring = tl.summary.get("ring_hz")
            if ring is None:
                ring = det.ring_hz
            if _spectrum_figure(Path(audio_path), src, tl, ring, out / "click_spectrum.png"):
                figures.append(
                    (
                        "click_spectrum.png",
                        "Spectrum of the typical click",
                        (
                            "Power spectrum averaged over up to "
                            f"{_SPECTRUM_CLICKS} main clicks; the ring peak is marked."
                        ),
                    )
                )
        except (PopmeterError, OSError, RuntimeError, ValueError) as exc:
            notes.append(f"the recording could not be read for the figures: {exc}")

    if analysis.stiffness is not None:
        _stiffness_figure(analysis.stiffness, out / "stiffness.png")

    page = _page(analysis, figures, notes)
    index = out / "index.html"
    index.write_text(page, encoding="utf-8")
    return index


# --------------------------------------------------------------------------- figures


def _new_figure(width_in: float = 10.0, height_in: float = 3.2) -> Figure:
    fig = Figure(figsize=(width_in, height_in), dpi=110, facecolor=_PAPER)
    return fig


def _style(ax: Any) -> None:
    ax.set_facecolor("white")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(_INK)
    ax.tick_params(colors=_INK, labelsize=8)
    ax.grid(True, color="#e6e1d6", linewidth=0.6)
    ax.set_axisbelow(True)


def _shade_phases(ax: Any, phases: Sequence[Any], *, alpha: float = 0.16) -> None:
    for p in phases:
        ax.axvspan(
            p.start_s, p.end_s, color=PHASE_COLOURS.get(p.name, "#cccccc"), alpha=alpha, linewidth=0
        )


def _label_phases(ax: Any, phases: Sequence[Any], duration_s: float) -> None:
    """Write each phase's name at the top of its band (wide enough bands only),
    so that the figure reads without the page around it."""
    for p in phases:
        if duration_s > 0 and (p.end_s - p.start_s) / duration_s >= 0.05:
            ax.text(0.5 * (p.start_s + p.end_s), 0.97, p.name, transform=ax.get_xaxis_transform(),
                    ha="center", va="top", fontsize=7, color=_INK, alpha=0.75)


def _save(fig: Figure, path: Path) -> None:
    fig.savefig(path, format="png", facecolor=fig.get_facecolor())


def _rate_figure(tl: Any, duration_s: float, path: Path) -> None:
    fig = _new_figure(10.0, 3.6)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    _shade_phases(ax, tl.phases)
    for i, st in enumerate(tl.stalls):
        ax.axvspan(
            st.start_s, st.end_s, facecolor="none", edgecolor=_STALL, hatch="////", linewidth=0.8,
            label=f"stall ({len(tl.stalls)})" if i == 0 else None,
        )
    if tl.cycles:
        t = np.array([c.start_s for c in tl.cycles])
        r = np.array([c.rate_hz for c in tl.cycles])
        m = np.array([c.missed_clicks > 0 for c in tl.cycles])
        ax.scatter(t[~m], r[~m], s=5, color=_INK, alpha=0.45, linewidths=0, label="cycle")
        if m.any():
            ax.scatter(
                t[m],
                r[m],
                s=16,
                facecolors="none",
                edgecolors=_STALL,
                linewidths=0.8,
                label="missed click filled in",
            )
        ts, rs = tl.smoothed_rate
        if len(ts):
            ax.plot(ts, rs, color=PHASE_COLOURS["steady"], linewidth=1.6, label="smoothed")
        steady = tl.summary.get("steady_rate_hz")
        if steady is not None:
            ax.axhline(steady, color=_INK, linestyle=(0, (4, 3)), linewidth=0.8,
                       label=f"steady rate {steady:.2f} Hz")
        top = float(np.percentile(r, 99.5)) * 1.15
        ax.set_ylim(0, max(top, 1.0))
        ax.legend(loc="lower center", fontsize=7, frameon=False, ncol=5)
    else:
        ax.text(0.5, 0.5, "no cycles", transform=ax.transAxes, ha="center", color=_INK)
    _label_phases(ax, tl.phases, duration_s)
    ax.set_xlim(0, duration_s)
    ax.set_xlabel("time in recording (s)", color=_INK, fontsize=9)
    ax.set_ylabel("cycle rate (Hz)", color=_INK, fontsize=9)
    fig.tight_layout()
    _save(fig, path)


def _levels_figure(clicks: Sequence[Any], tl: Any, duration_s: float, path: Path) -> None:
    fig = _new_figure(10.0, 2.8)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    _shade_phases(ax, tl.phases, alpha=0.10)
    drawn = False
    for kind in (0, 1):
        pts = [(c.time_s, c.level_dbfs) for c in clicks if int(c.kind) == kind]
        if not pts:
            continue
        x, y = np.array(pts).T
        ax.scatter(
            x,
            y,
            s=7 if kind == 0 else 9,
            marker="o" if kind == 0 else "^",
            color=_KIND_COLOURS[kind],
            alpha=0.6,
            linewidths=0,
            label=_KIND_NAMES[kind],
        )
        drawn = True
    if drawn:
        ax.legend(loc="lower center", fontsize=7, frameon=False, ncol=2)
    else:
        ax.text(0.5, 0.5, "no clicks", transform=ax.transAxes, ha="center", color=_INK)
    ax.set_xlabel("time in recording (s)", color=_INK, fontsize=9)
    ax.set_ylabel("click peak (dBFS)", color=_INK, fontsize=9)
    ax.set_xlim(0, duration_s)
    fig.tight_layout()
    _save(fig, path)


def _envelope(path: Path, channel: int, duration_s: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Min and max per column over the whole file, read block by block."""
    from popmeter.audio_io import open_stream

    with open_stream(path, channel=channel) as stream:
        rate = float(stream.info.sample_rate_hz)
        frames = int(stream.info.frames or round(duration_s * rate))
        per_col = max(1, math.ceil(frames / _ENVELOPE_COLUMNS))
        lo: list[float] = []
        hi: list[float] = []
        carry = np.zeros(0, np.float32)
        for block in stream:
            x = np.concatenate((carry, np.asarray(block, np.float32)))
            whole = (x.size // per_col) * per_col
            if whole:
                cols = x[:whole].reshape(-1, per_col)
                lo.extend(cols.min(axis=1).tolist())
                hi.extend(cols.max(axis=1).tolist())
            carry = x[whole:]
        if carry.size:
            lo.append(float(carry.min()))
            hi.append(float(carry.max()))
    return np.array(lo), np.array(hi), per_col / rate


def _overview_figure(audio: Path, src: Any, tl: Any, clicks: Sequence[Any], path: Path) -> None:
    lo, hi, col_s = _envelope(audio, src.channel_used, src.duration_s)
    t = (np.arange(lo.size) + 0.5) * col_s
    fig = _new_figure(10.0, 3.0)
    gs = fig.add_gridspec(2, 1, height_ratios=(1, 6), hspace=0.05)
    strip = fig.add_subplot(gs[0])
    ax = fig.add_subplot(gs[1], sharex=strip)
    _style(ax)
    _shade_phases(ax, tl.phases, alpha=0.12)
    ax.fill_between(t, lo, hi, color=_INK, linewidth=0, step="mid")
    main = [c.time_s for c in clicks if int(c.kind) == 0]
    second = [c.time_s for c in clicks if int(c.kind) != 0]
    strip.eventplot(
        [main], lineoffsets=0.65, linelengths=0.6, colors=_KIND_COLOURS[0], linewidths=0.4
    )
    if second:
        strip.eventplot(
            [second], lineoffsets=0.2, linelengths=0.3, colors=_KIND_COLOURS[1], linewidths=0.4
        )
    strip.set_ylim(0, 1)
    strip.axis("off")
    ax.set_xlim(0, src.duration_s)
    peak = float(max(np.max(np.abs(lo)) if lo.size else 0, np.max(np.abs(hi)) if hi.size else 0))
    ax.set_ylim(-1.05 * max(peak, 1e-6), 1.05 * max(peak, 1e-6))
    ax.set_xlabel("time in recording (s)", color=_INK, fontsize=9)
    ax.set_ylabel("amplitude (full scale)", color=_INK, fontsize=9)
    fig.subplots_adjust(left=0.08, right=0.98, top=0.97, bottom=0.16)
    _save(fig, path)


def _detail_window(tl: Any) -> tuple[float, float] | None:
    """About four cycles from the middle of steady running (else of the run)."""
    t = np.asarray(tl.main_click_times_s, float)
    if t.size < 2:
        return None
    s0, s1 = tl.summary.get("steady_start_s"), tl.summary.get("steady_end_s")
    if s0 is not None and s1 is not None:
        inside = t[(t >= s0) & (t <= s1)]
        if inside.size >= 2:
            t = inside
    mid = t.size // 2
    a = max(0, mid - 2)
    b = min(t.size - 1, a + 4)
    if b <= a:
        return None
    period = float(np.median(np.diff(t[a : b + 1])))
    return max(0.0, float(t[a]) - 0.25 * period), float(t[b]) + 0.25 * period


def _detail_figure(audio: Path, src: Any, tl: Any, clicks: Sequence[Any], path: Path) -> bool:
    from popmeter.audio_io import read_segment

    win = _detail_window(tl)
    if win is None:
        return False
    start_s, stop_s = win
    stop_s = min(stop_s, src.duration_s)
    x = read_segment(audio, start_s=start_s, stop_s=stop_s, channel=src.channel_used)
    if x.size == 0:
        return False
    t = start_s + np.arange(x.size) / float(src.sample_rate_hz)
    fig = _new_figure(10.0, 3.2)
    fig.set_dpi(150)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    ax.plot(t, x, color=_INK, linewidth=0.5)
    peak = float(np.max(np.abs(x))) or 1e-6
    for c in clicks:
        if start_s <= c.time_s <= stop_s:
            k = int(c.kind)
            ax.axvline(
                c.time_s,
                color=_KIND_COLOURS[min(k, 1)],
                linewidth=1.0,
                alpha=0.8,
                linestyle="-" if k == 0 else "--",
            )
    main = [c.time_s for c in clicks if int(c.kind) == 0 and start_s <= c.time_s <= stop_s]
    for a, b in itertools.pairwise(main):
        ax.annotate(
            "",
            xy=(b, 1.12 * peak),
            xytext=(a, 1.12 * peak),
            arrowprops={"arrowstyle": "<->", "color": PHASE_COLOURS["steady"], "linewidth": 0.8},
        )
        ax.text(
            0.5 * (a + b),
            1.16 * peak,
            f"{1000 * (b - a):.1f} ms",
            ha="center",
            va="bottom",
            fontsize=7,
            color=PHASE_COLOURS["steady"],
        )
    ax.set_ylim(-1.1 * peak, 1.3 * peak)
    ax.set_xlim(start_s, stop_s)
    ax.set_xlabel("time in recording (s)", color=_INK, fontsize=9)
    ax.set_ylabel("amplitude (full scale)", color=_INK, fontsize=9)
    fig.tight_layout()
    _save(fig, path)
    return True


def typical_click_spectrum(
    audio_path: Path,
    click_times_s: np.ndarray,
    *,
    sample_rate_hz: float,
    duration_s: float,
    channel: int,
    length_s: float,
) -> tuple[np.ndarray, np.ndarray, int]:
    """Average power spectrum of the clicks at ``click_times_s``.

    Each click is read from 1 ms before its time for ``length_s`` seconds
    (:func:`popmeter.audio_io.read_segment`, so only these pieces are read),
    tapered with a Tukey window (25 % cosine taper), zero-padded to at least
    four times its length and transformed; the power spectra are averaged
    (Welch's averaging of modified periodograms, IEEE Trans. Audio
    Electroacoust. 15, 70, 1967, with one segment per click).

    Returns
    -------
    freq_hz, power_db, used
        Frequencies (Hz), power in dB relative to the highest bin above 0 Hz,
        and the number of clicks averaged (0: nothing could be read, arrays
        empty).
    """
    from scipy.signal.windows import tukey

    from popmeter.audio_io import read_segment

    fs = float(sample_rate_hz)
    n = max(16, round(length_s * fs))
    nfft = 1 << math.ceil(math.log2(4 * n))
    win = tukey(n, 0.25)
    acc = np.zeros(nfft // 2 + 1)
    used = 0
    for tc in np.asarray(click_times_s, float):
        start = max(0.0, float(tc) - 0.001)
        stop = min(start + n / fs, duration_s)
        if stop <= start:
            continue
        x = read_segment(audio_path, start_s=start, stop_s=stop, channel=channel)
        if x.size < n // 2:
            continue
        seg = np.zeros(n)
        seg[: min(n, x.size)] = x[:n]
        acc += np.abs(np.fft.rfft(seg * win, nfft)) ** 2
        used += 1
    if used == 0:
        return np.zeros(0), np.zeros(0), 0
    f = np.fft.rfftfreq(nfft, 1.0 / fs)
    db = 10 * np.log10(acc / used + 1e-30)
    db -= db[1:].max()
    return f, db, used


def _spectrum_figure(audio: Path, src: Any, tl: Any, ring_hz: float | None, path: Path) -> bool:
    t = np.asarray(tl.main_click_times_s, float)
    if t.size == 0:
        return False
    s0, s1 = tl.summary.get("steady_start_s"), tl.summary.get("steady_end_s")
    if s0 is not None and s1 is not None and np.any((t >= s0) & (t <= s1)):
        t = t[(t >= s0) & (t <= s1)]
    pick = t[np.linspace(0, t.size - 1, min(_SPECTRUM_CLICKS, t.size)).round().astype(int)]
    all_t = np.asarray(tl.main_click_times_s, float)
    period = float(np.median(np.diff(all_t))) if all_t.size > 1 else 0.1
    length_s = min(0.04, 0.8 * period)
    fs = float(src.sample_rate_hz)
    f, db, used = typical_click_spectrum(
        audio,
        pick,
        sample_rate_hz=fs,
        duration_s=src.duration_s,
        channel=src.channel_used,
        length_s=length_s,
    )
    if used == 0:
        return False
    n = round(length_s * fs)
    fig = _new_figure(10.0, 3.0)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    ax.plot(f[1:], db[1:], color=_INK, linewidth=0.9)
    if ring_hz is not None and 0 < ring_hz < fs / 2:
        k = int(np.argmin(np.abs(f - ring_hz)))
        ax.axvline(ring_hz, color=PHASE_COLOURS["heating"], linewidth=0.9, linestyle=":")
        ax.plot([ring_hz], [db[k] + 3], marker="v", markersize=8, color=PHASE_COLOURS["heating"])
        ax.annotate(
            f"ring {ring_hz:.0f} Hz",
            (ring_hz, db[k] + 3),
            xytext=(8, 2),
            textcoords="offset points",
            fontsize=8,
            color=PHASE_COLOURS["heating"],
        )
    ax.set_xscale("log")
    ax.set_xlim(max(20.0, f[1]), fs / 2)
    ax.set_ylim(max(-80.0, float(np.min(db[1:])) - 3), 8)
    ax.set_xlabel("frequency (Hz)", color=_INK, fontsize=9)
    ax.set_ylabel("power (dB re peak)", color=_INK, fontsize=9)
    ax.set_title(f"{used} clicks averaged, {1000 * n / fs:.0f} ms each", fontsize=8, color=_INK)
    fig.tight_layout()
    _save(fig, path)
    return True


def _stiffness_figure(est: Any, path: Path) -> None:
    fig = _new_figure(7.0, 3.0)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    samples = np.asarray(est.samples_kpa_per_ml, float)
    samples = samples[np.isfinite(samples)]
    if samples.size:
        lo_q, hi_q = np.percentile(samples, [0.5, 99.5])
        ax.hist(
            samples[(samples >= lo_q) & (samples <= hi_q)],
            bins=60,
            color=PHASE_COLOURS["startup"],
            alpha=0.75,
        )
    iv = est.stiffness_kpa_per_ml
    if iv is not None:
        if iv.low is not None and iv.high is not None:
            ax.axvspan(
                iv.low, iv.high, color=PHASE_COLOURS["steady"], alpha=0.15, label="90 % interval"
            )
        if iv.value is not None:
            ax.axvline(iv.value, color=PHASE_COLOURS["steady"], linewidth=1.6, label="estimate")
    nominal = est.nominal_stiffness_kpa_per_ml
    if nominal is not None:
        ax.axvline(
            nominal,
            color=PHASE_COLOURS["heating"],
            linewidth=1.4,
            linestyle=(0, (4, 2)),
            label="nominal (profile)",
        )
    ax.legend(fontsize=7, frameon=False)
    ax.set_xlabel("diaphragm stiffness (kPa/mL)", color=_INK, fontsize=9)
    ax.set_ylabel("Monte Carlo draws", color=_INK, fontsize=9)
    fig.tight_layout()
    _save(fig, path)


# --------------------------------------------------------------------------- HTML


def _e(x: Any) -> str:
    return html.escape(str(x), quote=True)


def _fmt(value: Any, unit: str) -> str:
    if value is None:
        return '<span class="none" title="not determined: see the notes">n/a</span>'
    if isinstance(value, (bool, np.bool_)):
        return _e(value)
    if isinstance(value, (int, np.integer)):
        return _e(int(value))
    try:
        v = float(value)
    except (TypeError, ValueError):
        return _e(value)
    if not math.isfinite(v):
        return '<span class="none">n/a</span>'
    digits = 3 if unit in ("s", "Hz") else 2
    if abs(v) >= 1000:
        digits = 0
    text = f"{v:.{digits}f}"
    return _e(f"{text} {unit}".strip())


_CSS = f"""
*{{box-sizing:border-box}}
body{{margin:0;background:{_PAPER};color:{_INK};font:15px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif}}
header{{padding:22px 32px 16px;border-bottom:3px solid {_INK}}}
header h1{{margin:0;font-size:22px;letter-spacing:.02em}}
header .file{{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:13px;word-break:break-all}}
main{{max-width:1120px;margin:0 auto;padding:8px 32px 40px}}
h2{{font-size:17px;margin:28px 0 8px;padding-left:10px;border-left:6px solid {PHASE_COLOURS["steady"]}}}
.strip{{display:flex;height:30px;border-radius:4px;overflow:hidden;border:1px solid {_INK}}}
.strip div{{display:flex;align-items:center;justify-content:center;font-size:11px;color:#fff;
  white-space:nowrap;overflow:hidden;text-shadow:0 0 2px rgba(0,0,0,.5)}}
.grid{{display:grid;grid-template-columns:minmax(0,1fr) minmax(0,1fr);gap:24px}}
table{{border-collapse:collapse;width:100%;background:#fff}}
td,th{{padding:4px 10px;border-bottom:1px solid #e6e1d6;text-align:left;font-size:14px}}
td.v{{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}}
.none{{color:#9a8f7c;font-style:italic}}
figure{{margin:14px 0;background:#fff;border:1px solid #e6e1d6;padding:8px}}
figure img{{width:100%;height:auto;display:block}}
figcaption{{font-size:13px;color:#5b6670;margin-top:4px}}
.badge{{display:inline-block;padding:4px 14px;border-radius:14px;font-weight:700;color:#fff;margin-left:12px}}
.PASS{{background:{PHASE_COLOURS["steady"]}}} .FAIL{{background:{_STALL}}} .ERROR{{background:#6b4f8a}}
ul.notes li{{margin:3px 0}}
.safety{{margin-top:32px;padding:12px 16px;border:2px dashed {PHASE_COLOURS["heating"]};background:#fff8e8;font-size:13px}}
"""


def _phase_strip(phases: Sequence[Any], duration_s: float) -> str:
    if duration_s <= 0 or not phases:
        return ""
    cells = []
    cursor = 0.0
    for p in phases:
        if p.start_s > cursor + 1e-9:
            gap = 100.0 * (p.start_s - cursor) / duration_s
            cells.append(f'<div style="width:{gap:.3f}%;background:#ddd"></div>')
        width = 100.0 * max(p.end_s - p.start_s, 0.0) / duration_s
        colour = PHASE_COLOURS.get(p.name, "#999999")
        label = f"{p.name} {p.end_s - p.start_s:.1f} s"
        cells.append(
            f'<div style="width:{width:.3f}%;background:{colour}" title="{_e(label)}: '
            f'{p.start_s:.2f} to {p.end_s:.2f} s">{_e(p.name) if width > 7 else ""}</div>'
        )
        cursor = max(cursor, p.end_s)
    if cursor < duration_s - 1e-9:
        gap = 100.0 * (duration_s - cursor) / duration_s
        cells.append(f'<div style="width:{gap:.3f}%;background:#ddd"></div>')
    return '<div class="strip">' + "".join(cells) + "</div>"


def _kv_table(rows: Sequence[tuple[str, str]]) -> str:
    body = "".join(f'<tr><td>{_e(k)}</td><td class="v">{v}</td></tr>' for k, v in rows)
    return f"<table>{body}</table>"


#: Row label and unit of each interval in the stiffness JSON.
_STIFFNESS_LABELS: dict[str, tuple[str, str]] = {
    "diaphragm_stiffness_kpa_per_ml": ("diaphragm stiffness", "kPa/mL"),
    "diaphragm_rigidity_mn_m": ("diaphragm rigidity D", "mN m"),
    "equivalent_thickness_mm": ("equivalent thickness", "mm"),
    "gas_volume_ml": ("effective gas volume", "mL"),
}


def _stiffness_rows(est: Any) -> list[tuple[str, str]]:
    rows: list[tuple[str, str]] = [("method", _e(est.method))]
    doc = est.to_json()
    for key, val in doc.items():
        if isinstance(val, dict) and {"value", "low", "high"} <= set(val):
            name, unit = _STIFFNESS_LABELS.get(key, (key.replace("_", " "), ""))
            if val["value"] is None:
                rows.append((name, _fmt(None, "")))
            else:
                lo = "n/a" if val["low"] is None else f"{float(val['low']):.3g}"
                hi = "n/a" if val["high"] is None else f"{float(val['high']):.3g}"
                rows.append((name, _e(f"{float(val['value']):.3g} {unit} (90 %: {lo} to {hi})")))
    nominal = est.nominal_stiffness_kpa_per_ml
    if nominal is not None:
        rows.append(("nominal from the profile", _fmt(nominal, "kPa/mL")))
    return rows


def _page(analysis: Any, figures: list[tuple[str, str, str]], notes: list[str]) -> str:
    src = analysis.source
    tl = analysis.timeline
    det = analysis.detection
    s = tl.summary
    name = Path(src.path).name if src.path else "(no file)"
    verdict = analysis.verdict
    badge = ""
    if verdict is not None:
        status = str(verdict.status)
        cls = status if status in ("PASS", "FAIL", "ERROR") else "ERROR"
        badge = f'<span class="badge {cls}">{_e(status)}</span>'

    parts: list[str] = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>popmeter run: {_e(name)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<header><h1>Run report{badge}</h1>",
        f'<div class="file">{_e(src.path if src.path else name)}</div>',
    ]
    sub = [
        f"{src.duration_s:.1f} s",
        f"{src.sample_rate_hz} Hz",
        channel_label(src.channel_used, src.channels),
        f"{len(det.clicks)} clicks",
        f"{det.clicks_per_cycle} click(s) per cycle",
    ]
    if analysis.profile_name:
        sub.append(f"boat profile: {analysis.profile_name}")
    parts.append(f"<div>{_e(' · '.join(sub))}</div></header><main>")

    parts.append("<h2>How the run went</h2>")
    parts.append(_phase_strip(tl.phases, src.duration_s))
    left = [(label, _fmt(s.get(key), unit)) for key, label, unit in _SUMMARY_ROWS[:8]]
    right = [(label, _fmt(s.get(key), unit)) for key, label, unit in _SUMMARY_ROWS[8:]]
    parts.append(
        f'<div class="grid" style="margin-top:14px">{_kv_table(left)}{_kv_table(right)}</div>'
    )

    if verdict is not None:
        parts.append("<h2>Verdict</h2>")
        parts.append(f"<p>{badge}</p>")
        reasons = list(verdict.reasons or [])
        if reasons:
            parts.append("<ul>" + "".join(f"<li>{_e(r)}</li>" for r in reasons) + "</ul>")

    for file, title, caption in figures:
        parts.append(f"<h2>{_e(title)}</h2>")
        parts.append(
            f'<figure><a href="{_e(file)}"><img src="{_e(file)}" alt="{_e(title)}"></a>'
            f"<figcaption>{_e(caption)}</figcaption></figure>"
        )

    if tl.stalls:
        parts.append("<h2>Stalls</h2>")
        parts.append(
            _kv_table(
                [
                    (
                        f"stall {i + 1}",
                        _e(f"{st.start_s:.3f} to {st.end_s:.3f} s ({st.duration_s:.2f} s)"),
                    )
                    for i, st in enumerate(tl.stalls)
                ]
            )
        )

    if analysis.stiffness is not None:
        est = analysis.stiffness
        parts.append("<h2>Diaphragm stiffness</h2>")
        parts.append(_kv_table(_stiffness_rows(est)))
        parts.append(
            '<figure><a href="stiffness.png"><img src="stiffness.png" '
            'alt="stiffness distribution"></a><figcaption>Monte Carlo draws of the stiffness '
            "given the measured rate (and ring) and the profile's tolerances; the shaded band "
            "is the 90 % interval.</figcaption></figure>"
        )

    all_notes = list(analysis.warnings) + notes
    parts.append("<h2>Notes</h2>")
    if all_notes:
        parts.append(
            '<ul class="notes">' + "".join(f"<li>{_e(w)}</li>" for w in all_notes) + "</ul>"
        )
    else:
        parts.append("<p>None.</p>")

    parts.append(f'<div class="safety"><strong>Safety.</strong> {_e(SAFETY_NOTE)}</div>')
    from popmeter import __version__

    parts.append(f'<p style="font-size:12px;color:#8a8172">popmeter {_e(__version__)}</p>')
    parts.append("</main></body></html>")
    return "\n".join(parts) + "\n"
