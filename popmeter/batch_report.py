"""Batch report (HTML + figures), terminal summaries, and the history report.

- :func:`write_batch_report`: ``index.html`` in the batch output folder,
  self-contained (figures inlined as PNG data, a few lines of inline script
  to sort the verdict table): the verdicts with links to each unit's report,
  the batch statistics, a histogram per limited metric with the spec limits
  drawn, and individuals / moving-range control charts with the Western
  Electric rule violations marked.
- :func:`print_batch_summary`: the same essentials as rich tables.
- :func:`show_history`: control charts over every unit of every stored batch
  (``popmeter history``), in the terminal and, with ``report_dir``, as PNG
  files and an HTML page.

Every serial, file name and reason is HTML-escaped; links use the sanitised
unit folder names only.
"""

from __future__ import annotations

import base64
import html
import io
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import quote

import numpy as np
from matplotlib.figure import Figure

from popmeter.errors import UsageError
from popmeter.qc_spec import SUMMARY_KEYS
from popmeter.qc_stats import IndividualsChart, individuals_chart
from popmeter.run_report import SUMMARY_LABELS, metric_axis_label
from popmeter.safety import SAFETY_NOTE

if TYPE_CHECKING:
    from popmeter.batch import BatchResult

_COLOURS = {"PASS": "#2e7d4f", "FAIL": "#b3261e", "ERROR": "#a15c00"}


def _e(value: Any) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _fmt(value: Any, digits: int = 4) -> str:
    if value is None:
        return "—"
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return str(int(value))
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not np.isfinite(f):
        return "—"
    return f"{f:.{digits}g}"


def _png_data(fig: Figure) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=96)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


# --- figures -------------------------------------------------------------------


def histogram_figure(
    values: np.ndarray, *, metric: str, lsl: float | None, usl: float | None,
    target: float | None,
) -> Figure:
    """Histogram of one metric with the spec limits (solid red) and target (dashed)."""
    fig = Figure(figsize=(6.0, 2.8))
    ax = fig.add_subplot()
    v = np.asarray(values, dtype=float)
    if v.size:
        ax.hist(v, bins="auto" if v.size > 1 else 1, color="#6b8fb3", edgecolor="white")
    for x, label in ((lsl, "min"), (usl, "max")):
        if x is not None:
            ax.axvline(x, color="#b3261e", linewidth=1.6)
            ax.annotate(label, (x, 1.0), xycoords=("data", "axes fraction"), color="#b3261e",
                        ha="center", va="bottom", fontsize=8)
    if target is not None:
        ax.axvline(target, color="#333333", linestyle="--", linewidth=1.0)
        ax.annotate("target", (target, 1.0), xycoords=("data", "axes fraction"), color="#333333",
                    ha="center", va="bottom", fontsize=8)
    ax.set_xlabel(metric_axis_label(metric))
    ax.set_ylabel("number of units")
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return fig


