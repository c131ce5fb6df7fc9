"""Share per-molecule work of a training run between this process and spawned worker processes.

Curation and feature computation are pure Python over RDKit, one molecule at a time, so one core
does all of it while the other waits.  :func:`map_slices` runs a module-level function over
consecutive slices of the work: spawned workers take slices from the front, this process takes
them from the back until the two meet, so the work evens out although workers start late (their
imports take about a second).  Results come back in slice order, so the output is the same as one
pass whatever the number of processes.
"""
from __future__ import annotations

import multiprocessing
import os
import sys
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from typing import Callable, Sequence

SLICES_PER_PROCESS = 16  # small slices: the last ones in flight when the two ends meet are short
MIN_ITEMS_PER_PROCESS = 1500  # molecules per extra process: below this, starting one (about 1 s) costs more


def process_count(n_items: int, cores: int) -> int:
    """Processes worth starting for ``n_items`` molecules on ``cores`` cores (1: work in this process)."""
    return max(1, min(cores, n_items // MIN_ITEMS_PER_PROCESS))


def map_slices(fn: Callable, slices: Sequence, args: tuple = (), processes: int = 1) -> list:
    """``[fn(s, *args) for s in slices]`` over ``processes`` processes (this one included).

    ``fn`` must be a module-level function; its arguments and results must pickle.
    """
    if processes <= 1 or len(slices) <= 1 or not can_spawn():
        return [fn(s, *args) for s in slices]
    out: list = [None] * len(slices)
    done = [False] * len(slices)
    # spawn, not fork: a forked child inherits LightGBM's OpenMP state and can deadlock
    with ProcessPoolExecutor(processes - 1, mp_context=multiprocessing.get_context("spawn")) as pool:
        futures = {i: pool.submit(fn, s, *args) for i, s in enumerate(slices) if i > 0}
        out[0], done[0] = fn(slices[0], *args), True
        for i in reversed(futures):  # a slice no worker has started yet is done here
            if not futures[i].cancel():
                break
            out[i], done[i] = fn(slices[i], *args), True
        for i, fut in futures.items():
            if not done[i]:
                try:
                    out[i] = fut.result()
                except BrokenProcessPool:  # a worker died (killed, out of memory): its slices are done here
                    out[i] = fn(slices[i], *args)
    return out


def can_spawn() -> bool:
    """Whether a spawned worker can start: it imports the main script again, which is impossible when
    the program came from standard input.  (Scripts that call the training functions need the usual
    ``if __name__ == "__main__":`` guard of any code that starts processes.)"""
    path = getattr(sys.modules.get("__main__"), "__file__", None)
    return path is None or os.path.exists(path)


def split_even(n_items: int, processes: int) -> list[range]:
    """Consecutive index ranges for :func:`map_slices` (one range when ``processes`` is 1)."""
    k = 1 if processes <= 1 else max(1, min(n_items, SLICES_PER_PROCESS * processes))
    bounds = [round(i * n_items / k) for i in range(k + 1)]
    return [range(a, b) for a, b in zip(bounds[:-1], bounds[1:])]
