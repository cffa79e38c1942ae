"""The `poise` command: a thin shell over the library API.

Exit status: 0 success; 2 invalid study file or arguments (one message, no
traceback); 1 anything else.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import warnings

from poise.errors import InputError, PoiseWarning
from poise.study.vocabulary import visible


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one line and exit 2, as for a bad study file
        self.exit(2, f"poise: {message} (see 'poise {self.prog.split()[-1]} --help')\n" if " " in self.prog
                  else f"poise: {message} (see 'poise --help')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="poise", description="How probable is a stability claim about an ODE model with uncertain parameters?")
    parser.add_argument("--version", action="version", version=_version())
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    check = commands.add_parser("check", help="validate a study file and show the model as poise reads it")
    check.add_argument("study")
    check.add_argument("--json", action="store_true", help="print the model as JSON")

    inspect = commands.add_parser("inspect", help="every steady state at one parameter point")
    inspect.add_argument("study")
    inspect.add_argument("--at", action="extend", nargs="+", default=[], metavar="NAME=VALUE",
                         help="set parameters (fixed or uncertain), e.g. --at a=1 b=2")
    inspect.add_argument("--json", action="store_true")

    run = commands.add_parser("run", help="the whole uncertainty study")
    run.add_argument("study")
    run.add_argument("--out", help="run directory (default: reports/<study file stem>/)")
    run.add_argument("--size", type=_positive_int, help="base sample size N (overrides [sampling] size)")
    run.add_argument("--seed", type=_seed, help="overrides [sampling] seed")
    run.add_argument("--jobs", type=_non_negative_int, help="worker processes; 0 = all cores")
    run.add_argument("--scheduler", help="address of a Dask scheduler, e.g. tcp://10.0.0.5:8786")
    run.add_argument("--resume", action="store_true", help="continue an unfinished run in --out")
    run.add_argument("--overwrite", action="store_true",
                     help="replace a run of a different study or settings in --out")
    run.add_argument("--quiet", action="store_true", help="no progress on stderr")

    report = commands.add_parser("report", help="rebuild the report of a finished run")
    report.add_argument("dir")
    return parser


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    restore = _quiet_threads_after_interrupt()
    try:
        with warnings.catch_warnings():
            _one_line_warnings()
            handler = {"check": _check, "inspect": _inspect, "run": _run, "report": _report}[args.command]
            return handler(args)
    except InputError as exc:
        print(f"poise: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("poise: interrupted", file=sys.stderr)
        return 130
    except RecursionError:   # only input nested far beyond any real model gets here
        print(f"poise: {args.command}: the input is nested too deeply to read", file=sys.stderr)
        return 2
    except MemoryError:
        print("poise: out of memory; choose a smaller size (--size) or fewer [sensitivity] "
              "resamples, or use a machine with more memory", file=sys.stderr)
        return 1
    except BrokenPipeError:   # the reader of our output left (e.g. `| head`): nothing to say
        _silence_stdout()
        return 1
    except OSError as exc:   # disk full, a folder that became read-only, ...
        hint = ("; what was finished is saved: run the same command again to continue"
                if args.command == "run" else "")
        print(f"poise: {_os_error(exc)}{hint}", file=sys.stderr)
        return 1
    finally:
        restore()
        _stop_saying_when_compiling()


def _stop_saying_when_compiling() -> None:
    import os
    from poise.engine.compile_notice import ENVIRONMENT_SWITCH   # stdlib-only module
    os.environ.pop(ENVIRONMENT_SWITCH, None)


def _silence_stdout() -> None:
    """Send what is left in stdout's buffer nowhere, so that exiting prints no error."""
    import os
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())


def _os_error(exc: OSError) -> str:
    """One line for an error of the system: what failed and where."""
    what = exc.strerror or str(exc) or type(exc).__name__
    where = f": {exc.filename}" if exc.filename else ""
    return visible(f"{what}{where}")


def _one_line_warnings() -> None:
    """poise's own warnings as one line on stderr; scipy's note on the balance of Sobol'
    points for sizes that are not powers of 2 is expected here and not shown."""
    from poise.errors import quiet_sobol_balance
    quiet_sobol_balance()
    default = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, PoiseWarning):
            print(f"poise: warning: {visible(str(message))}", file=sys.stderr)
        else:
            default(message, category, filename, lineno, file, line)

    warnings.showwarning = show


