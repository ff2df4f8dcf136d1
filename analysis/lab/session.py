"""The lab's session: the page's settings, its replicates, and the work that makes them.

Plain Python, no web code: the server calls these methods and serialises
``LabSession.view``. Replicate r of the page is replicate r of point 0 of the
saved config, drawn from ``SeedSequence(seed, spawn_key=(0, r))`` through
``sim.runner``, so ``broodline run`` of the saved config gives the same
replicates bit for bit. Long work (one replicate, N replicates) runs in one
worker thread; the page keeps answering and can stop it between batches.

Memory stays bounded however many replicates run: each finished replicate
goes to a temporary file (what Save writes), and the session keeps only its
outcome and the frequency lines of the last ``LINES_KEPT`` replicates.
"""

from __future__ import annotations

import os
import pickle
import tempfile
import threading
import warnings
import zlib
from collections import deque
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from sim.config import Config, ConfigError, parse_config, sweep_points
from sim.describe import ConfigWarning, preflight
from sim.lifecycle import initial_census
from sim.meanfield import NoEquilibriumError
from sim.model import BroodModel
from sim.outcomes import OUTCOMES, classify
from sim.replicates import ReplicateResult, replicate_rng, run_replicate, run_replicates
from sim.store import ResultsWriter

from ..estimates import FixationEstimate, wilson_interval
from .controls import control_of, control_value, controls, page_raw, set_control
from .theory import Theory, page_theory
from .toml_text import toml_text

__all__ = ["LabSession", "Tally", "SavedFiles", "mutant_frequency", "MAX_REPLICATES", "LINES_KEPT"]

BATCH = 10  # replicates per batch of an N-replicate run: the page's refresh and stop granularity
LINE_POINTS = 300  # a frequency line is thinned to about this many points for the page
LINES_KEPT = 100  # frequency lines kept and drawn: those of the most recent replicates
# The most replicates the page runs and holds. At 100,000 the Wilson 95% interval of the fixed
# fraction is at most +-0.0031 wide, finer than the 3 decimals the page shows, so more would not
# change what it shows; a K = 100 invasion runs them in about a minute and a half on one core.
# Larger experiments belong to `broodline run` (parallel workers, a resumable results file).
MAX_REPLICATES = 100_000


@dataclass(frozen=True)
class Tally:
    """Outcomes of the replicates so far: mutant fixed, lost, and the rest (unresolved)."""

    fixed: int
    lost: int
    unresolved: int
    estimate: FixationEstimate

    @property
    def n(self) -> int:
        return self.fixed + self.lost + self.unresolved


@dataclass(frozen=True)
class SavedFiles:
    """Where ``LabSession.save`` wrote the page's config and replicates (None: no replicates yet)."""

    config: Path
    results: Path | None


def mutant_frequency(counts: np.ndarray, mutant: int) -> np.ndarray:
    """The mutant's share of the census for each record (nan where no one is left).

    ``counts`` has shape (n_records, n_alleles, n_ages) or (n_records, n_alleles).
    """
    counts = np.asarray(counts, dtype=float)
    totals = counts.reshape(counts.shape[0], counts.shape[1], -1).sum(axis=2)
    size = totals.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(size > 0, totals[:, mutant] / size, np.nan)


def _thin(steps: np.ndarray, values: np.ndarray) -> tuple[list, list]:
    """At most about LINE_POINTS points of a line, its first and last kept, values rounded."""
    if steps.size > LINE_POINTS:
        keep = np.unique(np.linspace(0, steps.size - 1, LINE_POINTS).round().astype(int))
        steps, values = steps[keep], values[keep]
    return steps.tolist(), [None if not np.isfinite(v) else round(float(v), 4) for v in values]


def _cannot_start(config: Config) -> list[str]:
    """Why a valid config cannot run here: what ``broodline check`` refuses (a resident with no
    equilibrium, a starting census too large to count, work past the budget), or more
    replicates than the page holds. Nothing when it can."""
    problems = []
    if config.experiment.replicates > MAX_REPLICATES:
        problems.append(f"experiment.replicates: the lab runs at most {MAX_REPLICATES} replicates; "
                        f"got {config.experiment.replicates} (use `broodline run` for more)")
    try:
        initial_census(config)
    except NoEquilibriumError as err:
        return problems + [f"invasion.resident_count: {err}; give a number or change the resident"]
    except ConfigError as err:
        return problems + err.problems
    return problems + _check_problems(config)


