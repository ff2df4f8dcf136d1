"""The machine's own efficiency for an experiment's work: the ceiling a parallel run can reach.

``broodline bench --scaling`` compares a run on N workers with a run on one.
On a shared or virtual machine, N processes that compute at once may each run
slower than one alone (a hypervisor's other guests, a lower all-core clock,
shared caches), so part of a shortfall can be the machine's and not the
program's. This measures that part directly: the same batches of the same
experiment, simulated by one process alone and then by N processes at once,
each process started and its engines loaded before a barrier releases them
together, with no writer, no shards, no merge and no start-up in the timed
span. ``efficiency`` = alone / (N x together) is then what this machine gives
this work, with nothing of the program's parallel machinery in it; a run's
efficiency divided by it is the share of the machine's efficiency the
program keeps.

The processes take the batches a run would (``sim.parallel.iter_batches``, the
last ones tapered) from one shared counter, as the pool's workers take them
from its queue, so they finish close together.
"""

from __future__ import annotations

import multiprocessing
import time
from dataclasses import dataclass

__all__ = ["MachineRound", "machine_round"]

WARM_REPLICATES = 8  # simulated before the barrier (another seed): compiled code loaded


@dataclass(frozen=True)
class MachineRound:
    """One measurement: the batches alone and on ``workers`` processes at once (seconds), and
    the replicates simulated in each (every replicate of the experiment, once)."""

    workers: int
    alone_s: float
    together_s: float
    replicates_alone: int = 0
    replicates_together: int = 0

    @property
    def efficiency(self) -> float:
        """alone / (workers x together): 1 where N processes run N times the work."""
        return self.alone_s / (self.workers * self.together_s)


def _simulate(raw: dict, batches: list[tuple[int, int]], next_batch, barrier, conn) -> None:
    """One process: load the engines and the point, wait for the others, then simulate
    batches taken from the shared counter until none is left; send the timed span."""
    try:
        from .config import parse_config, sweep_points
        from .parallel import run_kept_replicates
        from .point_run import PointRun

        config = parse_config(raw)
        run = PointRun.of(sweep_points(config)[0])
        seed = config.experiment.seed
        run_kept_replicates(run, range(WARM_REPLICATES), seed + 1, run.trajectory)
    except BaseException:
        barrier.abort()  # the others stop waiting (BrokenBarrierError), and the caller hears of it
        raise
    barrier.wait()
    started, simulated = time.perf_counter(), 0
    while True:
        with next_batch.get_lock():
            index = next_batch.value
            next_batch.value += 1
        if index >= len(batches):
            break
        first, last = batches[index]
        run_kept_replicates(run, range(first, last + 1), seed, run.trajectory)  # as a worker does
        simulated += last - first + 1
    conn.send((started, time.perf_counter(), simulated))
    conn.close()


def _timed(raw: dict, batches: list[tuple[int, int]], processes: int) -> tuple[float, int]:
    """Seconds from the barrier's release to the last process's end; replicates simulated."""
    context = multiprocessing.get_context("spawn")
    next_batch = context.Value("q", 0)
    barrier = context.Barrier(processes)
    pipes, children = [], []
    for _ in range(processes):
        receive, send = context.Pipe(duplex=False)
        child = context.Process(target=_simulate, args=(raw, batches, next_batch, barrier, send))
        child.start()
        send.close()
        pipes.append(receive)
        children.append(child)
    try:
        spans = [pipe.recv() for pipe in pipes]
    except EOFError:
        raise RuntimeError("a process of the machine reference failed") from None
    finally:
        for child in children:
            child.join()
    return (max(end for _, end, _ in spans) - min(start for start, _, _ in spans),
            sum(simulated for _, _, simulated in spans))


def machine_round(raw: dict, workers: int, batch_size: int, *, alone_first: bool = True) -> MachineRound:
    """Simulate the experiment ``raw`` (one sweep point) alone and on ``workers`` processes at
    once, in batches of ``batch_size`` replicates; ``alone_first`` says which goes first."""
    if workers < 1:
        raise ValueError(f"workers must be >= 1; got {workers}")
    from .parallel import iter_batches

    replicates = raw["experiment"]["replicates"]
    plan = iter_batches({0: [range(replicates)]}, batch_size, taper=workers)
    batches = [(b.first, b.last) for b in plan]  # the pool's plan, the last batches tapered
    order = (1, workers) if alone_first else (workers, 1)
    timed = {n: _timed(raw, batches, n) for n in order}
    return MachineRound(workers, timed[1][0], timed[workers][0], timed[1][1], timed[workers][1])
