"""``broodline bench``: engine speed and memory on one fixed model, as ratios from one run.

The model: an iteroparous resident (m = 2, adult survival 0.5, juvenile
survival 0.5) at its equilibrium, one tenth as many semelparous mutants
(m = 4.5) added, Beverton-Holt density dependence on recruitment with
K = N (so the resident's equilibrium census is N), Poisson offspring. The
``care`` row is the individual engine on the same model with parental care
and a brood effect on both alleles (orphan survival 0.3, h = 8), set against
the plain individual engine at the same N.

Speed is individual-steps per second: the census size summed over the
seasons stepped, divided by the wall time of the steps (README, "Performance"). Each
engine is set against, at the same N,

- the *floor*: numpy drawing one uniform per individual (its survival) and
  one integer per recruit (its parent), nothing else, for the censuses and
  recruit numbers the ``individual`` engine met season by season;
- the ``agents`` Mesa reference engine (run at small N only: it is slow).

Memory per individual is measured, not estimated, two ways: the engine's
state held between seasons (the ``nbytes`` of its arrays; for the Mesa engine
the ``tracemalloc`` size of the model once built), and the peak during a
season (that state plus the ``tracemalloc`` peak of what one more season
allocates), each divided by the census size.

The variable-environment case times the ``individual`` engine at N = 1e6 (or
the largest N run) with two equally likely year types (juvenile survival x1.2
and x0.8, drawn independently each season), against the floor and against
the constant environment measured at the same N in the same run.

The single runs time one replicate of a small population (K = 100 and
K = 1000) for many seasons (``stop = "max-steps"``, every season recorded)
through ``replicates.run_replicate``, as ``broodline trace`` and the lab page
run one, against the floor for the censuses and recruits it met: what a long
run of one small population costs beyond its random numbers. Each is timed
three times, alternating with its floor, and the best of each is compared.

The small-population experiment times a whole invasion experiment at K = 200
(one mutant, to fixation, every season recorded) through
``replicates.run_replicates`` on one worker, batched, against the rate of the
``individual`` engine at N = 1e6 (or the largest N run, without 1e6).
"""

from __future__ import annotations

import textwrap
import time
import tracemalloc
from dataclasses import asdict, dataclass, field

import numpy as np

from .config import Config, parse_config, sweep_points
from .meanfield import solve_equilibrium
from .replicates import replicate_rng, run_replicate, run_replicates

__all__ = [
    "DEFAULT_SIZES",
    "LARGE_SIZE",
    "BenchRecord",
    "BenchReport",
    "ExperimentRecord",
    "EnvironmentRecord",
    "SingleRunRecord",
    "SINGLE_RUN_CAPACITIES",
    "BENCH_YEARS",
    "bench_config",
    "format_report",
    "run_bench",
    "traced_peak",
]

DEFAULT_SIZES = (1_000, 10_000, 100_000, 1_000_000)
LARGE_SIZE = 10_000_000
_FLOOR_CHUNK = 1 << 16
REFERENCE_SIZE = 1_000_000  # the small-population experiment is set against this N
SINGLE_RUN_CAPACITIES = (100, 1_000)  # K of the single long runs
MEMORY_METHOD = ("state B/ind: engine arrays held between seasons (nbytes; Mesa: tracemalloc "
                 "of the built model) per census individual; peak B/ind: that state plus the "
                 "tracemalloc peak of one more season")


@dataclass
class BenchRecord:
    """One engine at one census size."""

    engine: str
    census_size: int
    individual_steps_per_s: float
    ratio_to_floor: float | None
    ratio_to_agents: float | None
    bytes_per_individual: float | None
    peak_bytes_per_individual: float | None
    seasons: int
    wall_s: float


@dataclass
class ExperimentRecord:
    """The small-population invasion experiment run by one engine."""

    engine: str
    census_size: int
    replicates: int
    replicate_seasons: int
    individual_steps_per_s: float
    ratio_to_individual: float | None
    wall_s: float


