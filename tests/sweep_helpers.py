"""Point functions for tests/test_sweep.py that worker processes can import
(a spawned worker imports the function by module and name)."""

import os

from compiler.sweep.point import evaluate_point

STOP_AT = 3


def die_on_point(task):
    """Like evaluate_point, but the worker process computing point STOP_AT
    dies on the spot (as if killed or out of memory)."""
    if task.index == STOP_AT:
        os._exit(17)
    return evaluate_point(task)



def how_started(task):
    """What a local worker knows of its own start: forked by the fork
    server (which had the package imported), the modules present, its
    thread settings."""
    import multiprocessing.forkserver
    import sys
    from compiler.sweep.execute import PRELOAD
    from compiler.sweep.point import worker_info
    return {"index": task.index, "forkserver": multiprocessing.forkserver.get_inherited_fds()
            is not None, "parent": multiprocessing.parent_process().pid,
            "modules": sorted(m for m in PRELOAD if m in sys.modules),
            "env": worker_info()["env"]}
