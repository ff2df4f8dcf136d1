"""``broodline bench`` runs in a reduced mode and its output is well formed.

Timings are never asserted (they depend on the machine and its load); the
memory a season takes is, because it is measured by tracemalloc from
allocation sizes, not by the clock.
"""

import json
import math

import numpy as np
import pytest

from sim.bench import bench_config, format_report, run_bench, traced_peak
from sim.cli import main
from sim.engines import IndividualPopulations
from sim.lifecycle import LifeCycle, initial_census

KEYS = {"engine", "census_size", "individual_steps_per_s", "ratio_to_floor", "ratio_to_agents",
        "bytes_per_individual"}
REDUCED = ["bench", "--sizes", "1000", "--seasons", "3", "--min-time", "0", "--replicates", "30",
           "--sequential", "5", "--single-seasons", "40"]


def test_bench_json_records(capsys):
    assert main(REDUCED + ["--json"]) == 0
    records = json.loads(capsys.readouterr().out)
    assert all(KEYS <= set(r) for r in records)
    scale = {r["engine"]: r for r in records if r["kind"] == "scale"}
    assert set(scale) == {"floor", "individual", "care", "agents", "counts"}
    for r in scale.values():
        assert r["census_size"] == 1000 and r["seasons"] >= 3
        assert math.isfinite(r["individual_steps_per_s"]) and r["individual_steps_per_s"] > 0
        assert r["ratio_to_floor"] > 0 and r["ratio_to_agents"] > 0
        assert r["peak_bytes_per_individual"] > 0
    assert scale["floor"]["ratio_to_floor"] == 1.0 and scale["agents"]["ratio_to_agents"] == 1.0
    assert scale["floor"]["bytes_per_individual"] is None
    for engine in ("individual", "care", "agents", "counts"):
        assert scale[engine]["bytes_per_individual"] > 0
    experiment = [r for r in records if r["kind"] == "experiment"]
    assert [r["engine"] for r in experiment] == [
        "individual (batched)", "counts (batched)", "individual (one replicate at a time)"]
    assert [r["replicates"] for r in experiment] == [30, 30, 5]
    assert all(r["census_size"] == 200 and r["ratio_to_individual"] > 0 for r in experiment)
    years = [r for r in records if r["kind"] == "environment"]
    assert len(years) == 1 and years[0]["census_size"] == 1000
    assert years[0]["ratio_to_floor"] > 0 and years[0]["ratio_to_constant"] > 0
    single = [r for r in records if r["kind"] == "single"]
    assert [r["capacity"] for r in single] == [100, 1000]
    assert all(r["seasons"] == 40 and r["ratio_to_floor"] > 0 and r["mean_census"] > 0
               for r in single)


def test_bench_table(capsys):
    assert main(REDUCED + ["--agents-max", "0"]) == 0
    out = capsys.readouterr().out
    assert "x floor" in out and "x agents" in out and "peak B/ind" in out
    scale, experiment = out.split("Invasion experiment at K = 200")
    rows = [line.split() for line in scale.splitlines() if line.split()[1:2] == ["1,000"]]
    assert [r[0] for r in rows] == ["floor", "individual", "care", "counts"]  # no agents: above agents-max
    assert "care: the individual engine with orphan survival" in scale and "at N = 1,000" in scale
    assert all(len(r) == 7 for r in rows[1:]) and rows[0][-2] == "-"
    assert "individual (batched)" in experiment
    assert "Variable environment (two year types" in experiment and "x constant" in experiment
    assert "One replicate of a small population, many seasons" in experiment


@pytest.mark.parametrize("argv, message", [
    (["--sizes", "0"], "census size"),
    (["--sizes", "1e3.5x"], "census size"),
    (["--sizes", "2.5e1", "1.5"], "whole number"),
    (["--seasons", "0"], "must be >= 1"),
    (["--replicates", "-3"], "must be >= 0"),
    (["--min-time", "soon"], "number of seconds"),
])
def test_bench_refuses_bad_options(argv, message, capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["bench"] + argv)
    assert exit_info.value.code == 2
    assert message in capsys.readouterr().err


def test_report_object_is_usable_from_python():
    report = run_bench([500], seasons=2, min_time=0, agents_max=0, replicates=0, single_seasons=0)
    assert [r.engine for r in report.records] == ["floor", "individual", "care", "counts"]
    assert report.experiment == []
    assert "individual" in format_report(report)


def test_individual_engine_memory_per_individual():
    # The target: at most 24 bytes per individual without lineage recording. One byte
    # per individual is held (its class); a season's temporaries are a fixed-size chunk.
    n = 200_000
    config = bench_config(n)
    life = LifeCycle.from_config(config)
    start = initial_census(config, life)
    # one season first on a copy, so one-time set-up (lazily built constants, a first
    # compile) is not counted as a season's temporaries; alone, this test saw 66 bytes
    IndividualPopulations(life, start[None], [np.random.default_rng(0)]).step()
    batch = IndividualPopulations(life, start[None], [np.random.default_rng(1)])
    assert batch.cell.dtype == np.uint8
    held = batch.state_bytes() / batch.sizes[0]
    peak = traced_peak(batch.step)
    assert held < 1.1
    assert held + peak / start.sum() <= 24


def test_memory_report_has_no_empty_worker_column():
    # `bench-memory` used to print a NaN worker column for one worker (issue 10): with one
    # worker the replicates run in the writer's process, and the report says so instead.
    from sim.bench_memory import measure_memory

    one = measure_memory((20, 40), workers=1)
    assert "worker_peak_mib" not in one.table and "nan" not in str(one).lower()
    assert "run in the writer's process" in str(one)
    assert list(one.table["replicates"]) == [20, 40] and (one.table["writer_peak_mib"] > 0).all()
    two = measure_memory((20,), workers=2)
    assert (two.table["worker_peak_mib"] > 0).all() and "nan" not in str(two).lower()


@pytest.mark.parametrize("argv, message", [
    (["--rounds", "3"], "--rounds: only with --scaling"),
    (["--engine", "counts", "--workers", "4"], "--workers, --engine: only with --scaling"),
    (["--scaling", "--seasons", "5", "--large"], "--large, --seasons: of the engine benchmark, not of "
                                                 "--scaling (leave them out)"),
])
def test_bench_refuses_an_option_of_the_other_benchmark_before_running(argv, message, capsys):
    # given to the benchmark that ignores it, an option would change nothing the user sees
    assert main(["bench"] + argv) == 2
    out = capsys.readouterr()
    assert message in out.err and "timing" not in out.err and "running" not in out.err
