"""Replicates advanced together give each replicate exactly its result when run alone.

``sim.replicates.run_replicates`` applies the stop rule to a whole batch, each
replicate on its own stream ``SeedSequence(seed, spawn_key=(point, replicate))``.
These tests compare it field by field with a plain single-replicate loop
written here (``_one_replicate_plainly``: BroodModel stepped season by season,
the stop rule as the README states it), and check that the grouping of
replicates into batches changes nothing.
The per-engine checks (grouping and order change nothing) run over every registered
engine in ``tests/test_engine_conformance.py`` with the configs below.
"""

import numpy as np
import pytest

from sim.config import parse_config, sweep_points
from sim.model import BroodModel
from sim.outcomes import OUTCOMES, classify
from sim.replicates import ReplicateResult, replicate_rng, run_replicates
from sim.streams import keyed_generators


def _state(totals, config):
    """The state of one census by allele, as the README words it: (outcome so far, winner)."""
    present = np.flatnonzero(totals)
    if present.size == 0:
        return "extinct", -1
    winner = int(present[0]) if present.size == 1 else -1
    if config.invasion is not None:
        mutant = config.allele_index(config.invasion.mutant)
        if totals[mutant] == 0:
            return "mutant-lost", winner
        if present.size == 1:
            return "mutant-fixed", winner
        return "undecided", -1
    return ("fixed", winner) if present.size == 1 else ("undecided", -1)


def _one_replicate_plainly(point, replicate, seed):
    """One replicate, one season at a time: the reference the batched stop rule must match."""
    config = point.config
    exp = config.experiment
    model = BroodModel(config, rng=replicate_rng(seed, point.index, replicate))
    census = model.census()
    steps, records = [0], [census]
    state, winner = _state(census.sum(axis=1), config)
    since, outcome = 0, None
    while model.season < exp.max_steps:
        if state != "undecided" and (exp.stop == "fixation" or state == "extinct"):
            break
        model.step()
        census = model.census()
        new_state, winner = _state(census.sum(axis=1), config)
        if new_state != state:
            state, since = new_state, model.season
        if int(census.sum()) > exp.max_population:
            outcome = "capped"
            break
        if model.season % exp.record_every == 0:
            steps.append(model.season)
            records.append(census)
    if steps[-1] != model.season:
        steps.append(model.season)
        records.append(census)
    outcome = outcome or state
    return ReplicateResult(
        point=point.index, replicate=replicate, seed=seed, outcome=outcome,
        winner=winner if outcome in ("mutant-fixed", "mutant-lost", "fixed") else -1,
        steps=model.season,
        fixation_step=since if outcome in ("mutant-fixed", "mutant-lost", "fixed", "extinct") else -1,
        final_census=int(census.sum()), record_steps=np.asarray(steps, dtype=np.int32),
        trajectory=np.asarray(records, dtype=np.uint32))

RESIDENT = {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
            "adult_survival": 0.5, "juvenile_survival": 0.5}
MUTANT = {"name": "one-shot", "breeding": "semelparous", "fecundity": 4.5, "juvenile_survival": 0.5}


def _config(engine="individual", **sections):
    raw = {
        "experiment": {"engine": engine, "seed": 11, "max_steps": 60, "record_every": 1},
        "density": {"form": "beverton-holt", "acts_on": "recruitment", "capacity": 40},
        "allele": [RESIDENT, MUTANT],
        "invasion": {"resident": "perennial", "mutant": "one-shot", "mutant_count": 3},
    }
    for key, value in sections.items():
        if key == "experiment":
            raw["experiment"].update(value)
        else:
            raw[key] = value
    return parse_config(raw)


# a third allele maturing at age 3, so individuals move through several age classes
LATE = {"name": "late", "breeding": "iteroparous", "fecundity": 3.0, "adult_survival": 0.7,
        "juvenile_survival": 0.6, "maturity_age": 3}

