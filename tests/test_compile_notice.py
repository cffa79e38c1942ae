"""The one-line notice when numba compiles kernels (issue 18, item 6).

The check is against numba's own on-disk cache: a fresh cache directory must compile
(notice once, however many kernels), the same directory again must load from the cache
(no notice). Each case runs in a fresh interpreter, as a user's command does.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

from poise.engine.compile_notice import ENVIRONMENT_SWITCH, MESSAGE

KERNELS = textwrap.dedent("""
    from numba import njit

    @njit(cache=True)
    def twice(x):
        return 2.0 * x

    @njit(cache=True)
    def thrice(x):
        return 3.0 * x
""")
CALLER = ("import sys; sys.path.insert(0, sys.argv[1]); "
          "from poise.engine.compile_notice import announce_compiling; announce_compiling(); "
          "import kernels_for_notice as k; assert k.twice(1.0) + k.thrice(1.0) == 5.0")


def _stderr(folder, switch_on: bool) -> str:
    env = dict(os.environ, NUMBA_CACHE_DIR=str(folder / "cache"))
    env.pop(ENVIRONMENT_SWITCH, None)
    if switch_on:
        env[ENVIRONMENT_SWITCH] = "1"
    done = subprocess.run([sys.executable, "-c", CALLER, str(folder)], env=env, capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return done.stderr


def test_notice_once_when_compiling_and_never_from_the_cache(tmp_path):
    (tmp_path / "kernels_for_notice.py").write_text(KERNELS)
    first = _stderr(tmp_path, switch_on=True)
    # numba's cache is empty: both kernels compile, the notice is said exactly once
    assert first.count(MESSAGE) == 1, first
    # numba's cache now holds both kernels (numba docs, "Cache sharing"): nothing compiles
    assert MESSAGE not in _stderr(tmp_path, switch_on=True)


def test_library_use_stays_silent(tmp_path):
    (tmp_path / "kernels_for_notice.py").write_text(KERNELS)
    # compiling, but the `poise` command did not ask for the notice
    assert MESSAGE not in _stderr(tmp_path, switch_on=False)
