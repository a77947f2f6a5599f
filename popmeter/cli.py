"""The ``popmeter`` command line: argument parsing only.

Each sub-command parses its arguments and calls one library function; all the
work (and every user-facing decision) lives in the library. Errors derived from
:class:`popmeter.errors.PopmeterError` become one line on stderr and exit code
2; a traceback is shown only with ``--debug``.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

from popmeter.errors import ConfigError, PopmeterError, UsageError

EXIT_OK = 0
EXIT_FAILED_SPEC = 1
EXIT_USAGE = 2


def _band(text: str) -> tuple[float, float]:
    """Parse ``LO-HI`` (Hz) for ``--band``."""
    try:
        lo, hi = (float(part) for part in text.split("-", 1))
    except ValueError:
        raise argparse.ArgumentTypeError(f"--band wants LO-HI in Hz, e.g. 800-6000; got {text!r}")
    if not 0 <= lo < hi:
        raise argparse.ArgumentTypeError(f"--band wants 0 <= LO < HI; got {text!r}")
    return lo, hi


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}")
    if not value > 0:
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return value


def _whole_number(minimum: int) -> Callable[[str], int]:
    """An argparse type: a whole number of at least ``minimum``."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}")
        if value < minimum:
            raise argparse.ArgumentTypeError(f"expected a whole number of at least {minimum}, got {text!r}")
        return value

    return parse


def _add_output_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", type=Path, metavar="OUT", help="write the analysis as JSON (schema popmeter.analysis/1)")
    p.add_argument("--csv", type=Path, metavar="OUT", help="write one row per cycle as CSV")
    p.add_argument("--report", type=Path, metavar="DIR", help="write a self-contained HTML report with figures into DIR")