@dataclass
class EnvironmentRecord:
    """The individual engine with an iid two-year-type environment, at one census size."""

    census_size: int
    individual_steps_per_s: float
    ratio_to_floor: float
    ratio_to_constant: float
    seasons: int
    wall_s: float


@dataclass
class SingleRunRecord:
    """One replicate of a small population run for many seasons by the individual engine."""

    capacity: int
    seasons: int
    mean_census: float
    individual_steps_per_s: float
    ratio_to_floor: float
    wall_s: float


@dataclass
class BenchReport:
    """Everything one ``run_bench`` measured."""

    records: list[BenchRecord]
    experiment: list[ExperimentRecord] = field(default_factory=list)
    seasons: int = 0
    min_time: float = 0.0
    reference_size: int | None = None  # N of the individual rate the experiment is set against
    environment: EnvironmentRecord | None = None
    single: list[SingleRunRecord] = field(default_factory=list)
    memory_method: str = MEMORY_METHOD

    def to_records(self) -> list[dict]:
        """The table as a list of dicts (what ``--json`` prints)."""
        out = [dict(asdict(r), kind="scale") for r in self.records]
        for e in self.experiment:
            out.append({"engine": e.engine, "census_size": e.census_size,
                        "individual_steps_per_s": e.individual_steps_per_s,
                        "ratio_to_floor": None, "ratio_to_agents": None,
                        "bytes_per_individual": None, "peak_bytes_per_individual": None,
                        "kind": "experiment",
                        "replicates": e.replicates, "replicate_seasons": e.replicate_seasons,
                        "ratio_to_individual": e.ratio_to_individual,
                        "reference_size": self.reference_size, "wall_s": e.wall_s})
        if self.environment is not None:
            e = self.environment
            out.append({"engine": "individual, iid years", "kind": "environment",
                        "ratio_to_agents": None, "bytes_per_individual": None,
                        "peak_bytes_per_individual": None, **asdict(e)})
        for e in self.single:
            out.append({"engine": "individual, one replicate", "kind": "single",
                        "census_size": e.capacity, "ratio_to_agents": None,
                        "bytes_per_individual": None, "peak_bytes_per_individual": None,
                        **asdict(e)})
        return out


CARE = {"orphan_survival": 0.3, "brood_effect": "exponential", "brood_scale": 8.0}
CARE_ENGINE = "care"  # the individual engine with CARE on both alleles (a row of the table)
BENCH_YEARS = {"switching": "iid", "year": [
    {"name": "good", "probability": 0.5, "juvenile_survival": 1.2},
    {"name": "bad", "probability": 0.5, "juvenile_survival": 0.8}]}


def bench_config(census_size: int, *, engine: str = "individual", mutant_count: int | None = None,
                 replicates: int = 1, seed: int = 20261202, record_every: int = 1,
                 care: bool = False, years: bool = False) -> Config:
    """The benchmark's model at equilibrium census ``census_size`` (K = N); with ``care``, both
    alleles also have orphan survival 0.3 and an exponential brood effect (h = 8), and K is
    scaled so that the resident's equilibrium census is still N; ``years``: with the iid
    two-year-type environment ``BENCH_YEARS``."""
    config = _bench_config(census_size, census_size, engine, mutant_count, replicates, seed,
                           record_every, CARE if care else {}, years)
    if not care:
        return config
    equilibrium = solve_equilibrium(config.schedules()[0], config.density_dependence(),
                                    offspring=config.offspring_distribution()).census_size
    return _bench_config(census_size, census_size**2 / equilibrium, engine, mutant_count,
                         replicates, seed, record_every, CARE, years)


