"""One line on stderr when numba compiles solver kernels in this process.

numba keeps compiled kernels on disk, so only the first run after installing (or
after the cache is cleared) compiles them, which takes tens of seconds while nothing
else moves on the screen. numba raises its "numba:compile" event only when a kernel
is missing from that cache, so listening for it says so exactly when it happens,
once per process (workers that compile say it too: their stderr is the terminal).
"""

from __future__ import annotations

import os
import sys
import threading

# Set by the `poise` command (not by library use) so that its worker processes,
# which inherit the environment, say it as well.
ENVIRONMENT_SWITCH = "POISE_COMPILE_NOTICE"
# Compiling every kernel the bundled switch study needs, measured with
# benchmarks/bench_startup.py on a 2-core machine (first run minus warm run).
TYPICAL_SECONDS = 30
MESSAGE = (f"poise: compiling solver kernels (first run only, about {TYPICAL_SECONDS} s); "
           "later runs load them from the cache")

_LOCK = threading.Lock()
_STATE = {"listening": False, "said": False}


def announce_compiling(stream=None) -> None:
    """Say `MESSAGE` on stderr the first time numba compiles a kernel in this process.

    Does nothing unless ``POISE_COMPILE_NOTICE`` is set in the environment; safe to
    call more than once.
    """
    if not os.environ.get(ENVIRONMENT_SWITCH):
        return
    with _LOCK:
        if _STATE["listening"]:
            return
        _STATE["listening"] = True
    from numba.core import event

    class _FirstCompile(event.Listener):
        def on_start(self, _event):
            if not os.environ.get(ENVIRONMENT_SWITCH):   # the command that asked has ended
                return
            with _LOCK:
                if _STATE["said"]:
                    return
                _STATE["said"] = True
            print(MESSAGE, file=stream or sys.stderr, flush=True)

        def on_end(self, _event):
            pass

    event.register("numba:compile", _FirstCompile())
