"""What a worker process needs before its first batch, loaded once by the fork server.

Importing this module imports the engines (numba) and the shard saver (h5py),
not the config schema (pydantic: a worker is sent plain ``PointRun`` data),
and sets up numba's code generator, which
loading the engines' cached machine code would otherwise do in the first
batch. The fork server (``sim.parallel.start.worker_context``) imports it
before forking any worker, so every worker starts with all of it loaded; a
spawned worker imports it in its initializer.

Three settings come first, before numpy is imported:

- Ctrl-C and SIGTERM are ignored: the writer alone handles them
  (``sim.parallel.signals``).

- Python's cyclic garbage collector is paused while the modules load and the
  objects they made are then frozen (``gc.freeze``), as the ``gc`` module's
  documentation advises for a process that forks workers: the collections that
  loading triggers took a sixth of the fork server's start-up (profiled), and a
  worker's collections then skip the frozen objects.
- One BLAS thread (``sim.parallel.blas``), unless the user set a number.
"""

import gc
import sys

from .blas import one_blas_thread
from .signals import ignore_stop_signals

# Setting up the code generator imports numba's implementations of numpy, among them a check
# for a BLAS at import, which imports scipy.linalg (a sixth of the fork server's start-up,
# measured with -X importtime). Its answer is read only when compiling np.correlate or
# np.convolve (then a plain loop instead of BLAS); np.dot and np.linalg check again when they
# are compiled, and the engines' compiled passes call none of them. So in a worker that check
# is answered "none" at once: None in sys.modules makes an import raise ImportError (Python's
# import system documentation), and the entry is removed afterwards, so scipy.linalg imports
# as usual later.
_BLAS = "scipy.linalg.cython_blas"


def _set_up_code_generator() -> None:
    blocked = _BLAS not in sys.modules and "scipy.linalg" not in sys.modules
    if blocked:
        sys.modules[_BLAS] = None
    try:
        from numba.core.registry import cpu_target

        cpu_target.target_context.refresh()
    except Exception:  # an internal of numba: if it moves, the first batch does this itself
        pass
    finally:
        if blocked and sys.modules.get(_BLAS) is None:
            sys.modules.pop(_BLAS, None)


ignore_stop_signals()  # in the fork server (its forks inherit it) and in a spawned worker
_collecting = gc.isenabled()
gc.disable()
try:
    one_blas_thread()
    from .. import replicates  # noqa: F401  (the engines, numba)
    from ..store import shards  # noqa: F401  (h5py: workers save their own shards)
    from . import work  # noqa: F401

    _set_up_code_generator()
    gc.freeze()  # what was loaded lives as long as the process: no collection need walk it again
finally:
    if _collecting:
        gc.enable()
