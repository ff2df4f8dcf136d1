"""Progress of an experiment's results file, read while it is written, after a crash, or when done."""

from __future__ import annotations

import json
import shlex
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .store import count_outcomes, parts_dir, read_attrs, read_points, writer_state
from .vocabulary import DECIDED

__all__ = ["ExperimentStatus", "experiment_status", "resume_command"]


@dataclass
class ExperimentStatus:
    """Where an experiment stands.

    Attributes
    ----------
    path : Path
    state : str
        ``complete``, ``running`` (a broodline process is writing it) or
        ``stopped`` (unfinished, nobody writing: finish with ``--resume``).
    done, total : int
        Replicates saved so far and in the whole experiment.
    fixed : int
        Replicates that ended in ``fixed_outcome`` so far.
    fixed_outcome : str
        ``mutant-fixed`` with ``[invasion]``, else ``fixed``.
    table : DataFrame
        Per point: ``point``, the swept values, ``done``, ``of``, ``fixed``,
        ``fixed_fraction`` (of the resolved replicates done: capped and
        undecided ones are left out, not counted as losses), ``capped``.
    writer : str
        Who holds the writer's lock (``pid N on HOST``) while running.
    resume : str
        The command line that finishes the file (``broodline run CONFIG -o FILE
        --resume``, or ``broodline locate ...`` for a file ``locate`` writes).
    """

    path: Path
    state: str
    done: int
    total: int
    fixed: int
    fixed_outcome: str
    table: pd.DataFrame
    writer: str = ""
    resume: str = ""

    def __str__(self) -> str:
        share = f" ({self.done / self.total:.0%})" if self.total else ""
        state = {"running": f"running ({self.writer})" if self.writer else "running",
                 "stopped": "stopped before the end: finish it with "
                            f"`{self.resume or resume_command(self.path, {})}`",
                 "complete": "complete"}[self.state]
        head = (f"{self.path}: {state}\n{self.done} of {self.total} replicates done{share}, "
                f"{self.fixed_outcome} so far {self.fixed}")
        with pd.option_context("display.width", 120, "display.max_columns", 20,
                               "display.float_format", "{:.3f}".format):
            return head + "\n" + self.table.to_string(index=False)


def experiment_status(path) -> ExperimentStatus:
    """Progress per sweep point of a results file (finished, running or stopped).

    Reads only the finished shards (or the merged file): safe while another
    process writes the experiment.
    """
    path = Path(path)
    state = writer_state(path)  # before reading: a run finishing meanwhile is then read whole
    attrs = read_attrs(path)
    points = read_points(path)
    outcomes = count_outcomes(path)  # streamed: flat in the number of replicates
    fixed_name = "mutant-fixed" if attrs.get("mutant") else "fixed"
    n = len(points)
    point, count = outcomes["point"].to_numpy(), outcomes["count"].to_numpy()
    done = np.bincount(point, weights=count, minlength=n).astype(np.int64)
    fixed = np.bincount(point, weights=count * (outcomes["outcome"] == fixed_name), minlength=n)
    capped = np.bincount(point, weights=count * (outcomes["outcome"] == "capped"), minlength=n)
    resolved = np.bincount(point, weights=count * outcomes["outcome"].isin(DECIDED), minlength=n)
    per_point = attrs.get("replicates", attrs["config"]["experiment"]["replicates"])
    table = points.copy()
    table["done"] = done
    table["of"] = per_point
    table["fixed"] = fixed.astype(np.int64)
    with np.errstate(invalid="ignore", divide="ignore"):
        table["fixed_fraction"] = np.where(resolved > 0, fixed / np.maximum(resolved, 1), np.nan)
    if capped.any():
        table["capped"] = capped.astype(np.int64)
    writer = ""
    if state == "running":
        try:
            writer = (parts_dir(path) / "lock").read_text().strip()
        except OSError:
            pass
    return ExperimentStatus(path=path, state=state, done=int(done.sum()), total=int(per_point * n),
                            fixed=int(fixed.sum()), fixed_outcome=fixed_name, table=table,
                            writer=writer, resume=resume_command(path, attrs))


def resume_command(path, attrs: dict, *, config=None) -> str:
    """The command line that finishes the results file ``path``, whose root attributes are ``attrs``.

    A file ``broodline locate`` wrote (its ``locate`` attribute: parameter, bracket,
    tolerance and budget) is finished by ``locate --resume`` with the same design; when the
    stages so far leave no room for another within its budget, the command doubles the
    budget (any larger one goes on). ``config``: the config's path (default ``CONFIG``, as
    the file does not record it).
    """
    config = shlex.quote(str(config)) if config else "CONFIG"
    out = shlex.quote(str(path))
    if "locate" not in attrs:
        return f"broodline run {config} -o {out} --resume"
    design = json.loads(attrs["locate"])
    budget = int(design["budget"])
    per_stage = int(attrs.get("replicates", attrs["config"]["experiment"]["replicates"]))
    if (int(attrs.get("n_points", 0)) + 1) * per_stage > budget:  # locate's own budget rule
        budget *= 2
    low, high = design["bracket"]
    return (f"broodline locate {config} --parameter {shlex.quote(design['parameter'])} "
            f"--bracket {float(low)!r} {float(high)!r} --tolerance {float(design['tolerance'])!r} "
            f"--budget {budget} -o {out} --resume")