CONFIGS = {
    "bh-recruitment": {},
    "ricker-fecundity-breeders-nb": {
        "density": {"form": "ricker", "acts_on": "fecundity", "counted": "breeders", "capacity": 30},
        "offspring": {"distribution": "negative-binomial", "dispersion": 1.5}},
    "bh-adult-survival-fixed": {
        "density": {"form": "beverton-holt", "acts_on": "adult-survival", "capacity": 30},
        "offspring": {"distribution": "fixed"},
        "invasion": {"resident": "perennial", "mutant": "one-shot", "mutant_count": 3,
                     "resident_count": 30}},
    "offspring-counted-all-survival": {
        "density": {"form": "beverton-holt", "acts_on": "all-survival", "counted": "offspring",
                    "capacity": 60}},
    "ceiling-everyone": {"density": {"form": "ceiling", "acts_on": "all-survival", "capacity": 35}},
    "ceiling-recruits": {"density": {"form": "ceiling", "acts_on": "recruitment", "capacity": 35}},
    "ages-mutation-max-steps": {
        "allele": [RESIDENT, MUTANT, LATE], "invasion": None,
        "mutation": {"rate": 0.02},
        "experiment": {"stop": "max-steps", "max_steps": 25, "record_every": 4}},
    "many-ages-two-byte-classes": {  # 3 alleles x 100 ages: more classes than one byte holds
        "allele": [RESIDENT, MUTANT, dict(LATE, maturity_age=100, adult_survival=0.97)],
        "invasion": None, "experiment": {"stop": "max-steps", "max_steps": 15, "record_every": 7}},
    "care-poisson": {  # parental effects: recruits drawn after the pass, by brood and fate
        "allele": [dict(RESIDENT, fecundity=3.0, orphan_survival=0.2, brood_effect="exponential",
                        brood_scale=8.0),
                   dict(MUTANT, orphan_survival=0.3)]},
    "two-year-types": {
        "environment": {"switching": "iid", "year": [
            {"name": "good", "probability": 0.5, "juvenile_survival": 1.5},
            {"name": "bad", "probability": 0.5, "juvenile_survival": 0.5, "fecundity": 0.8}]}},
    "no-density-capped": {
        "density": {"form": "none"}, "invasion": {"resident": "perennial", "mutant": "one-shot",
                                                  "mutant_count": 2, "resident_count": 20},
        "experiment": {"max_population": 150, "record_every": 3}},
}


def _with_initial_counts(name, sections):
    if sections.get("invasion", "x") is None:
        sections = dict(sections)
        sections.pop("invasion")
        sections["allele"] = [dict(a, initial_count=c) for a, c in zip(sections["allele"], (15, 5, 10))]
    return sections


def _same(a, b) -> bool:
    return (a.point, a.replicate, a.seed, a.outcome, a.winner, a.steps, a.fixation_step,
            a.final_census) == (b.point, b.replicate, b.seed, b.outcome, b.winner, b.steps,
                                b.fixation_step, b.final_census) \
        and np.array_equal(a.record_steps, b.record_steps) \
        and np.array_equal(a.trajectory, b.trajectory) \
        and a.trajectory.dtype == b.trajectory.dtype and a.record_steps.dtype == b.record_steps.dtype


@pytest.mark.parametrize("engine", ["individual", "counts"])
@pytest.mark.parametrize("name", list(CONFIGS))
def test_batched_equals_one_replicate_at_a_time(engine, name):
    config = _config(engine, **_with_initial_counts(name, CONFIGS[name]))
    point = sweep_points(config)[0]
    reps = list(range(14))
    alone = [_one_replicate_plainly(point, r, 5) for r in reps]
    together = run_replicates(point, reps, 5)
    assert [r.replicate for r in together] == reps
    for a, b in zip(alone, together):
        assert _same(a, b), (name, a.replicate, a.outcome, b.outcome, a.steps, b.steps)


def test_configs_reach_every_kind_of_end():
    # the equality test above is only as good as the paths it walks: check it meets
    # fixation, loss, the step limit and the population cap
    seen = set()
    for name, sections in CONFIGS.items():
        point = sweep_points(_config(**_with_initial_counts(name, sections)))[0]
        seen |= {r.outcome for r in run_replicates(point, range(14), 5)}
    assert {"mutant-fixed", "mutant-lost", "capped", "undecided"} <= seen