def _check_problems(config: Config) -> list[str]:
    """What ``broodline check`` says is wrong with a config (its ``preflight``), or nothing."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConfigWarning)
            preflight(config)
    except NoEquilibriumError as err:
        return [f"invasion.resident_count: {err}"]
    except ConfigError as err:
        return err.problems
    return []


def _same_replicates(a: Config, b: Config) -> bool:
    """Whether two configs give the same replicates (``experiment.replicates`` only says how many)."""
    def key(c: Config) -> dict:
        d = c.model_dump()
        d["experiment"].pop("replicates")
        return d
    return key(a) == key(b)


class _Spool:
    """The finished replicates, in order, in a temporary file (compressed batches): what Save
    writes, kept off the heap. Appended under the session's lock; read with ``pread``, so a save
    reads the first ``count`` replicates while later ones are appended."""

    def __init__(self):
        self._file = tempfile.TemporaryFile(prefix="broodline-lab-")  # removed when closed
        self._ends: list[tuple[int, int]] = []  # (replicates so far, bytes so far) after each batch
        self.count = 0

    def add(self, results: list[ReplicateResult]) -> None:
        blob = zlib.compress(pickle.dumps(results, protocol=pickle.HIGHEST_PROTOCOL), 1)
        end = self._ends[-1][1] if self._ends else 0
        self._file.seek(end)
        self._file.write(len(blob).to_bytes(8, "little") + blob)
        self._file.flush()
        self.count += len(results)
        self._ends.append((self.count, end + 8 + len(blob)))

    def batches(self, count: int | None = None):
        """The stored batches (lists of ReplicateResult) holding the first ``count`` replicates."""
        count = self.count if count is None else count
        fd, offset = self._file.fileno(), 0
        for n, end in list(self._ends):
            if n > count:
                return
            size = int.from_bytes(os.pread(fd, 8, offset), "little")
            yield pickle.loads(zlib.decompress(os.pread(fd, size, offset + 8)))
            offset = end


class _Stepper:
    """The replicate being advanced a season at a time, with the stop rule of ``run_replicate``."""

    def __init__(self, config: Config, replicate: int):
        self.replicate = replicate
        self.config = config
        self.model = BroodModel(config, rng=replicate_rng(config.experiment.seed, 0, replicate))
        self.census = self.model.census()
        self.mutant = config.allele_index(config.invasion.mutant)
        self.steps, self.freq = [0], [float(mutant_frequency(self.census[None], self.mutant)[0])]
        self.state = _state(self.census, config)

    @property
    def finished(self) -> bool:
        exp = self.config.experiment
        if self.model.season >= exp.max_steps or int(self.census.sum()) > exp.max_population:
            return True
        return self.state != "undecided" and (exp.stop == "fixation" or self.state == "extinct")

    def step(self) -> None:
        self.model.step()
        self.census = self.model.census()
        self.state = _state(self.census, self.config)
        self.steps.append(self.model.season)
        self.freq.append(float(mutant_frequency(self.census[None], self.mutant)[0]))


class LabSession:
    """One page's state: settings (possibly invalid while being edited), replicates, theory.

    Parameters
    ----------
    config : Config
        The starting config; needs ``[invasion]``. A sweep is dropped (the
        page holds one point).
    """

    def __init__(self, config: Config):
        self._lock = threading.RLock()
        self._stop = threading.Event()
        self._worker: threading.Thread | None = None
        self.raw = page_raw(config)
        self.config = parse_config(self.raw)
        self.problems: list[str] = _cannot_start(self.config)
        self.generation = 0  # bumped when the replicates are discarded (reset, new settings)
        # each view's number, in the order they were taken: requests run on concurrent threads
        # and their answers may reach the page out of order, so the page keeps only the newest
        self._views = 0
        self._token = os.urandom(8).hex()  # this session's: a page left open over a restart starts again
        self._spool = _Spool()  # every finished replicate, on disk
        self.outcomes: list[str] = []  # each finished replicate's outcome, in order
        self.lines: deque[dict] = deque(maxlen=LINES_KEPT)  # the last replicates' frequency lines
        self.stepper: _Stepper | None = None
        self.shown: dict | None = None  # census of the replicate last advanced or finished
        self.activity = "idle"
        self.error = ""
        self.theory: Theory = page_theory(self.config)
        self._running_tally: tuple = (None, None)  # (generation, replicates) -> the series
        self._intervals: dict[tuple[int, int], FixationEstimate] = {}

    # -- settings ---------------------------------------------------------------------
    def update(self, changes: dict) -> list[str]:
        """Set controls (``{"mutant.fecundity": "4.5", ...}``); returns the schema's problems.

        Values are checked by the config schema, with its messages, and by
        what ``broodline check`` refuses. Accepted settings that give other
        replicates discard the replicates (they belong to another experiment)
        and recompute the theory (``experiment.replicates`` alone only says how
        many the next run makes). Refused ones are kept for the page to show,
        with the problems, while the last accepted config, its theory and its
        replicates stay in force unchanged. A run in progress is stopped first.
        Nothing changes when a step fails (an unknown control, an error computing the theory).
        """
        self.stop()
        with self._lock:
            raw = self.raw
            for key, value in changes.items():
                raw = set_control(raw, key, value)
            try:
                config = parse_config(raw)
                problems = _cannot_start(config)
            except ConfigError as err:
                config, problems = None, list(err.problems)
            if problems:
                self.raw, self.problems = raw, problems
                return problems
            # accepted: the page then shows the settings in force (an emptied field shows the
            # schema's default that now applies, not an empty box)
            raw = page_raw(config)
            if _same_replicates(config, self.config):
                self.raw, self.problems, self.config = raw, [], config
                return []
            theory = page_theory(config)  # first: should it fail, nothing has changed
            self.raw, self.problems, self.config, self.theory = raw, [], config, theory
            self._discard()
            return []

    @property
    def n_replicates(self) -> int:
        """Replicates finished so far (under the current settings)."""
        return len(self.outcomes)

    def stored_results(self):
        """The finished replicates (ReplicateResult), in order, read back from the session's file."""
        with self._lock:
            spool, count = self._spool, self._spool.count
        for batch in spool.batches(count):
            yield from batch

    def _discard(self) -> None:
        self._spool = _Spool()  # the old file goes when the last reader lets it go
        self.outcomes, self.stepper, self.shown = [], None, None
        self.lines = deque(maxlen=LINES_KEPT)
        self.generation += 1

    def reset(self) -> None:
        """Stop any run and discard the replicates; the settings stay."""
        self.stop()
        with self._lock:
            self._discard()

    # -- running ----------------------------------------------------------------------
    @property
    def running(self) -> bool:
        return self._worker is not None and self._worker.is_alive()

    def _ready(self) -> bool:
        return not self.problems and not self.running and not self._full()

    def _full(self) -> bool:
        """Whether the page holds ``MAX_REPLICATES`` replicates (then its message is shown)."""
        if self.stepper is not None or self.n_replicates < MAX_REPLICATES:  # an open replicate had room
            return False
        self.error = (f"the page holds at most {MAX_REPLICATES:,} replicates: Reset to start again, "
                      "or use `broodline run` for more")
        return True

    def step_season(self) -> bool:
        """Advance the current replicate one season (starting the next one if none is open).

        Returns False when nothing was done (a run in progress or invalid settings).
        """
        with self._lock:
            if not self._ready():
                return False
            if self.stepper is None:
                self.stepper = _Stepper(self.config, self.n_replicates)
            else:
                self.stepper.step()
            self._show_stepper()
            if self.stepper.finished:
                self._finish_stepper()
            return True

    def _show_stepper(self) -> None:
        s = self.stepper
        steps, freq = _thin(np.asarray(s.steps), np.asarray(s.freq))
        self.shown = {"replicate": s.replicate, "season": s.model.season, "census": s.census.tolist(),
                      "line": {"replicate": s.replicate, "steps": steps, "freq": freq}}

    def _finish_stepper(self) -> None:
        # the record of the replicate is run_replicate's own (same stream, so the same replicate)
        result = run_replicate(sweep_points(self.config)[0], self.stepper.replicate, self.config.experiment.seed)
        self.stepper = None
        self._add([result])

    def _add(self, results: list[ReplicateResult]) -> None:
        mutant = self.config.allele_index(self.config.invasion.mutant)
        for r in results[-LINES_KEPT:]:
            steps, freq = _thin(r.record_steps, mutant_frequency(r.trajectory, mutant))
            self.lines.append({"replicate": r.replicate, "outcome": r.outcome, "steps": steps, "freq": freq})
        self._spool.add(results)
        self.outcomes.extend(r.outcome for r in results)
        last = results[-1]
        census = last.trajectory[-1] if last.trajectory.size else np.zeros((len(self.config.allele), 1))
        if census.ndim == 1:  # trajectory = "by-allele": no ages recorded
            census = census[:, None]
        self.shown = {"replicate": last.replicate, "season": int(last.steps), "census": census.tolist(),
                      "line": None}

    def run_one(self) -> bool:
        """Run the current replicate (or the next) to its end in the worker, showing every season."""
        return self._start(self._run_one, "running one replicate")

    def run_many(self, n: int | None = None) -> bool:
        """Run ``n`` more replicates (default: ``experiment.replicates``) in the worker, in batches.

        Raises
        ------
        ValueError
            For ``n`` not a whole number from 1 to ``MAX_REPLICATES``. The page holds at
            most ``MAX_REPLICATES`` in all: a larger request runs what fits, and a full page
            runs none (it says so in ``error``; Reset empties it).
        """
        n = self.config.experiment.replicates if n is None else n
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= MAX_REPLICATES:
            raise ValueError(f"n: a whole number of replicates from 1 to {MAX_REPLICATES}; got {n!r}")
        room = MAX_REPLICATES - self.n_replicates
        if 0 < room < n:
            return self._start(lambda: self._run_many(room),
                               f"running {room} replicates (of {n} asked: the page holds {MAX_REPLICATES:,})")
        return self._start(lambda: self._run_many(n), f"running {n} replicates")

    def _start(self, work, activity: str) -> bool:
        with self._lock:
            if not self._ready():
                return False
            self._stop.clear()
            self.activity, self.error = activity, ""
            self._worker = threading.Thread(target=self._guarded, args=(work,), daemon=True,
                                            name="broodline-lab")
            self._worker.start()
            return True

    def _guarded(self, work) -> None:
        try:
            work()
        except Exception as err:  # shown on the page; the server keeps serving
            self.error = f"{type(err).__name__}: {err}"
        finally:
            self.activity = "idle"

    def _run_one(self) -> None:
        with self._lock:
            if self.stepper is None:
                self.stepper = _Stepper(self.config, self.n_replicates)
        while not self._stop.is_set():
            with self._lock:
                self.stepper.step()
                self._show_stepper()
                if self.stepper.finished:
                    self._finish_stepper()
                    return

    def _run_many(self, n: int) -> None:
        with self._lock:
            config, generation = self.config, self.generation
            self.stepper = None  # its replicate is run again below, whole
            start = self.n_replicates
        point, seed = sweep_points(config)[0], config.experiment.seed
        for first in range(start, start + n, BATCH):
            if self._stop.is_set():
                return
            results = run_replicates(point, range(first, min(first + BATCH, start + n)), seed)
            with self._lock:
                if generation != self.generation:
                    return
                self._add(results)

    def stop(self) -> None:
        """Stop a run after its current batch (or season) and wait for the worker.

        At most the batch under way when this is called is added afterwards.
        """
        self._stop.set()
        worker = self._worker
        if worker is not None:
            worker.join()

    def wait(self, timeout: float | None = None) -> None:
        """Wait for a run to finish (for scripts and tests)."""
        if self._worker is not None:
            self._worker.join(timeout)

    # -- results ----------------------------------------------------------------------
    def tally(self) -> Tally:
        """Mutant fixed / lost / unresolved so far, and the fixed fraction's Wilson interval."""
        with self._lock:
            outcomes = self.outcomes
        fixed, lost = outcomes.count("mutant-fixed"), outcomes.count("mutant-lost")
        return Tally(fixed, lost, len(outcomes) - fixed - lost, wilson_interval(fixed, len(outcomes)))

    def running_tally(self) -> dict:
        """The fixed fraction and its Wilson interval after each replicate (thinned)."""
        with self._lock:
            key = (self.generation, self.n_replicates)
            if self._running_tally[0] == key:
                return self._running_tally[1]
            fixed = np.cumsum([o == "mutant-fixed" for o in self.outcomes])
        n = np.arange(1, fixed.size + 1)
        stride = -(-n.size // LINE_POINTS)  # every stride-th replicate and the last: stable as runs grow
        keep = np.unique(np.r_[np.arange(0, n.size, stride), n.size - 1]) if n.size else n
        est = [self._wilson(int(fixed[i]), int(n[i])) for i in keep]
        out = {"n": n[keep].tolist(), "fraction": [e.fraction for e in est],
               "low": [e.low for e in est], "high": [e.high for e in est]}
        self._running_tally = (key, out)
        return out

    def _wilson(self, fixed: int, n: int) -> FixationEstimate:
        # kept: the running series asks again for the same points at every refresh
        if (fixed, n) not in self._intervals:
            self._intervals[(fixed, n)] = wilson_interval(fixed, n)
        return self._intervals[(fixed, n)]

    def saved_config(self) -> Config:
        """The page's settings as a config whose replicates are the ones run so far."""
        with self._lock:
            raw = dict(self.raw)
            n = self.n_replicates
        raw["experiment"] = {**raw.get("experiment", {}), "replicates": max(n, 1)}
        return parse_config(raw)

    def save(self, config_path, results_path=None, *, overwrite: bool = False) -> SavedFiles:
        """Write the settings as TOML (``broodline run`` accepts it) and the replicates as HDF5.

        The TOML's ``experiment.replicates`` is the number of replicates run
        here, so running it gives these replicates. Without replicates only the
        config is written.

        Raises
        ------
        FileExistsError
            When a file exists and ``overwrite`` is False.
        sim.config.ConfigError
            When the page's settings are invalid, or ``broodline check`` would
            refuse the config to be written (nothing is written then).
        """
        with self._lock:
            if self.problems:
                raise ConfigError(self.problems)
            config, spool, count = self.saved_config(), self._spool, self._spool.count
        problems = _check_problems(config)
        if problems:
            raise ConfigError(problems)
        config_path = Path(config_path)
        results_path = Path(results_path) if results_path is not None and count else None
        for path in (config_path, results_path):
            if path is not None and path.exists() and not overwrite:
                raise FileExistsError(f"{str(path)!r} exists; choose another name")
        stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
        config_path.write_text(toml_text(config, header=f"Saved from the broodline lab page, {stamp}."))
        if results_path is not None:
            with ResultsWriter(results_path, config, sweep_points(config), overwrite=overwrite) as writer:
                for batch in spool.batches(count):
                    writer.write(batch)
        return SavedFiles(config_path, results_path)

    # -- what the page shows --------------------------------------------------------------
    def view(self, since: int = 0, generation: int | None = None) -> dict:
        """Everything the page draws, as plain JSON values.

        ``lines`` holds the frequency lines of replicates ``since`` onwards
        (from 0 when ``generation`` differs from the session's), of the last
        ``LINES_KEPT`` replicates only; ``view`` numbers the views in the order
        they were taken (a later one shows every change made before it).
        """
        with self._lock:
            if generation != self.generation:
                since = 0
            tally = self.tally()
            self._views += 1
            return {
                "view": self._views,
                "session": self._token,
                "generation": self.generation,
                "settings": {c.key: control_value(self.raw, c.key) for c in controls(self.raw)},
                "problems": [{"control": control_of(p, self.raw), "message": p} for p in self.problems],
                "alleles": self.config.allele_names,
                "resident": self.config.invasion.resident,
                "mutant": self.config.invasion.mutant,
                "running": self.running,
                "activity": self.activity,
                "error": self.error,
                "replicates": self.n_replicates,
                "max_replicates": MAX_REPLICATES,
                "lines_kept": LINES_KEPT,
                "since": since,
                "lines": [line for line in self.lines if line["replicate"] >= since],
                "shown": self.shown,
                "tally": {"fixed": tally.fixed, "lost": tally.lost, "unresolved": tally.unresolved,
                          "n": tally.n, "fraction": tally.estimate.fraction, "low": tally.estimate.low,
                          "high": tally.estimate.high, "level": tally.estimate.level},
                "running_tally": self.running_tally(),
                "theory": self.theory.as_dict(),
            }


def _state(census: np.ndarray, config) -> str:
    """The outcome name of one census (counts by allele and age)."""
    states, _ = classify(census.sum(axis=1)[None], config)
    return OUTCOMES[int(states[0])]
