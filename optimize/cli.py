"""The ``tunnelsmith`` command: a thin layer over the Python API.

Exit status: 0 success, 1 internal error or a storage that refuses writes (disk full:
nothing finished is lost, free space and run again), 2 bad input (one paragraph naming the file,
the key and the fix, no traceback), 130 interrupted.
"""

from __future__ import annotations

import argparse
import re
import sys
from pathlib import Path

from tunnelsmith.optimize.errors import (EXIT_INPUT, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_OK, InputError,
                                         StorageWriteError)
from tunnelsmith.optimize.version import software_version



#: The longest --timeout accepted (one year): anything longer is a typo, and would
#: overflow the deadline arithmetic.
MAX_TIMEOUT_S = 366 * 24 * 3600.0


def parse_duration_s(text: str) -> float:
    """``"8h"``, ``"90m"``, ``"45s"``, ``"1h30m"`` or plain seconds → seconds."""
    match = re.fullmatch(r"\s*(?:(\d+(?:\.\d+)?)h)?\s*(?:(\d+(?:\.\d+)?)m)?\s*(?:(\d+(?:\.\d+)?)s?)?\s*", text)
    if not text.strip() or match is None or not any(match.groups()):
        raise InputError(
            "command line", "--timeout", f"cannot read the duration {text!r}",
            "give hours, minutes or seconds, e.g. --timeout 8h, --timeout 90m or --timeout 1h30m",
        )
    hours, minutes, seconds = (float(g) if g else 0.0 for g in match.groups())
    total_s = 3600.0 * hours + 60.0 * minutes + seconds
    if not total_s <= MAX_TIMEOUT_S:
        raise InputError("command line", "--timeout", f"{text!r} is longer than a year",
                         "give at most --timeout 8760h; without --timeout the campaign runs until its trial budget")
    return total_s