def control_chart_figure(
    chart: IndividualsChart,
    *,
    metric: str,
    labels: list[str] | None = None,
    boundaries: list[int] | None = None,
    lsl: float | None = None,
    usl: float | None = None,
) -> Figure:
    """Individuals chart (top) and moving-range chart (bottom).

    Centre line solid, control limits dashed, spec limits (if given) dotted
    red; points breaking a Western Electric rule are red and labelled with
    the rule number. ``boundaries``: indices where a new batch starts (grey
    vertical lines). ``labels``: per-point names for the x axis when few.
    """
    fig = Figure(figsize=(8.0, 4.6))
    ax, mx = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [2, 1]})
    x = np.arange(chart.values.size)
    ax.plot(x, chart.values, "-o", color="#35608a", markersize=3.5, linewidth=1)
    ax.axhline(chart.center, color="#333333", linewidth=1, label="centre")
    for i, y in enumerate((chart.ucl, chart.lcl)):
        ax.axhline(y, color="#8a5a00", linestyle="--", linewidth=1,
                   label="control limits (3 sigma)" if i == 0 else None)
    spec_drawn = False
    for y in (lsl, usl):
        if y is not None:
            ax.axhline(y, color="#b3261e", linestyle=":", linewidth=1.2,
                       label=None if spec_drawn else "spec limits")
            spec_drawn = True
    flagged: dict[int, list[str]] = {}
    for viol in chart.violations:
        if viol.chart == "X":
            flagged.setdefault(viol.index, []).append(str(viol.rule))
    for i, rules in flagged.items():
        ax.plot(i, chart.values[i], "o", color="#b3261e", markersize=6)
        ax.annotate(",".join(sorted(set(rules))), (i, chart.values[i]), textcoords="offset points",
                    xytext=(0, 6), ha="center", fontsize=7, color="#b3261e")
    ax.set_ylabel(metric_axis_label(metric), fontsize=8)
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=7, frameon=False)
    ax.set_title(
        f"individuals: centre {_fmt(chart.center)}, limits {_fmt(chart.lcl)} … {_fmt(chart.ucl)}",
        fontsize=9,
    )
    mx.plot(x[1:], chart.mr, "-o", color="#35608a", markersize=3, linewidth=1)
    mx.axhline(chart.mr_mean, color="#333333", linewidth=1)
    mx.axhline(chart.mr_ucl, color="#8a5a00", linestyle="--", linewidth=1)
    for viol in chart.violations:
        if viol.chart == "MR":
            mx.plot(viol.index, chart.mr[viol.index - 1], "o", color="#b3261e", markersize=6)
    unit = SUMMARY_LABELS.get(metric, ("", ""))[1]
    mx.set_ylabel(f"moving range ({unit})" if unit else "moving range", fontsize=8)
    for b in boundaries or []:
        for axis in (ax, mx):
            axis.axvline(b - 0.5, color="#bbbbbb", linewidth=0.8)
    if labels is not None and len(labels) <= 30:
        mx.set_xticks(x, labels, rotation=60, fontsize=7, ha="right")
    else:
        mx.set_xlabel("unit (in order)")
    for axis in (ax, mx):
        axis.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return fig


# --- batch HTML ------------------------------------------------------------------

_CSS = """
body{font-family:system-ui,sans-serif;margin:1.5em auto;max-width:1100px;color:#222;padding:0 1em}
h1{font-size:1.5em;margin-bottom:.2em} h2{font-size:1.15em;margin-top:1.6em}
table{border-collapse:collapse;font-size:.88em;margin:.5em 0}
th,td{border-bottom:1px solid #ddd;padding:.25em .55em;text-align:left;vertical-align:top}
th{background:#f3f3f3} table.sortable th{cursor:pointer;user-select:none}
table.sortable th[data-dir=asc]::after{content:" ▲"} table.sortable th[data-dir=desc]::after{content:" ▼"}
td.num{text-align:right;font-variant-numeric:tabular-nums}
.PASS{color:#2e7d4f;font-weight:600}.FAIL{color:#b3261e;font-weight:600}.ERROR{color:#a15c00;font-weight:600}
.counts span{margin-right:1.2em;font-size:1.1em}
figure{margin:.6em 0} img{max-width:100%} .note{color:#555;font-size:.85em}
.bad{color:#b3261e}
"""

_SORT_JS = """
document.querySelectorAll('table.sortable').forEach(function (table) {
  table.querySelectorAll('th').forEach(function (th, col) {
    th.addEventListener('click', function () {
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      var asc = th.getAttribute('data-dir') !== 'asc';
      table.querySelectorAll('th').forEach(function (h) { h.removeAttribute('data-dir'); });
      th.setAttribute('data-dir', asc ? 'asc' : 'desc');
      function key(row) {
        var cell = row.cells[col];
        var v = cell.hasAttribute('data-v') ? cell.getAttribute('data-v') : cell.textContent.trim();
        var n = parseFloat(v);
        return (v !== '' && !isNaN(n) && isFinite(v)) ? n : v;
      }
      rows.sort(function (a, b) {
        var x = key(a), y = key(b), c;
        if (typeof x === 'number' && typeof y === 'number') { c = x - y; }
        else if (typeof x === 'number') { c = -1; } else if (typeof y === 'number') { c = 1; }
        else { c = String(x).localeCompare(String(y), undefined, {numeric: true}); }
        return asc ? c : -c;
      });
      rows.forEach(function (r) { body.appendChild(r); });
    });
  });
});
"""


