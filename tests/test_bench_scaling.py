"""``broodline bench --scaling`` runs a tiny experiment and reports every key; results agree.

No timing is asserted (timings depend on the machine and its load): the test
checks the report's shape, its arithmetic, and that the results datasets of
the 1-worker and 2-worker runs hash the same.
"""

import json

import h5py
import numpy as np
import pytest

from analysis.commands import JSON_KEYS
from sim.bench_scaling import SCALING_KEYS, results_hash
from sim.cli import main
from sim.parallel.start import separate_workers


def test_scaling_json_has_every_documented_key_and_identical_results(capsys):
    # one engine keeps it short: four fresh processes, each with its workers
    assert main(["bench", "--scaling", "--json", "--replicates", "24", "--workers", "2",
                 "--engine", "counts"]) == 0
    records = json.loads(capsys.readouterr().out)
    assert [(r["engine"], r["workers"]) for r in records] == [("counts", 1), ("counts", 2)]
    documented = set(JSON_KEYS["bench-scaling"]["[]"])
    assert documented == set(SCALING_KEYS)
    for r in records:
        assert set(r) == documented
        assert r["kind"] == "scaling" and r["replicates"] == 24
        assert r["batches"] * r["batch_size"] >= 24 and r["batches"] >= 1
        assert r["wall_s"] > 0 and r["one_replicate_s"] > 0 and r["total_cpu_s"] > 0
        assert r["efficiency"] == pytest.approx(r["speedup"] / r["workers"])
        assert 0 <= r["writer_busy_fraction"] <= 1
        assert r["identical"] is True
    one, two = records
    # one worker is a worker process where there is a second core for the writer
    # (sim.parallel.start.separate_workers), as `broodline run` does; else the writer itself
    assert one["speedup"] == 1.0
    if separate_workers(1):
        assert one["worker_startup_cpu_s"] > 0
    else:
        assert one["worker_startup_cpu_s"] is None
    assert two["worker_startup_cpu_s"] > 0
    assert one["results_hash"] == two["results_hash"]


def test_scaling_refuses_zero_replicates(capsys):
    assert main(["bench", "--scaling", "--replicates", "0"]) == 2
    assert "--replicates must be >= 1" in capsys.readouterr().err


def test_results_hash_sees_any_changed_value(tmp_path):
    def write(path, steps):
        with h5py.File(path, "w") as f:
            f.attrs["created"] = str(path)  # attributes are not hashed
            f.create_dataset("replicates/steps", data=np.array(steps, dtype=np.int32))
            f.create_dataset("replicates/outcome", data=["mutant-lost", "mutant-fixed"],
                             dtype=h5py.string_dtype())
        return results_hash(path)

    assert write(tmp_path / "a.h5", [3, 7]) == write(tmp_path / "b.h5", [3, 7])
    assert write(tmp_path / "c.h5", [3, 8]) != write(tmp_path / "a2.h5", [3, 7])


