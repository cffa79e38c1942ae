"""Wall time of the quick-start study, first run and warm, against the targets.

The quick start is ``poise run configs/toggle_switch.toml`` (README). Every run is a
fresh process, so interpreter start-up, imports, compiling kernels, worker processes
and the report are all part of what is measured.

* first run: numba's on-disk cache for the package is empty. Instead of deleting the
  cache next to the sources, each first run gets a new empty ``NUMBA_CACHE_DIR``,
  which numba then uses for every kernel (Python's own bytecode cache stays warm);
* warm: the same cache directory again, best of ``--repeats`` runs.

Besides the whole command it times, in the same way, where a warm run spends its time:
the bare interpreter (the baseline every ratio below is against), ``import poise.api``
(the modules a run loads before any work), the run without its report
(``run_study(..., report=False)``), and ``poise report DIR`` on the finished run
(the report alone, including its own imports).

Usage::

    python benchmarks/bench_startup.py [--repeats 3] [--jobs J] [--study configs/toggle_switch.toml]
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TARGET_WARM, TARGET_FIRST = 3.0, 15.0   # seconds, issue 18 item 6
ENGINE = ("import sys, poise; from poise.api import run_study; "
          "run_study(poise.load_study(sys.argv[1]), sys.argv[2], jobs=None if sys.argv[3] == '-' "
          "else int(sys.argv[3]), report=False)")


CPU = {}  # command label -> CPU seconds (user + system) of the command and its children
STDERR = {}  # command label -> stderr of its last run


def _children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def timed(command: list[str], env: dict, label: str = "") -> float:
    """Wall seconds of one command (which must succeed); its CPU seconds go to `CPU`
    (the smallest seen per label), which a machine shared with other work disturbs
    less than the wall time."""
    cpu, start = _children_cpu(), time.perf_counter()
    done = subprocess.run(command, env=env, cwd=ROOT, capture_output=True, text=True)
    seconds = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"failed ({done.returncode}): {' '.join(command)}\n{done.stderr[-3000:]}")
    if label:
        CPU[label] = min(CPU.get(label, float("inf")), _children_cpu() - cpu)
        STDERR[label] = done.stderr
    return seconds


def poise_command() -> list[str]:
    return [sys.executable, "-c", "import sys; from poise.cli import main; sys.exit(main())"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--jobs", type=int, default=None,
                        help="--jobs for poise run (default: the study's, as a user runs it)")
    parser.add_argument("--study", default="configs/toggle_switch.toml")
    args = parser.parse_args()
    jobs = [] if args.jobs is None else ["--jobs", str(args.jobs)]

    with tempfile.TemporaryDirectory() as scratch:
        scratch = Path(scratch)
        env = dict(os.environ, NUMBA_CACHE_DIR=str(scratch / "numba-cache"))
        # not --quiet: the compile notice is part of what a first run shows
        run = poise_command() + ["run", args.study, *jobs]

        first = timed(run + ["--out", str(scratch / "first")], env, "first run")
        noticed_first = "compiling solver kernels" in STDERR["first run"]
        warm = [timed(run + ["--out", str(scratch / f"warm{i}")], env, "warm run")
                for i in range(args.repeats)]
        bare = min(timed([sys.executable, "-c", "pass"], env, "bare interpreter")
                   for _ in range(args.repeats))
        imports = min(timed([sys.executable, "-c", "import poise.api"], env, "import poise.api")
                      for _ in range(args.repeats))
        engine = min(timed([sys.executable, "-c", ENGINE, args.study, str(scratch / f"engine{i}"),
                            "-" if args.jobs is None else str(args.jobs)], env, "run without report")
                     for i in range(args.repeats))
        report = min(timed(poise_command() + ["report", str(scratch / "warm0")], env, "report alone")
                     for _ in range(args.repeats))

    best = min(warm)
    print(f"quick start: poise run {args.study} {' '.join(jobs)}".rstrip())
    print(f"  first run (empty numba cache): {first:6.2f} s   target {TARGET_FIRST:.0f} s "
          f"-> {first / TARGET_FIRST:4.2f}x the target")
    print(f"  warm (best of {args.repeats}):            {best:6.2f} s   target {TARGET_WARM:.0f} s "
          f"-> {best / TARGET_WARM:4.2f}x the target   (all: {', '.join(f'{w:.2f}' for w in warm)})")
    print(f"  compiling kernels on the first run costs about {first - best:.1f} s")
    print(f"  compile notice on stderr: first run {'yes' if noticed_first else 'NO'}, last warm run "
          f"{'YES' if 'compiling solver kernels' in STDERR['warm run'] else 'no'}")
    print(f"where a warm run goes (best of {args.repeats}; baseline: bare interpreter {bare:.2f} s):")
    for label, key, seconds in (("bare interpreter", "bare interpreter", bare),
                                ("import poise.api", "import poise.api", imports),
                                ("run without report (incl. imports)", "run without report", engine),
                                ("poise report DIR (report alone, incl. imports)", "report alone",
                                 report)):
        print(f"  {label:48s} {seconds:6.2f} s  = {seconds / bare:5.1f}x baseline   "
              f"CPU {CPU[key]:5.2f} s")
    print(f"CPU of the whole command (all processes): first run {CPU['first run']:.2f} s, "
          f"warm {CPU['warm run']:.2f} s")


if __name__ == "__main__":
    main()