def _limits_text(lsl: float | None, usl: float | None) -> str:
    if lsl is not None and usl is not None:
        return f"{_fmt(lsl)} … {_fmt(usl)}"
    if lsl is not None:
        return f"≥ {_fmt(lsl)}"
    return f"≤ {_fmt(usl)}"


def _num_cell(value: Any, *, bad: bool = False) -> str:
    cls = "num bad" if bad else "num"
    if value is None:
        return f'<td class="{cls}" data-v="">—</td>'
    return f'<td class="{cls}" data-v="{_e(repr(float(value)))}">{_e(_fmt(value))}</td>'


def batch_html(result: BatchResult) -> str:
    """The self-contained ``index.html`` of a judged batch."""
    spec = result.spec
    counts = result.counts
    limited = list(spec.limits)
    parts: list[str] = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>popmeter batch {_e(result.batch_id)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>Batch {_e(result.batch_id)}</h1>",
        (f'<p class="note">spec {_e(spec.name)} · source {_e(result.source)} · '
        f"{_e(result.created_at)} · {len(result.units)} units · {result.jobs} worker(s) · "
        f"{_fmt(result.elapsed_s, 3)} s</p>"),
        '<p class="counts">'
        + "".join(f'<span class="{k}">{k} {counts[k]}</span>' for k in ("PASS", "FAIL", "ERROR"))
        + "</p>",
    ]
    if result.problems:
        parts.append("<h2>Input problems</h2><ul>")
        parts += [f"<li>{_e(p)}</li>" for p in result.problems]
        parts.append("</ul>")

    # verdict table
    parts.append("<h2>Units</h2><p class=\"note\">Click a column heading to sort.</p>")
    head = ["#", "serial", "verdict", "reasons", *limited, "station", "operator", "file"]
    parts.append('<table class="sortable" id="units"><thead><tr>')
    parts += [f"<th>{_e(h)}</th>" for h in head]
    parts.append("</tr></thead><tbody>")
    for unit in result.units:
        failing = {c.metric for c in unit.verdict.checks if not c.ok}
        serial = _e(unit.serial)
        if unit.report:
            href = "/".join(quote(part) for part in unit.report.split("/"))
            serial = f'<a href="{_e(href)}">{serial}</a>'
        cells = [
            f'<td class="num" data-v="{unit.position}">{unit.position + 1}</td>',
            f'<td data-v="{_e(unit.serial)}">{serial}</td>',
            f'<td class="{unit.status}">{unit.status}</td>',
            f"<td>{'<br>'.join(_e(r) for r in unit.verdict.reasons)}</td>",
        ]
        for metric in limited:
            value = unit.summary.get(metric)
            cells.append(_num_cell(value, bad=metric in failing))
        cells += [f"<td>{_e(unit.station)}</td>", f"<td>{_e(unit.operator)}</td>",
                  f"<td>{_e(unit.file)}</td>"]
        parts.append("<tr>" + "".join(cells) + "</tr>")
    parts.append("</tbody></table>")

    # statistics
    parts.append("<h2>Batch statistics</h2>")
    parts.append(
        '<p class="note">Cp, Cpk: within sigma from the average moving range / d2 (units in '
        "batch order); Pp, Ppk: overall standard deviation; Cpk interval: 95 %, Bissell (1990). "
        "Yield counts units without a value as out of spec. Outliers: Tukey's fences (1.5 IQR)."
        "</p>"
    )
    stat_head = ["metric", "limits", "n", "missing", "mean", "sd", "min", "max", "yield",
                 "Cp", "Cpk", "Cpk 95 %", "Pp", "Ppk", "outliers"]
    parts.append('<table class="sortable"><thead><tr>')
    parts += [f"<th>{_e(h)}</th>" for h in stat_head]
    parts.append("</tr></thead><tbody>")
    ordered = sorted(result.units, key=lambda u: u.position)
    for metric, st in result.stats.items():
        outliers = ", ".join(ordered[i].serial for i in st.outliers)
        ci = (f"{_fmt(st.cpk_low, 3)} … {_fmt(st.cpk_high, 3)}"
              if st.cpk_low is not None else "—")
        parts.append(
            "<tr>"
            f"<td>{_e(metric)}</td><td>{_e(_limits_text(st.lsl, st.usl))}</td>"
            f'<td class="num">{st.n}</td><td class="num">{st.n_missing}</td>'
            + _num_cell(st.mean) + _num_cell(st.sd) + _num_cell(st.min) + _num_cell(st.max)
            + (f'<td class="num">{100 * st.yield_frac:.1f} %</td>'
               if st.yield_frac is not None else "<td>—</td>")
            + _num_cell(st.cp) + _num_cell(st.cpk) + f"<td>{_e(ci)}</td>"
            + _num_cell(st.pp) + _num_cell(st.ppk) + f"<td>{_e(outliers)}</td></tr>"
        )
    parts.append("</tbody></table>")

    # figures
    for metric, st in result.stats.items():
        parts.append(f"<h2>{_e(metric)}</h2>")
        values = np.array([u.summary.get(metric) for u in ordered
                           if u.summary.get(metric) is not None], dtype=float)
        values = values[np.isfinite(values)]
        if values.size == 0:
            parts.append('<p class="note">No unit has a value for this metric.</p>')
            continue
        fig = histogram_figure(values, metric=metric, lsl=st.lsl, usl=st.usl, target=st.target)
        parts.append(f'<figure><img alt="histogram of {_e(metric)}" src="{_png_data(fig)}">'
                     "<figcaption class=\"note\">Histogram; red lines: spec limits; dashed: "
                     "target.</figcaption></figure>")
        if st.chart is not None:
            labels = [u.serial for u in ordered if _finite(u.summary.get(metric))]
            fig = control_chart_figure(st.chart, metric=metric, labels=labels,
                                       lsl=st.lsl, usl=st.usl)
            parts.append(f'<figure><img alt="control chart of {_e(metric)}" '
                         f'src="{_png_data(fig)}">')
            parts.append(_violations_caption(st.chart, labels))
            parts.append("</figure>")
    parts.append(f'<p class="note">{_e(SAFETY_NOTE)}</p>')
    parts.append(f"<script>{_SORT_JS}</script></body></html>")
    return "\n".join(parts)