def test_rounds_alternate_worker_counts_and_keep_the_fastest_run_of_each(monkeypatch, tmp_path):
    # The runs are faked (their walls chosen here), so this checks the bookkeeping of
    # --rounds: alternation, and the fastest run of each worker count being the one reported.
    from sim import bench_machine, bench_scaling
    from sim.bench_machine import MachineRound
    from sim.experiment import RunTimings

    # 3 rounds: (1 worker, 2 workers), then (2, 1), then (1, 2): who goes first alternates
    walls = iter([9.0, 6.0, 7.0, 8.0, 10.0, 4.0])
    order = []

    def fake_run(raw, out, workers):
        one = raw["experiment"]["replicates"] == 1
        if not one:
            order.append(workers)
        if out.exists():  # as run_experiment refuses to overwrite
            raise RuntimeError(f"{out} exists")
        out.write_bytes(b"")
        timings = RunTimings(started=0.0, finished=0.5 if one else next(walls), replicates=1,
                             batch_size=1)
        return {"spawned": 0.0, "imported": 0.1, "startup_cpu": 0.1, "process_cpu": 1.0,
                "workers_cpu": 1.0, "timings": timings}

    # the machine's own rounds, also faked: alone 9, 8, 10 s; together 5, 4, 5 s
    machine = iter([(9.0, 5.0), (8.0, 4.0), (10.0, 5.0)])
    firsts = []

    def fake_machine(raw, workers, batch_size, *, alone_first):
        order.append("machine")
        firsts.append(alone_first)
        return MachineRound(workers, *next(machine))

    monkeypatch.setattr(bench_scaling, "_measured_run", fake_run)
    monkeypatch.setattr(bench_scaling, "results_hash", lambda path: "0" * 64)
    monkeypatch.setattr(bench_scaling, "_cli_startup", lambda: 0.1)
    monkeypatch.setattr(bench_machine, "machine_round", fake_machine)
    report = bench_scaling.run_scaling(replicates=10, workers=2, engines=["counts"], rounds=3)
    assert order == [1, 2, "machine", 2, 1, "machine", 1, 2, "machine"]
    assert firsts == [False, True, False]  # the opposite of the round's runs (1 worker first in odd rounds)
    one, two = report.records
    assert (one.wall_s, two.wall_s) == (8.0, 4.0) and one.rounds == two.rounds == 3
    assert two.speedup == pytest.approx(2.0) and two.efficiency == pytest.approx(1.0)
    # each round's pair: 9 / (6 x 2), 8 / (7 x 2), 10 / (4 x 2); the median is the middle one
    assert two.round_efficiencies == pytest.approx([0.75, 8 / 14, 1.25])
    assert two.median_efficiency == pytest.approx(0.75)
    assert one.round_efficiencies == [1.0, 1.0, 1.0] and one.median_efficiency == 1.0
    # the machine: 9 / (5 x 2), 8 / (4 x 2), 10 / (5 x 2); the run's share of it per round:
    # 0.75 / 0.9, (8 / 14) / 1, 1.25 / 1, whose median is the middle one, 0.833
    assert two.machine_round_efficiencies == pytest.approx([0.9, 1.0, 1.0])
    assert two.machine_efficiency == pytest.approx(1.0)
    assert two.share_of_machine == pytest.approx(0.75 / 0.9)
    assert one.machine_efficiency == 1.0 and one.share_of_machine == 1.0
    text = bench_scaling.format_scaling(report)
    assert "the fastest of 3 runs each" in text
    rows = [line.split() for line in text.splitlines()]
    assert ["counts", "2", "0.75", "0.57", "1.25", "0.75", "0.57", "1.25"] in rows
    assert ["counts", "2", "1.00", "0.90", "1.00", "0.83", "0.90", "1.00", "1.00"] in rows


def test_rounds_must_be_at_least_one():
    from sim.bench_scaling import run_scaling

    with pytest.raises(ValueError, match="rounds must be >= 1"):
        run_scaling(replicates=1, rounds=0)


def test_machine_reference_simulates_every_replicate_once_alone_and_together():
    # Three processes take 7 batches (5 replicates a batch, the last ones tapered) of a
    # 31-replicate experiment from one shared counter: each replicate is simulated once in
    # each span, however the processes interleave.
    from sim.bench_machine import machine_round
    from sim.bench_scaling import scaling_config

    measured = machine_round(scaling_config("counts", 31), 3, 5)
    assert measured.workers == 3
    assert measured.replicates_alone == measured.replicates_together == 31
    assert measured.alone_s > 0 and measured.together_s > 0
    assert measured.efficiency == pytest.approx(measured.alone_s / (3 * measured.together_s))


def test_machine_reference_whose_processes_cannot_start_raises():
    # processes that fail before the barrier (here: a config the schema refuses) end the
    # measurement with an error naming it, on N processes (first here) as on one
    from sim.bench_machine import machine_round
    from sim.bench_scaling import scaling_config

    raw = scaling_config("counts", 10)
    raw["density"]["capacity"] = -1.0
    with pytest.raises(RuntimeError, match="machine reference failed"):
        machine_round(raw, 2, 5, alone_first=False)