def test_class_dtype_grows_with_the_classes():
    from sim.engines import IndividualPopulations
    from sim.lifecycle import LifeCycle

    for late_age, dtype in ((3, np.uint8), (100, np.uint16)):
        config = _config(**_with_initial_counts("x", {
            "allele": [RESIDENT, MUTANT, dict(LATE, maturity_age=late_age)], "invasion": None}))
        life = LifeCycle.from_config(config)
        batch = IndividualPopulations(life, np.ones((2, 3, life.n_ages), dtype=int), [
            np.random.default_rng(0), np.random.default_rng(1)])
        batch.step()
        assert batch.cell.dtype == dtype and batch.cell.size == batch.sizes.sum()


def test_points_and_seeds_key_the_streams():
    config = parse_config({
        "experiment": {"seed": 3, "max_steps": 30},
        "density": {"form": "beverton-holt", "capacity": 40},
        "allele": [RESIDENT, MUTANT],
        "invasion": {"resident": "perennial", "mutant": "one-shot", "mutant_count": 3},
        "sweep": {"allele.one-shot.fecundity": [4.5, 4.5]},
    })
    p0, p1 = sweep_points(config)
    a = run_replicates(p0, range(6), 3)
    b = run_replicates(p1, range(6), 3)  # same model, another point: another stream
    c = run_replicates(p0, range(6), 4)
    assert [r.point for r in b] == [1] * 6
    assert any(not np.array_equal(x.trajectory, y.trajectory) for x, y in zip(a, b))
    assert any(not np.array_equal(x.trajectory, y.trajectory) for x, y in zip(a, c))


@pytest.mark.parametrize("name", ["bh-recruitment", "no-density-capped", "ages-mutation-max-steps"])
def test_agents_engine_runs_each_replicate_as_a_batch_of_one(name):
    config = _config("agents", **_with_initial_counts(name, CONFIGS[name]))
    point = sweep_points(config)[0]
    together = run_replicates(point, [0, 1, 2], 2)
    for r, rep in zip(together, (0, 1, 2)):
        assert _same(r, _one_replicate_plainly(point, rep, 2))


def test_model_stream_starts_at_the_replicate_stream():
    # mesa 3.3 draws from the generator it is given; BroodModel rewinds it so the engine
    # uses the replicate's stream from its first draw, as run_replicates does
    config = _config()
    model = BroodModel(config, rng=replicate_rng(5, 0, 3))
    assert model.rng.bit_generator.state == replicate_rng(5, 0, 3).bit_generator.state


@pytest.mark.parametrize("seed", [0, 11, 20261202, 2**32 - 1, 2**32, 2**70 + 5, 2**130 + 3])
@pytest.mark.parametrize("point", [0, 7, 2**32 - 1, 2**32])
def test_keyed_generators_are_numpys_keyed_streams(seed, point):
    # numpy's own construction is the reference: default_rng(SeedSequence(seed, spawn_key=key));
    # seeds of 1 to 5 words, key entries at the one-word limit and past it (numpy's path)
    reps = [*range(40), 123_456_789, 2**32 - 1, 2**32 + 1]
    for r, g in zip(reps, keyed_generators(seed, point, reps), strict=True):
        ref = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(point, r)))
        assert g.bit_generator.state == ref.bit_generator.state
        assert np.array_equal(g.random(3), ref.random(3))
        assert g.poisson(30.0) == ref.poisson(30.0)


@pytest.mark.parametrize("invasion", [True, False])
def test_classify_matches_the_plain_statement(invasion):
    config = _config() if invasion else _config(
        invasion=None, allele=[dict(RESIDENT, initial_count=3), dict(MUTANT, initial_count=2)])
    rng = np.random.default_rng(0)
    totals = rng.integers(0, 3, size=(500, 2)) * rng.integers(0, 2, size=(500, 2))
    states, winners = classify(totals, config)
    for row, s, w in zip(totals, states, winners):
        assert (OUTCOMES[s], int(w)) == _state(row, config)
