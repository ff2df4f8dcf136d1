"""How many threads numpy's BLAS runs in broodline's processes: one, unless the user set a number.

The variables are read when numpy is first imported, so ``one_blas_thread``
is called before that: by the command line first thing, and by the fork
server (``sim.parallel.warm``) before it loads the engines. This module
imports nothing.
"""

import os

__all__ = ["BLAS_THREADS", "one_blas_thread"]

BLAS_THREADS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def one_blas_thread() -> None:
    """Ask numpy's BLAS for one thread in this process and in the processes it starts, unless
    the user set a number: the variables are read when numpy is first imported, so this is
    called before (by the command line, and by the fork server). broodline's matrices are a
    few ages across, and its workers use every core between them, so more BLAS threads
    could only oversubscribe the cores (common practice for process pools); idle, they spun
    for about 0.1 s of CPU in the writer's start-up and in the fork server's (profiled)."""
    for variable in BLAS_THREADS:
        os.environ.setdefault(variable, "1")
