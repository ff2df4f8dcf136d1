"""What a worker process needs before its first batch, loaded once by the fork server.

Importing this module imports the engines (numba), the shard writer (h5py)
and the config schema (pydantic), and sets up numba's code generator, which
loading the engines' cached machine code would otherwise do in the first
batch. The fork server (``sim.parallel.start.worker_context``) imports it
before forking any worker, so every worker starts with all of it loaded; a
spawned worker imports it in its initializer.
"""

from .. import replicates  # noqa: F401  (the engines, numba)
from ..store import writer  # noqa: F401  (h5py: workers save their own shards)
from . import work  # noqa: F401


def _set_up_code_generator() -> None:
    try:
        from numba.core.registry import cpu_target

        cpu_target.target_context.refresh()
    except Exception:  # an internal of numba: if it moves, the first batch does this itself
        pass


_set_up_code_generator()