def _finite(value: Any) -> bool:
    if value is None or isinstance(value, bool):
        return False
    try:
        return bool(np.isfinite(float(value)))
    except (TypeError, ValueError):
        return False


def _violations_caption(chart: IndividualsChart, labels: list[str]) -> str:
    legend = ("Individuals (top) and moving-range (bottom) chart; solid: centre line; dashed: "
              "control limits (3 sigma within); dotted red: spec limits. ")
    if not chart.violations:
        return f'<figcaption class="note">{legend}No Western Electric rule broken.</figcaption>'

    items = "".join(
        f"<li>{_e(v.chart)} rule {v.rule} at {_e(labels[v.index])}: {_e(v.description)}</li>"
        for v in chart.violations
    )
    return f'<figcaption class="note">{legend}Rule violations:<ul>{items}</ul></figcaption>'


def write_batch_report(result: BatchResult, out_dir: str | os.PathLike[str]) -> Path:
    """Write ``index.html`` (self-contained) into ``out_dir``; returns its path."""
    path = Path(out_dir) / "index.html"
    path.write_text(batch_html(result), encoding="utf-8")
    return path


# --- terminal ------------------------------------------------------------------------




def print_batch_summary(result: BatchResult, *, console: Any = None, max_rows: int = 40) -> None:
    """Counts, the units that did not pass (with reasons) and the statistics, as rich tables."""
    from rich import box
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table

    con = console or Console()
    c = result.counts
    con.print(
        f"[bold]batch {escape(result.batch_id)}[/]: {len(result.units)} units  "
        f"[green]PASS {c['PASS']}[/]  [red]FAIL {c['FAIL']}[/]  [yellow]ERROR {c['ERROR']}[/]"
        f"  ({result.elapsed_s:.1f} s, {result.jobs} worker(s))"
    )
    for problem in result.problems:
        con.print(f"[yellow]note:[/] {escape(problem)}")
    bad = [u for u in result.units if u.status != "PASS"]
    if bad:
        table = Table(title="units that did not pass", title_justify="left", box=box.SIMPLE_HEAD)
        table.add_column("serial")
        table.add_column("verdict")
        table.add_column("reasons")
        for unit in bad[:max_rows]:
            style = "red" if unit.status == "FAIL" else "yellow"
            table.add_row(escape(unit.serial), f"[{style}]{unit.status}[/]",
                          escape("; ".join(unit.verdict.reasons)))
        if len(bad) > max_rows:
            table.add_row("…", "", f"{len(bad) - max_rows} more in results.csv")
        con.print(table)
    stats = Table(title="batch statistics (Cpk interval: 95 %, Bissell)", title_justify="left",
                  box=box.SIMPLE_HEAD)
    stats.add_column("metric", overflow="fold", min_width=14)
    for col in ("n", "yield", "Cpk", "Cpk 95 %", "Ppk", "mean", "sd", "outl."):
        stats.add_column(col, justify="right", no_wrap=True)
    for metric, st in result.stats.items():
        ci = f"{_fmt(st.cpk_low, 2)}…{_fmt(st.cpk_high, 2)}" if st.cpk_low is not None else "—"
        stats.add_row(
            f"{metric}\n[dim]{escape(_limits_text(st.lsl, st.usl))}[/]", str(st.n),
            f"{100 * st.yield_frac:.0f} %" if st.yield_frac is not None else "—",
            _fmt(st.cpk, 3), ci, _fmt(st.ppk, 3), _fmt(st.mean, 3), _fmt(st.sd, 3),
            str(len(st.outliers)),
        )
    con.print(stats)
    con.print(f"report: {escape(str(result.out_dir / 'index.html'))}")