def _say_when_compiling() -> None:
    """One line on stderr, in this process and its workers, if solver kernels compile
    during this command (`main` clears the switch when the command ends)."""
    import os
    from poise.engine.compile_notice import ENVIRONMENT_SWITCH, announce_compiling
    os.environ[ENVIRONMENT_SWITCH] = "1"
    announce_compiling()


def _quiet_threads_after_interrupt():
    """After Ctrl-C, let background threads die silently; returns a function that puts
    the previous SIGINT handler and thread hook back.

    Stopping the worker pool on Ctrl-C tears down the pool's helper threads in this
    process; one of them can fail on the way (a pipe to a killed worker) and Python
    would print its traceback after poise's own message. Before an interrupt, thread
    errors are reported as usual.
    """
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return lambda: None
    interrupted = threading.Event()
    report, previous = threading.excepthook, signal.getsignal(signal.SIGINT)

    def on_interrupt(signum, frame):
        interrupted.set()
        raise KeyboardInterrupt

    def on_thread_error(hook_args):
        if not interrupted.is_set():
            report(hook_args)

    signal.signal(signal.SIGINT, on_interrupt)
    threading.excepthook = on_thread_error

    def restore():
        signal.signal(signal.SIGINT, previous)
        # threads stopped by the interrupt may still be dying: keep them quiet
        if not interrupted.is_set():
            threading.excepthook = report

    return restore


def _check(args) -> int:
    from poise.describe import describe_model, describe_text
    from poise.study.loader import load_study
    from poise.model import compile_model
    from poise.model.spread import spread_note
    study = load_study(args.study)
    _warn(study.warnings)
    description = describe_model(study)
    model = compile_model(study)
    if study.long_run is not None:   # a box must suit the conserved totals, as `poise run` checks
        from poise.longrun.pipeline import check_long_run
        check_long_run(study, model)
    note = spread_note(study, model)
    _warn((note,) if note else ())
    print(json.dumps(description, indent=2) if args.json else describe_text(study, description))
    return 0


def _inspect(args) -> int:
    from poise.inspect import inspect_point, inspect_text
    from poise.study.loader import load_study
    study = load_study(args.study)
    _warn(study.warnings)
    overrides = _assignments(args.at, study)
    _say_when_compiling()
    result = inspect_point(study, overrides)
    print(json.dumps(result, indent=2) if args.json else inspect_text(study, result))
    return 0


def _run(args) -> int:
    if not args.quiet:
        _say_when_compiling()
    from poise.api import run_from_cli
    return run_from_cli(args)


def _report(args) -> int:
    from poise.api import report_from_cli
    return report_from_cli(args)


def _assignments(items: list[str], study) -> dict[str, float]:
    values = {}
    known = set(study.parameters)
    for item in items:
        name, sep, text = item.partition("=")
        name = name.strip()
        if not sep:
            raise InputError(f"--at expects NAME=VALUE, got '{item}'")
        if name not in known:
            raise InputError(f"--at {item}: '{name}' is not a parameter of {study.path}; parameters are {', '.join(study.parameters)}")
        try:
            value = float(text)
        except ValueError:
            raise InputError(f"--at {item}: '{text}' is not a number") from None
        if not math.isfinite(value):
            raise InputError(f"--at {item}: the value must be finite")
        values[name] = value
    return values


def _warn(messages) -> None:
    for message in messages:
        print(f"poise: warning: {visible(str(message))}", file=sys.stderr)


def _positive_int(text: str) -> int:
    from poise.study.loader import MAX_SIZE
    value = _non_negative_int(text)
    if not 1 <= value <= MAX_SIZE:
        raise argparse.ArgumentTypeError(f"expected a whole number from 1 to {MAX_SIZE}")
    return value


def _seed(text: str) -> int:
    from poise.study.loader import MAX_SEED
    value = _non_negative_int(text)
    if value > MAX_SEED:
        raise argparse.ArgumentTypeError(f"expected a whole number from 0 to {MAX_SEED}")
    return value


def _non_negative_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got '{text}'") from None
    if value < 0:
        raise argparse.ArgumentTypeError("expected a whole number of at least 0")
    return value


def _version() -> str:
    from poise import __version__
    return f"poise {__version__}"


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