def _add_analysis_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--boat", type=Path, metavar="B.toml", help="boat profile: adds the diaphragm stiffness")
    p.add_argument("--channel", type=int, metavar="N", help="channel to analyse, counted from 0 (default: the one with the clearest clicks)")
    p.add_argument("--band", type=_band, metavar="LO-HI", help="force the click band in Hz (default: found from the recording)")
    p.add_argument("--clicks-per-cycle", type=int, choices=(1, 2), help="force one or two clicks per engine cycle (default: decided from the recording)")
    p.add_argument("--ignition-at", type=float, metavar="S", help="time in the recording (s) when the flame was lit; gives ignition_delay_s")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="popmeter",
        description="Measure popping-diaphragm steam boat engines from their sound.",
    )
    parser.add_argument("--debug", action="store_true", help="show tracebacks for errors")
    parser.add_argument("--version", action="store_true", help="print the version and exit")
    # --debug is also accepted after the command (`popmeter analyze F --debug`);
    # SUPPRESS keeps a sub-command from resetting a --debug given before it
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show tracebacks for errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("analyze", parents=[common], help="analyse one recording")
    p.add_argument("file", type=Path, help="recording (WAV, FLAC, OGG, MP3, AIFF; M4A and others through ffmpeg)")
    _add_analysis_options(p)
    _add_output_options(p)
    p.add_argument("--spec", type=Path, metavar="S.toml", help="QC spec: judge the run PASS/FAIL (exit code 1 on FAIL)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("listen", parents=[common], help="record live at the test tank and analyse the run")
    p.add_argument("--device", help="input device index or name (see `popmeter devices`)")
    p.add_argument("--samplerate", type=int, metavar="R", help="sample rate in Hz (default: 48000, or the device default)")
    p.add_argument("--channel", type=int, metavar="N", help="input channel to analyse, from 0 (default 0)")
    p.add_argument("--out", type=Path, required=True, metavar="FILE", help="where to save the recording (WAV)")
    p.add_argument("--boat", type=Path, metavar="B.toml", help="boat profile: adds the diaphragm stiffness")
    p.add_argument("--spec", type=Path, metavar="S.toml", help="QC spec: show PASS/FAIL at the end (exit code 1 on FAIL)")
    p.add_argument("--max-seconds", type=_positive_float, metavar="S", help="stop after this much audio (s)")
    p.add_argument("--silence-stop", type=_positive_float, default=5.0, metavar="S",
                   help="after the run has started, stop when no click is heard for S seconds of audio (default 5)")
    p.add_argument("--json", type=Path, metavar="OUT", help="write the final analysis as JSON")
    p.add_argument("--csv", type=Path, metavar="OUT", help="write one row per cycle as CSV")
    p.add_argument("--report", type=Path, metavar="DIR", help="write the HTML report into DIR")
    p.add_argument("--no-view", action="store_true", help="no live view (plain progress lines)")

    sub.add_parser("devices", parents=[common], help="list audio input devices that `listen` can use")

    p = sub.add_parser("batch", parents=[common], help="judge a production batch against a QC spec")
    p.add_argument("source", type=Path, metavar="DIR_OR_MANIFEST", help="folder of recordings (serial = file name stem) or manifest CSV")
    p.add_argument("--spec", type=Path, required=True, metavar="S.toml", help="QC spec")
    p.add_argument("--boat", type=Path, metavar="B.toml", help="boat profile (needed for stiffness limits)")
    p.add_argument("--out", type=Path, required=True, metavar="DIR", help="output folder")
    p.add_argument("--jobs", type=int, metavar="N", help="parallel workers (default: all cores)")
    p.add_argument("--db", metavar="URL", help="history database URL or SQLite file (default: OUT/history.sqlite)")
    p.add_argument("--batch-id", metavar="ID", help="name of the batch in the history (default: the folder or manifest name)")

    p = sub.add_parser("history", parents=[common], help="trends across batches: control charts and rule violations")
    p.add_argument("--db", metavar="URL", help="history database URL or SQLite file (default: ./history.sqlite)")
    p.add_argument("--metric", metavar="NAME", help="one summary metric (default: every metric in the history)")
    p.add_argument("--report", type=Path, metavar="DIR", help="write charts (PNG) and an HTML page into DIR")

    p = sub.add_parser("model", parents=[common], help="forward model of a boat profile: predicted rate, ring, sensitivities")
    p.add_argument("profile", type=Path, metavar="B.toml", help="boat profile (TOML; keys in the README)")
    p.add_argument("--json", type=Path, metavar="OUT", help="write the prediction as JSON")

    p = sub.add_parser("calibrate", parents=[common], help="fit the model correction on reference units with a known-good diaphragm")
    p.add_argument("files", type=Path, nargs="+", metavar="FILE", help="recordings of reference units")
    p.add_argument("--boat", type=Path, required=True, metavar="B.toml", help="boat profile of the reference units")
    p.add_argument("--out", type=Path, required=True, metavar="B_CAL.toml", help="where to write the calibrated copy of the profile")

    p = sub.add_parser("simulate", parents=[common], help="write a synthetic recording with its ground truth beside it")
    p.add_argument("--out", type=Path, required=True, metavar="FILE", help="audio file to write (format from the extension)")
    p.add_argument("--boat", type=Path, metavar="B.toml", help="boat profile to simulate (default: a built-in demo boat)")
    p.add_argument("--seed", type=_whole_number(0), default=0, help="random seed (default 0)")
    p.add_argument("--duration", type=_positive_float, default=60.0, metavar="S", help="length in seconds (default 60)")
    p.add_argument("--samplerate", type=int, default=48000, metavar="R", help="sample rate in Hz (default 48000)")
    p.add_argument("--channels", type=_whole_number(1), default=1, metavar="N", help="channel count (default 1)")
    p.add_argument("--snr", type=float, default=30.0, metavar="DB", help="click-to-noise ratio in dB (default 30)")
    p.add_argument("--clicks-per-cycle", type=int, choices=(1, 2), default=1,
                   help="clicks per engine cycle (default 1; 2: a second, weaker click of another timbre)")
    p.add_argument("--rate", type=_positive_float, metavar="HZ", help="steady cycle rate (default: from the boat profile's model)")
    p.add_argument("--thickness-factor", type=_positive_float, default=1.0, metavar="F",
                   help="true diaphragm thickness as a multiple of the profile's nominal (default 1)")
    p.add_argument("--stalls", type=_whole_number(0), default=0, metavar="N", help="stalls during the fade (default 0)")
    p.add_argument("--distractors", default="", metavar="LIST",
                   help="comma-separated extra sounds: match,speech,splash,knock,hum")
    p.add_argument("--reverb", action="store_true", help="add room reverberation")
    p.add_argument("--wall", type=_positive_float, metavar="MS",
                   help="add a wall's reflection of every sound, MS milliseconds late")
    p.add_argument("--wall-db", type=float, default=-10.0, metavar="DB",
                   help="level of that reflection relative to the sound (default -10)")

    sub.add_parser("demo", parents=[common], help="run the whole job on the bundled synthetic recordings")
    return parser


# --- handlers: each calls the library and returns an exit code -------------


def _cmd_analyze(args: argparse.Namespace) -> int:
    from popmeter.analysis import analyze_file, write_outputs

    analysis = analyze_file(
        args.file,
        boat=args.boat,
        channel=args.channel,
        band_hz=args.band,
        clicks_per_cycle=args.clicks_per_cycle,
        ignition_at_s=args.ignition_at,
        spec=args.spec,
    )
    write_outputs(analysis, json_path=args.json, csv_path=args.csv, report_dir=args.report,
                  quiet=args.quiet)
    if analysis.verdict is not None and analysis.verdict.status != "PASS":
        return EXIT_FAILED_SPEC
    return EXIT_OK


def _cmd_listen(args: argparse.Namespace) -> int:
    from popmeter.capture import listen

    return listen(
        out=args.out,
        device=args.device,
        sample_rate_hz=args.samplerate,
        channel=args.channel,
        boat=args.boat,
        spec=args.spec,
        max_seconds=args.max_seconds,
        silence_stop_s=args.silence_stop,
        json_path=args.json,
        csv_path=args.csv,
        report_dir=args.report,
        view=not args.no_view,
    )


def _cmd_devices(args: argparse.Namespace) -> int:
    from popmeter.capture import list_devices
    from popmeter.live_view import print_devices

    print_devices(list_devices())
    return EXIT_OK


def _cmd_batch(args: argparse.Namespace) -> int:
    from popmeter.batch import run_batch

    result = run_batch(args.source, spec=args.spec, boat=args.boat, out_dir=args.out,
                       jobs=args.jobs, db=args.db, batch_id=args.batch_id)
    return EXIT_OK if result.all_passed else EXIT_FAILED_SPEC


def _cmd_history(args: argparse.Namespace) -> int:
    from popmeter.batch_report import show_history

    show_history(db=args.db, metric=args.metric, report_dir=args.report)
    return EXIT_OK


def _cmd_model(args: argparse.Namespace) -> int:
    from popmeter.engine import model_report

    model_report(args.profile, json_path=args.json)
    return EXIT_OK


def _cmd_calibrate(args: argparse.Namespace) -> int:
    from popmeter.stiffness import calibrate_files

    calibrate_files(args.files, boat=args.boat, out=args.out)
    return EXIT_OK


def _cmd_simulate(args: argparse.Namespace) -> int:
    from popmeter.synth import simulate_to_file, truth_path_for

    distractors = tuple(d.strip() for d in args.distractors.split(",") if d.strip())
    written = simulate_to_file(
        args.out,
        boat=args.boat,
        seed=args.seed,
        duration_s=args.duration,
        sample_rate_hz=args.samplerate,
        channels=args.channels,
        click_to_noise_db=args.snr,
        clicks_per_cycle=args.clicks_per_cycle,
        steady_rate_hz=args.rate,
        thickness_factor=args.thickness_factor,
        stalls=args.stalls,
        distractors=distractors,
        reverb=args.reverb,
        wall_ms=args.wall,
        wall_db=args.wall_db,
    )
    print(f"wrote {written} ({args.duration:g} s at {args.samplerate} Hz, {args.channels} channel(s)) "
          f"and its ground truth {truth_path_for(written)}")
    return EXIT_OK


def _cmd_demo(args: argparse.Namespace) -> int:
    from popmeter.demo import run_demo

    return run_demo()


_HANDLERS = {
    "analyze": _cmd_analyze,
    "listen": _cmd_listen,
    "devices": _cmd_devices,
    "batch": _cmd_batch,
    "history": _cmd_history,
    "model": _cmd_model,
    "calibrate": _cmd_calibrate,
    "simulate": _cmd_simulate,
    "demo": _cmd_demo,
}


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.version:
        from popmeter import __version__

        print(f"popmeter {__version__}")
        return EXIT_OK
    if not args.command:
        parser.print_help()
        return EXIT_USAGE
    try:
        return _HANDLERS[args.command](args)
    except PopmeterError as error:
        if args.debug:
            raise
        if isinstance(error, ConfigError) and len(error.problems) > 1:
            # one line per problem, so that all of them can be fixed in one go
            for problem in error.problems:
                print(f"popmeter {args.command}: error: {error.source}: {problem}", file=sys.stderr)
        else:
            print(f"popmeter {args.command}: error: {error}", file=sys.stderr)
        return error.exit_code
    except OSError as error:
        # a file or folder the user named cannot be read or written (missing
        # folder, read-only disk, a file in the way): one line, not a traceback
        if args.debug:
            raise
        where = f"{error.filename}: " if error.filename else ""
        print(f"popmeter {args.command}: error: {where}{error.strerror or error}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        if args.debug:
            raise
        print(f"popmeter {args.command}: interrupted", file=sys.stderr)
        return 130


__all__ = ["UsageError", "build_parser", "main"]