def _bench_config(census_size, capacity, engine, mutant_count, replicates, seed, record_every,
                  extra, years=False) -> Config:
    return parse_config({**({"environment": BENCH_YEARS} if years else {}),
        "experiment": {"name": f"bench-{census_size}", "engine": engine, "seed": seed,
                       "replicates": replicates, "max_steps": 5000, "stop": "fixation",
                       "record_every": record_every, "max_population": 4_000_000_000},
        "density": {"form": "beverton-holt", "acts_on": "recruitment", "counted": "census",
                    "capacity": capacity},
        "offspring": {"distribution": "poisson"},
        "allele": [
            {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
             "adult_survival": 0.5, "juvenile_survival": 0.5, **extra},
            {"name": "one-shot", "breeding": "semelparous", "fecundity": 4.5,
             "juvenile_survival": 0.5, **extra},
        ],
        "invasion": {"resident": "perennial", "mutant": "one-shot",
                     "mutant_count": mutant_count or max(1, census_size // 10)},
    })


# -- one engine at one size ------------------------------------------------------------
def traced_peak(action) -> int:
    """Peak bytes allocated (tracemalloc) while ``action()`` runs, above what was held before."""
    tracemalloc.start()
    tracemalloc.reset_peak()
    before = tracemalloc.get_traced_memory()[0]
    action()
    peak = tracemalloc.get_traced_memory()[1] - before
    tracemalloc.stop()
    return peak


def _census_size(model) -> int:
    engine = model.engine
    return int(engine.batch.sizes[0]) if hasattr(engine, "batch") else len(model.agents)


def _held_bytes(model) -> int | None:
    engine = model.engine
    return engine.batch.state_bytes() if hasattr(engine, "batch") else None


def _time_engine(config: Config, seasons: int, seed: int, min_time: float = 0.0):
    """Time blocks of ``seasons`` seasons, each from the starting census, until ``min_time``.

    Every block starts a fresh model (untimed, on its own stream) so the
    population keeps the benchmark's make-up (a long run would let the
    mutant take over and change the work per individual). The first block
    is preceded by one untimed season: first calls pay one-off costs.

    Returns wall seconds of the steps, census sizes and recruits season by
    season, and (state, peak) bytes per individual.
    """
    from .model import BroodModel  # (mesa: loaded when an engine is timed, not by the command line)

    sizes, recruits, wall = [], [], 0.0
    block = 0
    while block == 0 or wall < min_time:
        tracemalloc.start()
        model = BroodModel(config, rng=replicate_rng(seed, 0, block))
        built = tracemalloc.get_traced_memory()[0]
        tracemalloc.stop()
        if block == 0:
            model.step()
            model = BroodModel(config, rng=replicate_rng(seed, 0, block))
        for _ in range(seasons):
            sizes.append(_census_size(model))
            start = time.perf_counter()
            model.step()
            wall += time.perf_counter() - start
            engine = model.engine
            recruits.append(int(engine.batch.recruits[0]) if hasattr(engine, "batch") else 0)
        block += 1
    n = _census_size(model)
    held = _held_bytes(model)
    peak = traced_peak(model.step)
    state = built if held is None else held
    return wall, sizes, recruits, (state / max(n, 1), (state + peak) / max(n, 1))


def _time_floor(sizes, recruits, seed: int, min_time: float = 0.0):
    """The floor: one uniform per individual and one integer per recruit, season by season.

    Drawn the fastest way numpy offers: in cache-sized chunks, the uniforms
    into a reused buffer (at N = 1e7 a single call would spend much of its
    time faulting in a fresh 80 MB array). The seasons are replayed,
    whole, until ``min_time`` seconds have been spent drawing.

    Returns the wall time, the census sizes drawn for, and the memory.
    """
    rng = np.random.default_rng(seed)
    buffer = np.empty(min(max(sizes), _FLOOR_CHUNK))

    def draw(n, r):
        for a in range(0, n, _FLOOR_CHUNK):
            rng.random(out=buffer[:min(_FLOOR_CHUNK, n - a)])
        for a in range(0, r, _FLOOR_CHUNK):
            rng.integers(0, max(n, 1), size=min(_FLOOR_CHUNK, r - a))

    wall, drawn = 0.0, []
    while not drawn or wall < min_time:
        for n, r in zip(sizes, recruits):
            start = time.perf_counter()
            draw(n, r)
            wall += time.perf_counter() - start
        drawn += sizes
    n, r = sizes[-1], recruits[-1]
    peak = buffer.nbytes + traced_peak(lambda: draw(n, r))
    return wall, drawn, (None, peak / max(n, 1))


def _record(engine, n, sizes, wall, memory):
    rate = sum(sizes) / wall if wall > 0 else float("inf")
    return BenchRecord(engine=engine, census_size=n, individual_steps_per_s=rate,
                       ratio_to_floor=None, ratio_to_agents=None, bytes_per_individual=memory[0],
                       peak_bytes_per_individual=memory[1], seasons=len(sizes), wall_s=wall)


# -- one replicate of a small population, many seasons -----------------------------------
SINGLE_RUN_REPEATS = 3  # the single runs and their floor are each timed so often; the best counts


def _time_single_run(capacity: int, seasons: int, seed: int) -> SingleRunRecord:
    """One replicate at K = ``capacity`` for ``seasons`` seasons through ``run_replicate`` (the
    stop rule, outcomes and records included), against the floor for its censuses and recruits.

    Both are timed ``SINGLE_RUN_REPEATS`` times, alternately, and the fastest of each is
    kept (as ``timeit`` advises: the slower repeats measure other programs, not this one;
    one run of under a second here varied by up to 1.8 times in CPU time on a shared machine).
    """
    config = bench_config(capacity, seed=seed)
    config = config.model_copy(update={"experiment": config.experiment.model_copy(
        update={"stop": "max-steps", "max_steps": seasons})})
    point = sweep_points(config)[0]
    run_replicate(point, 0, seed + 1)  # untimed: first calls pay one-off costs
    walls, floors = [], []
    for _ in range(SINGLE_RUN_REPEATS):
        start = time.perf_counter()
        result = run_replicate(point, 0, seed)
        walls.append(time.perf_counter() - start)
        census = result.trajectory.astype(np.int64)
        sizes = census[:-1].sum(axis=(1, 2)).tolist()  # the census stepped in each season
        recruits = census[1:, :, 0].sum(axis=1).tolist()  # who entered at age 1 (no ceiling here)
        floors.append(_time_floor(sizes, recruits, seed)[0])
    wall, floor_wall = min(walls), min(floors)
    return SingleRunRecord(capacity=capacity, seasons=result.steps,
                           mean_census=float(np.mean(sizes)),
                           individual_steps_per_s=sum(sizes) / wall,
                           ratio_to_floor=floor_wall / wall, wall_s=wall)


# -- the small-population experiment -------------------------------------------------------
def _time_experiment(engine: str, replicates: int, capacity: int, seed: int, *,
                     one_at_a_time: bool = False) -> ExperimentRecord:

    config = bench_config(capacity, engine=engine, mutant_count=1, replicates=replicates,
                          seed=seed)
    point = sweep_points(config)[0]
    start = time.perf_counter()
    if one_at_a_time:
        results = [run_replicate(point, r, seed) for r in range(replicates)]
    else:
        results = run_replicates(point, range(replicates), seed)
    wall = time.perf_counter() - start
    # every season is recorded: the census stepped in season t is record t (all but the last)
    work = sum(int(r.trajectory[:-1].sum()) for r in results)
    name = f"{engine} ({'one replicate at a time' if one_at_a_time else 'batched'})"
    return ExperimentRecord(engine=name, census_size=capacity, replicates=replicates,
                            replicate_seasons=sum(r.steps for r in results),
                            individual_steps_per_s=work / wall, ratio_to_individual=None,
                            wall_s=wall)


def run_bench(sizes=DEFAULT_SIZES, *, seasons: int = 20, min_time: float = 1.0,
              agents_max: int = 10_000, replicates: int = 10_000, capacity: int = 200,
              sequential: int | None = 1_000, single_seasons: int = 20_000,
              seed: int = 20261202, progress=None) -> BenchReport:
    """Time every engine at every census size, the floor, single long runs of small
    populations, and the small-population experiment.

    Parameters
    ----------
    sizes : sequence of int
        Census sizes N (K = N).
    seasons, min_time : int, float
        Each engine and size is timed over blocks of ``seasons`` seasons from
        the starting census, repeated until ``min_time`` seconds (short
        timings are at the mercy of the machine's moment-to-moment load).
    agents_max : int
        The Mesa ``agents`` engine runs only at N <= agents_max.
    replicates : int
        Replicates of the small-population experiment (0 skips it).
    capacity : int
        K of the small-population experiment.
    sequential : int or None
        Replicates also run one at a time, to show what batching buys (None skips).
    single_seasons : int
        Seasons of each single run of one replicate at K = 100 and 1000
        (``SINGLE_RUN_CAPACITIES``; 0 skips them).
    progress : callable, optional
        Called with a short message before each measurement.

    Returns
    -------
    BenchReport
    """
    say = progress or (lambda message: None)
    records = []
    for n in sizes:
        n = int(n)
        say(f"individual, N = {n}")
        wall, trace, recruits, mem = _time_engine(bench_config(n), seasons, seed, min_time)
        individual = _record("individual", n, trace, wall, mem)
        say(f"floor, N = {n}")
        floor_wall, drawn, floor_mem = _time_floor(trace, recruits, seed, min_time)
        floor = _record("floor", n, drawn, floor_wall, floor_mem)
        rows = [floor, individual]
        say(f"individual with care and brood effect, N = {n}")
        wall, trace, _, mem = _time_engine(bench_config(n, care=True), seasons, seed, min_time)
        rows.append(_record(CARE_ENGINE, n, trace, wall, mem))
        for engine in ("agents", "counts") if n <= agents_max else ("counts",):
            say(f"{engine}, N = {n}")
            wall, trace, _, mem = _time_engine(bench_config(n, engine=engine), seasons, seed,
                                               min_time)
            rows.append(_record(engine, n, trace, wall, mem))
        agents = next((r for r in rows if r.engine == "agents"), None)
        for r in rows:
            r.ratio_to_floor = r.individual_steps_per_s / floor.individual_steps_per_s
            if agents is not None:
                r.ratio_to_agents = r.individual_steps_per_s / agents.individual_steps_per_s
        records += rows
    report = BenchReport(records=records, seasons=seasons, min_time=min_time)
    if records:
        report.environment = _time_environment(records, seasons, seed, min_time, say)
    if single_seasons > 0:
        for k in SINGLE_RUN_CAPACITIES:
            say(f"individual, one replicate of {single_seasons} seasons at K = {k}")
            report.single.append(_time_single_run(k, single_seasons, seed))
    if replicates > 0:
        for engine in ("individual", "counts"):
            say(f"{engine}, {replicates} replicates at K = {capacity}, batched")
            report.experiment.append(_time_experiment(engine, replicates, capacity, seed))
        if sequential:
            say(f"individual, {min(sequential, replicates)} replicates at K = {capacity}, one at a time")
            report.experiment.append(_time_experiment("individual", min(sequential, replicates),
                                                      capacity, seed, one_at_a_time=True))
        reference = [r for r in records if r.engine == "individual"]
        if reference:  # N = 1e6 when it was run (the target's reference), else the largest N
            ref = next((r for r in reference if r.census_size == REFERENCE_SIZE),
                       max(reference, key=lambda r: r.census_size))
            report.reference_size = ref.census_size
            for e in report.experiment:
                e.ratio_to_individual = e.individual_steps_per_s / ref.individual_steps_per_s
    return report


def _time_environment(records, seasons, seed, min_time, say) -> EnvironmentRecord:
    """The individual engine in the iid two-year-type environment at N = 1e6 (else the largest N)."""
    sizes = sorted({r.census_size for r in records})
    n = REFERENCE_SIZE if REFERENCE_SIZE in sizes else sizes[-1]
    constant = next(r for r in records if r.engine == "individual" and r.census_size == n)
    floor = next(r for r in records if r.engine == "floor" and r.census_size == n)
    say(f"individual with two year types, N = {n}")
    wall, trace, _, _ = _time_engine(bench_config(n, years=True), seasons, seed, min_time)
    rate = sum(trace) / wall if wall > 0 else float("inf")
    return EnvironmentRecord(census_size=n, individual_steps_per_s=rate,
                             ratio_to_floor=rate / floor.individual_steps_per_s,
                             ratio_to_constant=rate / constant.individual_steps_per_s,
                             seasons=len(trace), wall_s=wall)


# -- output --------------------------------------------------------------------------------
def _num(x, fmt) -> str:
    return "-" if x is None else format(x, fmt)


def format_report(report: BenchReport) -> str:
    """The report as plain-text tables."""
    header = (f"{'engine':<12}{'N':>12}{'ind-steps/s':>14}{'x floor':>10}{'x agents':>10}"
              f"{'state B/ind':>13}{'peak B/ind':>12}")
    lines = [
        ("broodline bench: iteroparous resident (m = 2, s = 0.5, c = 0.5) against a "
         "semelparous mutant (m = 4.5),"),
        (f"Beverton-Holt on recruitment with K = N, Poisson offspring; blocks of {report.seasons} "
         f"seasons from the start, for at least {report.min_time:g} s per engine and size; "
         "one process."),
        "",
        header,
    ]
    for r in report.records:
        lines.append(f"{r.engine:<12}{r.census_size:>12,}{r.individual_steps_per_s:>14.3g}"
                     f"{_num(r.ratio_to_floor, '.3g'):>10}{_num(r.ratio_to_agents, '.3g'):>10}"
                     f"{_num(r.bytes_per_individual, '.3g'):>13}"
                     f"{_num(r.peak_bytes_per_individual, '.3g'):>12}")
    lines += textwrap.wrap(report.memory_method + ".", 100)
    rates = {(r.engine, r.census_size): r.individual_steps_per_s for r in report.records}
    care = [(n, rate / rates[("individual", n)]) for (engine, n), rate in rates.items()
            if engine == CARE_ENGINE and ("individual", n) in rates]
    if care:
        lines.append(f"{CARE_ENGINE}: the individual engine with orphan survival 0.3 and brood effect "
                     "h = 8 on both alleles; x individual (same N): "
                     + ", ".join(f"{ratio:.3g} at N = {n:,}" for n, ratio in care))
    if report.experiment:
        e0 = report.experiment[0]
        lines += ["",
                  (f"Invasion experiment at K = {e0.census_size} (one mutant, to fixation, "
                   "every season recorded), one worker:"),
                  (f"{'engine':<38}{'replicates':>11}{'rep-seasons':>13}{'ind-steps/s':>14}"
                   f"{'x individual':>14}")]
        for e in report.experiment:
            lines.append(f"{e.engine:<38}{e.replicates:>11,}{e.replicate_seasons:>13,}"
                         f"{e.individual_steps_per_s:>14.3g}{_num(e.ratio_to_individual, '.3g'):>14}")
        if report.reference_size:
            lines.append(f"x individual: against the individual engine at N = {report.reference_size:,}.")
    if report.single:
        lines += ["", ("One replicate of a small population, many seasons (stop rule and a record "
                       "every season included), individual engine:"),
                  f"{'K':>8}{'seasons':>10}{'mean N':>10}{'ind-steps/s':>14}{'x floor':>10}"]
        for e in report.single:
            lines.append(f"{e.capacity:>8,}{e.seasons:>10,}{e.mean_census:>10.0f}"
                         f"{e.individual_steps_per_s:>14.3g}{e.ratio_to_floor:>10.3g}")
    if report.environment is not None:
        e = report.environment
        lines += ["", (f"Variable environment (two year types, juvenile survival x1.2 or x0.8, iid), "
                       f"individual engine at N = {e.census_size:,}:"),
                  f"{'ind-steps/s':>14}{'x floor':>10}{'x constant':>12}",
                  f"{e.individual_steps_per_s:>14.3g}{e.ratio_to_floor:>10.3g}{e.ratio_to_constant:>12.3g}",
                  "x constant: against the same engine without an environment, same N, same run."]
    return "\n".join(lines)
