"""Throughput and peak memory of a whole run at N = 2^12 and 2^16, for 1 and 2 jobs.

Model: configs/reef_grazing.toml (two states, five uncertain parameters, three
claims). By default ``[sensitivity] method = "none"``, so the design is a plain
scrambled Sobol design of exactly N sets; ``--saltelli`` keeps the Sobol-index design
(N * (5 + 2) sets). Default ``[run] chunk_size`` (2048) unless ``--chunk-size``.

Every run is a fresh process, so start-up (imports, compiling the model, starting
worker processes) is part of what is measured:

* engine: ``poise.api.run_study(..., report=False)`` in a child Python: sampling,
  chunks, checkpoints, assembling the tables and summary.json;
* cli (``--cli``): ``poise run ... --quiet``, which also writes the report.

Reported per run: wall seconds of the child; engine seconds (manifest.json
``seconds``: run_study without interpreter start-up and report); sets per engine
second; CPU seconds of the child and its workers (user + system, from os.wait4:
on a machine shared with other work, cpu(jobs 2) close to cpu(jobs 1) means the
workers add little overhead even where the wall time cannot show a speed-up); peak
RSS of the whole process tree (the child plus its worker processes,
summed, sampled every 20 ms with psutil); and the largest single process's peak RSS
(ru_maxrss from os.wait4 on the child, which covers its waited-for workers).

Usage::

    python benchmarks/bench_scale.py [--sizes 12 16] [--jobs 1 2] [--saltelli] [--cli]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import psutil

ROOT = Path(__file__).resolve().parents[1]
STUDY = ROOT / "configs" / "reef_grazing.toml"
ENGINE = ("import sys; import poise; from poise.api import run_study; "
          "run_study(poise.load_study(sys.argv[1]), sys.argv[2], size=int(sys.argv[3]), "
          "jobs=int(sys.argv[4]), chunk_size=int(sys.argv[5]) or None, report=False)")


def study_file(folder: Path, saltelli: bool) -> Path:
    text = STUDY.read_text()
    if not saltelli:
        text = text.replace('method = "sobol"', 'method = "none"')
        assert 'method = "none"' in text
    path = folder / "reef_bench.toml"
    path.write_text(text)
    return path


def measure(command: list[str], env: dict) -> dict:
    """Wall time and peak RSS (tree sum, sampled; largest process, exact) of a command."""
    started = time.perf_counter()
    with tempfile.TemporaryFile() as errors:
        child = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=errors)
        root = psutil.Process(child.pid)
        peak = 0
        while True:
            pid, status, usage = os.wait4(child.pid, os.WNOHANG)
            if pid:
                break
            total = 0
            try:
                for process in [root] + root.children(recursive=True):
                    try:
                        total += process.memory_info().rss
                    except psutil.Error:
                        pass
            except psutil.Error:
                pass
            peak = max(peak, total)
            time.sleep(0.02)
        child.returncode = os.waitstatus_to_exitcode(status)
        wall = time.perf_counter() - started
        if child.returncode != 0:
            errors.seek(0)
            raise SystemExit(f"run failed ({child.returncode}): {' '.join(command)}\n"
                             f"{errors.read().decode()}")
    # ru_maxrss of this child (KiB on Linux): the largest of it and its waited-for workers
    return {"wall": wall, "tree_peak_mb": peak / 2**20, "largest_mb": usage.ru_maxrss / 1024,
            "cpu": usage.ru_utime + usage.ru_stime}


def run_once(study: Path, out: Path, size: int, jobs: int, chunk_size: int, cli: bool, env: dict) -> dict:
    if cli:
        command = [sys.executable, "-m", "poise.cli", "run", str(study), "--out", str(out),
                   "--size", str(size), "--jobs", str(jobs), "--quiet"]
        if chunk_size:
            raise SystemExit("--chunk-size is for engine runs (set [run] chunk_size in the study)")
    else:
        command = [sys.executable, "-c", ENGINE, str(study), str(out), str(size), str(jobs), str(chunk_size)]
    result = measure(command, env)
    manifest = json.loads((out / "manifest.json").read_text())
    result.update(sets=manifest["n_sets"], chunks=len(manifest["chunks"]),
                  engine=manifest["seconds"], rate=manifest["n_sets"] / manifest["seconds"])
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[12, 16], help="powers of two for N")
    parser.add_argument("--jobs", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--saltelli", action="store_true", help="keep the Sobol-index design")
    parser.add_argument("--cli", action="store_true", help="time `poise run` (with the report)")
    parser.add_argument("--chunk-size", type=int, default=0, help="0 = the study's default (2048)")
    args = parser.parse_args()

    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT / "src"), env.get("PYTHONPATH", "")])
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at start; "
          f"mode: {'cli (with report)' if args.cli else 'engine (no report)'}; "
          f"design: {'Saltelli N*(k+2)' if args.saltelli else 'plain, N sets'}")
    header = f"{'N':>7} {'jobs':>4} {'sets':>7} {'chunks':>6} {'wall s':>7} {'engine s':>8} " \
             f"{'sets/s':>7} {'cpu s':>6} {'tree peak MB':>12} {'largest MB':>10}"
    print(header)
    results = {}
    with tempfile.TemporaryDirectory(prefix="poise-bench-") as folder:
        study = study_file(Path(folder), args.saltelli)
        for power in args.sizes:
            for jobs in args.jobs:
                out = Path(folder) / f"run-{power}-{jobs}"
                r = run_once(study, out, 2 ** power, jobs, args.chunk_size, args.cli, env)
                results[(power, jobs)] = r
                print(f"{2 ** power:>7} {jobs:>4} {r['sets']:>7} {r['chunks']:>6} {r['wall']:>7.1f} "
                      f"{r['engine']:>8.1f} {r['rate']:>7.0f} {r['cpu']:>6.1f} {r['tree_peak_mb']:>12.0f} "
                      f"{r['largest_mb']:>10.0f}", flush=True)
    print(f"load average at end {os.getloadavg()[0]:.2f}")
    for power in args.sizes:
        if (power, 1) in results and (power, 2) in results:
            one, two = results[(power, 1)], results[(power, 2)]
            print(f"N=2^{power}: speed-up jobs2/jobs1 = {two['rate'] / one['rate']:.2f} (engine), "
                  f"{one['wall'] / two['wall']:.2f} (wall)")
    low, high = min(args.sizes), max(args.sizes)
    if low != high:
        for jobs in args.jobs:
            if (low, jobs) in results and (high, jobs) in results:
                a, b = results[(low, jobs)], results[(high, jobs)]
                print(f"jobs={jobs}: RSS(2^{high})/RSS(2^{low}) = {b['tree_peak_mb'] / a['tree_peak_mb']:.2f} "
                      f"(tree), sets ratio {b['sets'] / a['sets']:.0f}")


if __name__ == "__main__":
    main()
