"""``popmeter demo``: the whole job on the bundled synthetic recordings.

Uses the recordings in the repository's ``synthetic_audio/`` folder when it is
there (a source checkout); otherwise (an installed wheel) it generates the same
scenarios with :mod:`popmeter.synth` into the output folder first. Everything
it writes goes under ``./popmeter-demo-output/`` (or ``out_dir``).

The demo batch contains deliberately defective units, so its FAIL and ERROR
verdicts are expected; the demo itself returns 0 when every step ran.
"""

from __future__ import annotations

import os
from pathlib import Path

from rich.console import Console
from rich.rule import Rule

from popmeter.terminal import ACCENT, print_safety

#: Where a source checkout keeps the bundled recordings.
BUNDLED_DIR = Path(__file__).resolve().parent.parent / "synthetic_audio"

#: Files the demo needs from the bundle (names fixed by the bundle's README).
CLEAN_RUN = "clean_run.flac"
NOISY_RUN = "noisy_run.flac"
TWO_CLICK_RUN = "two_click_run.flac"
BOAT = "demo_boat.toml"
SPEC = "demo_spec.toml"
BATCH = "batch_demo"


def find_bundle() -> Path | None:
    """The bundled ``synthetic_audio`` folder, or None when not installed with it."""
    needed = [CLEAN_RUN, BOAT, SPEC]
    if BUNDLED_DIR.is_dir() and all((BUNDLED_DIR / n).exists() for n in needed):
        return BUNDLED_DIR
    return None


def run_demo(*, out_dir: str | os.PathLike[str] = "popmeter-demo-output",
             console: Console | None = None, jobs: int | None = None) -> int:
    """Run analyze (with report), model and batch on the bundled recordings.

    Returns 0 when every step ran (whatever the verdicts of the demo batch).
    """
    from popmeter.analysis import analyze_file, write_outputs
    from popmeter.batch import run_batch

    console = console or Console()
    out = Path(out_dir).resolve()
    out.mkdir(parents=True, exist_ok=True)
    print_safety(console)

    bundle = find_bundle()
    if bundle is None:
        console.print(f"No bundled recordings found; generating them into {out / 'synthetic_audio'} ...")
        from popmeter.synth import make_demo_bundle

        bundle = make_demo_bundle(out / "synthetic_audio")

    boat = bundle / BOAT
    spec = bundle / SPEC
    reports: list[tuple[str, Path]] = []
    for name in (CLEAN_RUN, TWO_CLICK_RUN, NOISY_RUN):
        audio = bundle / name
        if not audio.exists():
            continue
        stem = audio.stem
        console.print(Rule(f"analyze {name}", style=ACCENT))
        analysis = analyze_file(audio, boat=boat, spec=spec)
        written = write_outputs(
            analysis,
            json_path=out / f"{stem}.json",
            csv_path=out / f"{stem}.csv",
            report_dir=out / f"{stem}_report",
            console=console,
        )
        reports.append((name, written["report"]))

    batch_src = bundle / BATCH
    if batch_src.is_dir():
        console.print(Rule("batch: the demo production batch (defects included on purpose)",
                           style=ACCENT))
        result = run_batch(batch_src, spec=spec, boat=boat, out_dir=out / "batch",
                           jobs=jobs, db=str(out / "batch" / "history.sqlite"),
                           batch_id="demo-batch")
        reports.append(("batch", out / "batch" / "index.html"))
        passed = sum(1 for u in result.units if u.verdict.status == "PASS")
        console.print(f"{passed} of {len(result.units)} units passed "
                      "(the batch holds defective units on purpose).")
        console.print(f"Trends across batches: popmeter history --db {out / 'batch' / 'history.sqlite'}")

    console.print(Rule("reports", style=ACCENT))
    for name, path in reports:
        console.print(f"{name:>20}: [link=file://{path}]{path}[/link]")
    console.print("Open them in a web browser; they need no network.")
    return 0