# --- history ---------------------------------------------------------------------------


def show_history(
    *,
    db: str | os.PathLike[str] | None = None,
    metric: str | None = None,
    report_dir: str | os.PathLike[str] | None = None,
    console: Any = None,
) -> None:
    """Control charts over every stored unit of every batch (``popmeter history``).

    For each metric (or just ``metric``): the individuals and moving-range
    chart over all units in batch order (batches in the order they were
    first recorded), with the Western Electric zone rules flagged. Prints
    rich tables; with ``report_dir`` also writes ``<metric>.png`` per metric
    and ``index.html`` there.

    Parameters
    ----------
    db : str or path-like, optional
        History database (file path or URL, as ``popmeter batch --db``).
        Default ``history.sqlite`` in the working folder; it must exist.
    metric : str, optional
        One summary metric. Default: every metric with stored values.
    report_dir : path-like, optional
        Folder for the PNG charts and the HTML page (created).
    console : rich.console.Console, optional
        Where to print (default: standard output).

    Raises
    ------
    popmeter.history.HistoryError
        No database at ``db``, or it cannot be read.
    popmeter.errors.UsageError
        ``metric`` is not a summary metric, or has no stored values.
    """
    from rich import box
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table
    from sqlalchemy.exc import SQLAlchemyError

    from popmeter.history import History, HistoryError

    con = console or Console()
    with History(db, default_path="history.sqlite", create=False) as history:
        try:
            stored = history.metric_names()
        except SQLAlchemyError as error:
            raise HistoryError(f"{history.display_url}: cannot read ({error.__class__.__name__}: "
                               f"{str(error).splitlines()[0]})") from None
        if metric is not None:
            if metric not in SUMMARY_KEYS:
                raise UsageError(f"--metric {metric}: unknown metric (known: {', '.join(SUMMARY_KEYS)})")
            if metric not in stored:
                raise UsageError(f"--metric {metric}: no values stored in {history.display_url}")
            names = [metric]
        else:
            names = [k for k in SUMMARY_KEYS if k in stored]
        limits = history.spec_limits()
        series = {name: history.series(name) for name in names}
        n_batches = len(history.batch_ids())
        where = history.display_url

    con.print(f"[bold]history[/] {escape(where)}: {n_batches} batch(es)")
    if not names:
        con.print("no metric values stored yet")
        return
    table = Table(title="individuals charts (all units, batch order)", title_justify="left",
                  box=box.SIMPLE_HEAD)
    table.add_column("metric", overflow="fold", min_width=14)
    for col in ("n", "batches", "rules", "centre", "LCL", "UCL", "MR mean", "MR UCL"):
        table.add_column(col, justify="right", no_wrap=True)
    viol_table = Table(title="Western Electric rule violations", title_justify="left",
                       box=box.SIMPLE_HEAD)
    for col in ("metric", "chart", "rule", "batch", "serial", "value", "what"):
        viol_table.add_column(col)
    charts: dict[str, tuple[IndividualsChart, list[Any]]] = {}
    for name in names:
        points = series[name]
        batches_here = len({p.batch_id for p in points})
        if len(points) < 2:
            table.add_row(name, str(len(points)), str(batches_here), "n < 2",
                          *["—"] * 5)
            continue
        chart = individuals_chart(np.array([p.value for p in points]))
        charts[name] = (chart, points)
        table.add_row(
            name, str(len(points)), str(batches_here), str(len(chart.violations)),
            _fmt(chart.center, 3), _fmt(chart.lcl, 3), _fmt(chart.ucl, 3),
            _fmt(chart.mr_mean, 3), _fmt(chart.mr_ucl, 3),
        )
        for v in chart.violations:
            p = points[v.index]
            viol_table.add_row(name, v.chart, str(v.rule), escape(p.batch_id), escape(p.serial),
                               _fmt(p.value), v.description)
    con.print(table)
    if viol_table.row_count:
        con.print(viol_table)
    else:
        con.print("no Western Electric rule broken")
    if report_dir is not None:
        page = write_history_report(charts, limits, Path(report_dir), source=where)
        con.print(f"report: {escape(str(page))}")