def parse_growth_rates(values: list[str] | None) -> float | dict[str, float] | None:
    """``["0.8"]`` → 0.8; ``["GaAs=0.8", "AlAs=0.3"]`` → per material (monolayers per second)."""
    if not values:
        return None
    rates: dict[str, float] = {}
    for text in values:
        name, _, number = text.rpartition("=")
        try:
            rate = float(number)
        except ValueError:
            rate = float("nan")
        if not rate > 0 or rate == float("inf"):
            raise InputError("command line", "--growth-rate", f"cannot read the growth rate {text!r}",
                             "give monolayers per second, one for all (--growth-rate 0.8) or per material "
                             "(--growth-rate GaAs=0.8 --growth-rate AlAs=0.3)")
        if not name:
            if len(values) > 1:
                raise InputError("command line", "--growth-rate", "a rate for all layers cannot be combined with "
                                 "other rates", "give one --growth-rate value, or one MATERIAL=RATE per material")
            return rate
        rates[name.strip()] = rate
    return rates


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a number >= 1, got {value}")
    return value


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tunnelsmith",
        description="Design tunneling layer stacks: solve one stack, run optimisation campaigns, "
        "study growth tolerance.",
    )
    parser.add_argument("--version", action="version", version=f"tunnelsmith {software_version()}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    solve = commands.add_parser("solve", help="transmission, levels, I-V and metrics of one stack")
    solve.add_argument("stack", type=Path, metavar="STACK.toml|RUN_DIR")
    solve.add_argument("--design", type=int, help="trial number of a front design (with RUN_DIR)")
    solve.add_argument("--storage", help="Optuna RDB URL (with RUN_DIR of a database campaign)")
    solve.add_argument("--out", type=Path, help="output directory (default runs/<file stem>/)")

    opt = commands.add_parser("optimize", help="start or resume a campaign")
    opt.add_argument("campaign", type=Path, metavar="CAMPAIGN.toml")
    opt.add_argument("--out", type=Path, help="run directory (default runs/<campaign name>/)")
    opt.add_argument("--trials", type=_positive_int, help="total finished trials (overrides [search] trials)")
    opt.add_argument("--timeout", help="stop after this wall time, e.g. 8h, 90m, 1h30m")
    opt.add_argument("--workers", type=_positive_int, default=1, help="local worker processes")
    opt.add_argument("--storage", help="Optuna RDB URL, e.g. postgresql+psycopg://user@host/db")
    opt.add_argument("--quiet", action="store_true", help="no progress bar; one log line per batch")

    front = commands.add_parser("front", help="rebuild front, trial table and plots from the storage")
    front.add_argument("run_dir", type=Path, metavar="RUN_DIR")
    front.add_argument("--storage", help="Optuna RDB URL of the campaign (default: the run's journal)")
    front.add_argument("--quiet", action="store_true")
    front.add_argument("--pick", metavar="EXPRESSION",
                       help='filter and rank the front, e.g. "resonance_energy_eV within 0.005 of 0.15, '
                            'then max transmission_contrast"')

    tol = commands.add_parser("tolerance", help="growth-error Monte Carlo: yield and sensitivities")
    tol.add_argument("target", type=Path, metavar="STACK.toml|RUN_DIR")
    tol.add_argument("--design", type=int, help="trial number of a front design (with RUN_DIR)")
    tol.add_argument("--samples", type=_positive_int, help="number of growth samples")
    tol.add_argument("--out", type=Path, help="output directory")
    tol.add_argument("--storage", help="Optuna RDB URL (with RUN_DIR of a database campaign)")
    tol.add_argument("--quiet", action="store_true")

    check = commands.add_parser("check", help="validate a stack or campaign file and show its search space")
    check.add_argument("file", type=Path, metavar="FILE.toml")

    for command in (solve, opt, front, tol):
        command.add_argument("--no-plots", dest="plots", action="store_false",
                             help="write the netCDF results only, no figures (faster)")
    for command in (solve, opt, tol, check):
        command.add_argument("--strict", action="store_true",
                             help="treat warnings about implausible values as errors (exit 2), for scripts")

    export = commands.add_parser("export", help="a front design as a stack file and a growth sheet")
    export.add_argument("run_dir", type=Path, metavar="RUN_DIR")
    export.add_argument("--design", type=int, required=True, help="trial number of a front design")
    export.add_argument("--out", type=Path, help="output directory (default RUN_DIR/design-N/)")
    export.add_argument("--storage", help="Optuna RDB URL (with RUN_DIR of a database campaign)")
    export.add_argument("--growth-rate", action="append", metavar="ML_PER_S|MATERIAL=ML_PER_S",
                        help="growth rate in monolayers per second: one value, or one per material (repeat)")
    export.add_argument("--substrate-side", choices=("emitter", "collector"), default="emitter",
                        help="the contact grown first, on the substrate (default: emitter)")

    report = commands.add_parser("report", help="one design as an HTML page and a PDF")
    report.add_argument("target", type=Path, metavar="STACK.toml|RUN_DIR")
    report.add_argument("--design", type=int, help="trial number of a front design (with RUN_DIR)")
    report.add_argument("--out", type=Path, help="output directory")
    report.add_argument("--storage", help="Optuna RDB URL (with RUN_DIR of a database campaign)")
    report.add_argument("--samples", type=_positive_int, help="growth samples of the tolerance study")

    materials = commands.add_parser("materials", help="the material table with the source of every value")
    materials.add_argument("--temperature", type=float, default=300.0, metavar="K")
    return parser


def _check_out(args: argparse.Namespace) -> None:
    out = getattr(args, "out", None)
    if out is not None and out.exists() and not out.is_dir():
        raise InputError("command line", "--out", f"{out} is an existing file, not a directory",
                         "give --out a directory (it is created when missing), or move the file away")


def _dispatch(args: argparse.Namespace) -> int:
    _check_out(args)
    if getattr(args, "strict", False):
        from tunnelsmith.optimize.commands.check import refuse_warnings

        refuse_warnings(getattr(args, "stack", None) or getattr(args, "campaign", None)
                        or getattr(args, "target", None) or args.file)
    if args.command == "solve":
        from tunnelsmith.optimize.commands.solve import run_solve

        return run_solve(args.stack, out_dir=args.out, design=args.design, storage=args.storage, plots=args.plots)
    if args.command == "report":
        from tunnelsmith.optimize.commands.report import run_report

        return run_report(args.target, design=args.design, out_dir=args.out, storage=args.storage,
                          samples=args.samples)
    if args.command == "export":
        from tunnelsmith.optimize.commands.export import run_export

        return run_export(args.run_dir, design=args.design, out_dir=args.out, storage=args.storage,
                          growth_rate_ml_s=parse_growth_rates(args.growth_rate),
                          substrate_side=args.substrate_side)
    if args.command == "optimize":
        from tunnelsmith.optimize.commands.optimize import run_campaign

        timeout_s = None if args.timeout is None else parse_duration_s(args.timeout)
        return run_campaign(
            args.campaign, out_dir=args.out, trials=args.trials, timeout_s=timeout_s,
            workers=args.workers, storage=args.storage, quiet=args.quiet, plots=args.plots,
        )
    if args.command == "front":
        from tunnelsmith.optimize.commands.front import rebuild_front

        return rebuild_front(args.run_dir, storage=args.storage, quiet=args.quiet, pick=args.pick, plots=args.plots)
    if args.command == "tolerance":
        from tunnelsmith.optimize.commands.tolerance import run_tolerance

        return run_tolerance(
            args.target, design=args.design, samples=args.samples, out_dir=args.out,
            storage=args.storage, quiet=args.quiet, plots=args.plots,
        )
    if args.command == "check":
        from tunnelsmith.optimize.commands.check import run_check

        return run_check(args.file)
    if args.command == "materials":
        from tunnelsmith.optimize.commands.materials import run_materials

        return run_materials(args.temperature)
    raise AssertionError(args.command)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``tunnelsmith`` console script."""
    import signal
    import threading

    from tunnelsmith.optimize.io import stop_at_once

    args = build_parser().parse_args(argv)
    # Any SIGINT/SIGTERM ends with exit 130 and no half-written file: at once in every
    # phase but the campaign loop (which finishes its batch) and the output phase (which
    # finishes its files); both install their own handlers and restore these.
    previous = {}
    if threading.current_thread() is threading.main_thread():
        previous = {signum: signal.signal(signum, stop_at_once) for signum in (signal.SIGINT, signal.SIGTERM)}
    try:
        return _dispatch(args)
    except InputError as error:
        print(f"error: {error}", file=sys.stderr)
        return EXIT_INPUT
    except StorageWriteError as error:
        print(f"error: {error}", file=sys.stderr)
        return EXIT_INTERNAL
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        # The reader went away (e.g. `| head`): not an error of ours.
        sys.stderr.close()
        return EXIT_OK
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler)


if __name__ == "__main__":
    sys.exit(main())
