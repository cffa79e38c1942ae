"""Fuzzing `poise check` with byte-level mutations of the bundled study files.

1,000 mutated copies of configs/*.toml and configs/sbml_enzyme/study.toml (seed
fixed, so any failure is reproducible) go through the installed `poise` console
script. Every one must end with exit status 0 or 2, print no traceback and no raw
control or text-direction character (which could rewrite the terminal), and take
less than 30 s. (Mutating the SBML files themselves is test_sbml's business.)

Starting a Python interpreter for each of 1,000 files would take most of half an
hour, so a driver process executes the console script file itself (runpy, as the
interpreter does when the script is run) once per file, with its own arguments,
output streams and a 30 s alarm; a crash of the driver (a segfault) is caught as
well, and the last file it started is named. The first few mutations also run as
separate processes of the console script, and must give the same exit status.
"""

from __future__ import annotations

import json
import random
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SOURCES = sorted(ROOT.glob("configs/*.toml")) + [ROOT / "configs" / "sbml_enzyme" / "study.toml"]
SEED = 14
MUTATIONS = 1000
LIMIT = 30               # seconds per file; a hang guard, not a timing check
SEPARATE = 6             # mutations also run as their own console-script processes
POISE = shutil.which("poise", path=str(Path(sys.executable).parent)) or shutil.which("poise")
# bytes that tend to matter to TOML, to the expression parser or to a terminal
INTERESTING = b"\x00\x1b\x7f\xff\"'[]{}=,.\n\t#\\0123456789-+*/()eE_"
# TOML escapes that put control and text-direction characters into a valid string
TOKENS = [b"\\u001b[2J", b"\\u202e", b"\\u0000", b"\\r", b"\\n", b"\\b", b"\\u009b"]

DRIVER = textwrap.dedent(r"""
    import contextlib, io, json, runpy, signal, sys, time, traceback

    script, files, limit, progress = sys.argv[1], json.loads(sys.argv[2]), int(sys.argv[3]), sys.argv[4]

    class Hang(BaseException):
        pass

    def alarm(signum, frame):
        raise Hang()

    signal.signal(signal.SIGALRM, alarm)
    results = []
    for path in files:
        with open(progress, "w") as mark:
            mark.write(path)
        out, err = io.StringIO(), io.StringIO()
        sys.argv = [script, "check", path]
        started = time.monotonic()
        signal.alarm(limit)
        try:
            with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
                runpy.run_path(script, run_name="__main__")
            status, problem = 0, None   # a script that returns without sys.exit
        except SystemExit as exc:
            status = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
            problem = None
        except Hang:
            status, problem = None, "hang"
        except BaseException:
            status, problem = None, traceback.format_exc()
        finally:
            signal.alarm(0)
        if problem is None and "Traceback" in err.getvalue():
            problem = err.getvalue()
        shown = out.getvalue() + err.getvalue()
        raw = sorted({c for c in shown if (ord(c) < 32 and c not in "\t\n") or 127 <= ord(c) < 160
                      or c in "\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"})
        if problem is None and raw:
            problem = "printed raw control characters " + repr("".join(raw))
        results.append({"file": path, "status": status, "problem": problem,
                        "seconds": round(time.monotonic() - started, 3)})
    print(json.dumps(results))
""")


def mutate(data: bytes, rng: random.Random) -> bytes:
    """One to eight byte-level edits: bit flips, replaced, inserted and deleted bytes,
    duplicated and deleted runs, and inserted TOML escapes of control characters."""
    data = bytearray(data)
    for _ in range(rng.randint(1, 8)):
        kind, at = rng.randrange(7), rng.randrange(len(data) + 1)
        inside = at % len(data) if data else 0
        if kind == 0 and data:
            data[inside] ^= 1 << rng.randrange(8)
        elif kind == 1 and data:
            data[inside] = rng.randrange(256)
        elif kind == 2:
            data.insert(at, rng.choice(INTERESTING))
        elif kind == 3 and data:
            del data[inside]
        elif kind == 4 and data:
            data[inside:inside] = data[inside:inside + rng.randint(1, 40)]
        elif kind == 6:
            data[at:at] = rng.choice(TOKENS)
        elif data:
            del data[inside:inside + rng.randint(1, 40)]
    return bytes(data)


@pytest.fixture(scope="module")
def mutated(tmp_path_factory) -> list[Path]:
    folder = tmp_path_factory.mktemp("fuzz")
    shutil.copy(ROOT / "configs" / "sbml_enzyme" / "model.xml", folder / "model.xml")
    rng = random.Random(SEED)
    sources = [(path.stem if path.stem != "study" else path.parent.name, path.read_bytes())
               for path in SOURCES]
    files = []
    for number in range(MUTATIONS):
        name, data = sources[number % len(sources)]
        path = folder / f"{number:04d}_{name}.toml"
        path.write_bytes(mutate(data, rng))
        files.append(path)
    return files


def test_the_mutations_are_reproducible_and_mostly_changed(mutated):
    rng = random.Random(SEED)
    first = mutate(SOURCES[0].read_bytes(), rng)
    assert mutated[0].read_bytes() == first
    changed = sum(path.read_bytes() not in {s.read_bytes() for s in SOURCES} for path in mutated)
    assert changed >= 0.95 * MUTATIONS


@pytest.mark.slow
def test_poise_check_survives_every_mutation(mutated, tmp_path):
    assert POISE, "the poise console script is not installed"
    progress = tmp_path / "started"
    process = subprocess.run([sys.executable, "-c", DRIVER, POISE, json.dumps([str(p) for p in mutated]),
                              str(LIMIT), str(progress)],
                             capture_output=True, text=True, timeout=MUTATIONS * 5, cwd=tmp_path)
    if process.returncode != 0:
        last = progress.read_text() if progress.exists() else "none"
        pytest.fail(f"the driver died (status {process.returncode}) while checking {last}:\n"
                    f"{process.stderr[-3000:]}")
    results = json.loads(process.stdout)
    assert len(results) == MUTATIONS
    bad = [r for r in results if r["problem"] or r["status"] not in (0, 2) or r["seconds"] > LIMIT]
    assert not bad, json.dumps(bad[:5], indent=1)
    statuses = [r["status"] for r in results]
    # both outcomes occur: the mutations reach past the TOML reader into validation
    assert statuses.count(0) >= 20 and statuses.count(2) >= 20, (statuses.count(0), statuses.count(2))

    for result in results[:SEPARATE]:   # the console script as a process of its own
        alone = subprocess.run([POISE, "check", result["file"]], capture_output=True, text=True,
                               timeout=LIMIT * 4, cwd=tmp_path)
        assert alone.returncode == result["status"], alone.stderr
        assert "Traceback" not in alone.stderr