def write_history_report(
    charts: dict[str, tuple[IndividualsChart, list[Any]]],
    limits: dict[str, dict[str, Any]],
    report_dir: Path,
    *,
    source: str,
) -> Path:
    """Write ``<metric>.png`` per chart and ``index.html`` into ``report_dir``."""
    report_dir.mkdir(parents=True, exist_ok=True)
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        "<title>popmeter history</title>", f"<style>{_CSS}</style></head><body>",
        "<h1>Process history</h1>",
        (f'<p class="note">{_e(source)} · individuals and moving-range charts over all units, '
        "batches in the order first recorded (grey lines separate batches); red points "
        "break a Western Electric rule (number shown).</p>"),
    ]
    for name, (chart, points) in charts.items():
        boundaries = [i for i in range(1, len(points)) if points[i].batch_id != points[i - 1].batch_id]
        lim = limits.get(name, {})
        fig = control_chart_figure(
            chart, metric=name, labels=[p.serial for p in points], boundaries=boundaries,
            lsl=lim.get("min"), usl=lim.get("max"),
        )
        png = report_dir / f"{name}.png"
        fig.savefig(png, dpi=110)
        parts.append(f"<h2>{_e(name)}</h2>")
        parts.append(f'<img alt="control chart of {_e(name)}" src="{_e(quote(png.name))}">')
        parts.append(
            f'<p class="note">centre {_e(_fmt(chart.center))}, limits {_e(_fmt(chart.lcl))} … '
            f"{_e(_fmt(chart.ucl))}; MR mean {_e(_fmt(chart.mr_mean))}, MR UCL "
            f"{_e(_fmt(chart.mr_ucl))}</p>"
        )
        if chart.violations:
            parts.append("<table><thead><tr><th>chart</th><th>rule</th><th>batch</th>"
                         "<th>serial</th><th>value</th><th>what</th></tr></thead><tbody>")
            for v in chart.violations:
                p = points[v.index]
                parts.append(
                    f"<tr><td>{_e(v.chart)}</td><td>{v.rule}</td><td>{_e(p.batch_id)}</td>"
                    f"<td>{_e(p.serial)}</td><td>{_e(_fmt(p.value))}</td>"
                    f"<td>{_e(v.description)}</td></tr>"
                )
            parts.append("</tbody></table>")
    parts.append(f'<p class="note">{_e(SAFETY_NOTE)}</p></body></html>')
    page = report_dir / "index.html"
    page.write_text("\n".join(parts), encoding="utf-8")
    return page


__all__ = [
    "batch_html",
    "control_chart_figure",
    "histogram_figure",
    "print_batch_summary",
    "show_history",
    "write_batch_report",
    "write_history_report",
]
