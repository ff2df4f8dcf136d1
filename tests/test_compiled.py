"""The compiled passes of the individual engine against numpy's own generator.

The reference is numpy: a replicate's uniforms must be the ones
``Generator.random`` gives from the same stream, and its Poisson draws the
ones ``Generator.poisson`` gives (numpy's methods: Hoermann 1993 PTRS for
mean >= 10, the product of uniforms below); after a pass, numpy calls on the
same generator carry on from where the pass stopped.
"""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from sim.engines import compiled
from sim.streams import keyed_generators


def _streams(n, seed=11):
    return keyed_generators(seed, 0, range(n)), keyed_generators(seed, 0, range(n))


def _survive(cell, sizes, gens, survival, aged, *, drawn=None, factor=None, means=None):
    n = len(gens)
    drawn = np.ones(len(sizes), dtype=bool) if drawn is None else drawn
    factor = np.ones(n) if factor is None else factor
    means = np.empty((n, 0)) if means is None else means
    out = np.empty(cell.size, dtype=cell.dtype)
    survivors = np.empty(n, dtype=np.int64)
    by_class = np.zeros((n, survival.size), dtype=np.int64)
    recruits = np.empty(means.shape, dtype=np.int64)
    total = compiled.survive(cell, sizes, drawn, compiled.bitgen_addresses(gens), survival, factor,
                             aged, out, survivors, by_class, means, recruits)
    return out[:total], survivors, by_class, recruits


def test_survival_uses_each_replicates_uniforms_in_order():
    # Reference: Generator.random on a twin stream, compared with u < survival[class] * factor.
    rng = np.random.default_rng(1)
    sizes = np.array([0, 5, 300, 1, 40])
    cell = rng.integers(0, 6, sizes.sum()).astype(np.uint8)
    survival = np.array([0.9, 0.5, 0.0, 0.3, 1.0, 0.7])
    aged = np.array([1, 2, 2, 4, 5, 5], dtype=np.uint8)
    factor = np.array([1.0, 0.5, 0.8, 1.0, 0.25])
    gens, twins = _streams(5)
    out, survivors, by_class, _ = _survive(cell, sizes, gens, survival, aged, factor=factor)
    expected, start = [], 0
    for r, (g, size) in enumerate(zip(twins, sizes)):
        c = cell[start:start + size]
        start += size
        kept = aged[c[g.random(size) < survival[c] * factor[r]]]
        assert survivors[r] == kept.size
        assert np.array_equal(by_class[r], np.bincount(kept, minlength=6))
        expected.append(kept)
    assert np.array_equal(out, np.concatenate(expected))
    # each generator carries on where the pass stopped
    assert [g.random() for g in gens] == [g.random() for g in twins]


def test_left_replicates_draw_nothing():
    cell = np.zeros(30, dtype=np.uint8)
    sizes = np.array([10, 10, 10])
    drawn = np.array([True, False, True])
    gens, twins = _streams(2)
    out, survivors, _, _ = _survive(cell, sizes, gens, np.array([0.5]), np.array([0], np.uint8),
                                    drawn=drawn)
    assert list(survivors) == [int((g.random(10) < 0.5).sum()) for g in twins]
    assert out.size == survivors.sum()


@pytest.mark.parametrize("mean", [0.0, 1e-3, 0.7, 4.0, 9.99, 10.0, 37.5, 400.0, 2.5e5, 3e9])
def test_poisson_is_numpys_draw_from_the_same_stream(mean):
    # Reference: numpy's Generator.poisson (its PTRS and multiplication methods) on a twin stream.
    n = 2000
    gens, twins = _streams(n, seed=3)
    sizes = np.zeros(n, dtype=np.int64)
    _, _, _, recruits = _survive(np.zeros(0, np.uint8), sizes, gens, np.array([0.5]),
                                 np.array([0], np.uint8), means=np.full((n, 1), mean))
    assert np.array_equal(recruits[:, 0], [g.poisson(mean) for g in twins])
    assert [g.random() for g in gens] == [g.random() for g in twins]


def test_poisson_draws_follow_the_poisson_law():
    # Reference: scipy.stats.poisson; chi-square goodness of fit on 2e5 draws at mean 3 and 60
    # (bins with expected count >= 5), alpha = 1e-4 with a fixed seed.
    # One generator stands for n replicates (its address repeated): n draws in sequence.
    n = 200_000
    gens, _ = _streams(1, seed=5)
    for mean in (3.0, 60.0):
        sizes = np.zeros(n, dtype=np.int64)
        one = np.repeat(compiled.bitgen_addresses(gens), n)
        recruits = np.empty((n, 1), dtype=np.int64)
        compiled.survive(np.zeros(0, np.uint8), sizes, np.ones(n, bool), one, np.array([0.5]),
                         np.ones(n), np.array([0], np.uint8), np.empty(0, np.uint8),
                         np.empty(n, np.int64), np.zeros((n, 1), np.int64), np.full((n, 1), mean),
                         recruits)
        draws = recruits[:, 0]
        k = np.arange(draws.max() + 1)
        expected = n * stats.poisson.pmf(k, mean)
        observed = np.bincount(draws, minlength=k.size).astype(float)
        keep = expected >= 5
        obs = np.append(observed[keep], observed[~keep].sum())
        exp = np.append(expected[keep], n - expected[keep].sum())
        assert stats.chisquare(obs, exp, ddof=0).pvalue > 1e-4


def test_next_census_puts_recruits_after_each_replicates_survivors():
    survived = np.array([3, 3, 4, 1, 2, 9], dtype=np.uint8)
    survivors = np.array([2, 0, 2, 1])
    recruits = np.array([[1, 0], [0, 2], [1, 1], [4, 0]])
    first = np.array([0, 5], dtype=np.uint8)
    by_class = np.zeros((4, 6), dtype=np.int64)
    sizes, born, over = np.empty(4, np.int64), np.empty(4, np.int64), np.empty(4, bool)
    weights, index = np.array([1.0, 0.0, 0.0, 0.0, 0.0, 1.0]), np.empty(4)
    # the last replicate passes the limit (1 + 4 > 4): its recruits are counted, not built
    cell = compiled.next_census(survived, survivors, recruits, first, 4, by_class, sizes, born, over,
                                weights, index)
    assert list(cell) == [3, 3, 0, 5, 5, 4, 1, 0, 5, 2]
    assert list(sizes) == [3, 2, 4, 1] and list(born) == [1, 2, 2, 4]
    assert list(over) == [False, False, False, True]
    assert list(by_class[:, 0]) == [1, 0, 1, 4] and list(by_class[:, 5]) == [0, 2, 1, 0]
    assert list(index) == [1.0, 2.0, 2.0, 4.0]  # the census's D with these weights: classes 0 and 5


def test_engine_works_where_numba_finds_no_cache_directory():
    # A read-only install with no writable home: numba refuses cache=True ("no locator
    # available"); the passes are then compiled in each process instead. Simulated by
    # emptying numba's list of cache locators, in a fresh interpreter.
    script = (
        "import numba.core.caching as c; c.CacheImpl._locator_classes = []\n"
        "from sim.bench import bench_config\n"
        "from sim.model import BroodModel\n"
        "from sim.replicates import replicate_rng\n"
        "m = BroodModel(bench_config(300), rng=replicate_rng(1, 0, 0)); m.step(); m.step()\n"
        "print(int(m.census().sum()) > 0)\n"
    )
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          cwd=Path(__file__).parents[1], timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "True"


def test_log_gamma_series_matches_scipy():
    # Reference: scipy.special.gammaln. The Stirling series (Abramowitz & Stegun 6.1.40, ten
    # terms, shifted to x >= 7) is accurate to a few units in the last place of log Gamma.
    from scipy import special

    x = np.concatenate([np.arange(1.0, 60.0), np.geomspace(60.0, 1e9, 40)])
    ours = np.array([compiled._log_gamma(v) for v in x])
    assert np.allclose(ours, special.gammaln(x), rtol=1e-13, atol=1e-13)


def _binomial_draws(n, p, size, seed):
    """``size`` draws of compiled.binomial(n, p) from one generator, through the counts pass."""
    gens, _ = _streams(1, seed=seed)
    out = np.zeros((size, 2), dtype=np.int64)
    compiled.survive_counts(np.full((size, 1), n), np.repeat(compiled.bitgen_addresses(gens), size),
                            np.array([p]), np.ones(size), np.array([1]), out, np.empty((size, 0)),
                            np.empty((size, 0), dtype=np.int64))
    return out[:, 1]


@pytest.mark.parametrize("n, p", [(1, 0.3), (7, 0.5), (60, 0.45), (400, 0.02), (400, 0.93),
                                  (1000, 0.5), (2_000_000, 0.37)])
def test_binomial_draws_follow_the_binomial_law(n, p):
    # Reference: scipy.stats.binom. Chi-square goodness of fit on 10^5 draws (bins with expected
    # count >= 5, the rest pooled), alpha = 1e-4 with a fixed seed: a false failure 1 run in
    # 10^4 per case. The cases cover the search from 0 (n p < 30), the search from the mode,
    # and p > 1/2 (failures drawn).
    size = 100_000
    draws = _binomial_draws(n, p, size, seed=n)
    assert draws.min() >= 0 and draws.max() <= n
    lo, hi = int(stats.binom.ppf(1e-9, n, p)), int(stats.binom.isf(1e-9, n, p)) + 1
    k = np.arange(lo, hi + 1)
    expected = size * stats.binom.pmf(k, n, p)
    inside = (draws >= lo) & (draws <= hi)
    observed = np.bincount(draws[inside] - lo, minlength=k.size).astype(float)
    keep = expected >= 5
    obs = np.append(observed[keep], size - observed[keep].sum())
    exp = np.append(expected[keep], size - expected[keep].sum())
    assert stats.chisquare(obs, exp).pvalue > 1e-4


def test_binomial_edges_draw_nothing():
    # n = 0, p = 0 and p = 1 are certain: no uniform is used (the generator carries on as its twin)
    gens, twins = _streams(1, seed=9)
    out = np.zeros((3, 3), dtype=np.int64)
    counts = np.array([[0, 5, 5]] * 3)
    compiled.survive_counts(counts, np.repeat(compiled.bitgen_addresses(gens), 3),
                            np.array([0.5, 0.0, 1.0]), np.ones(3), np.array([0, 1, 2]), out,
                            np.empty((3, 0)), np.empty((3, 0), dtype=np.int64))
    assert out.tolist() == [[0, 0, 5]] * 3
    assert gens[0].random() == twins[0].random()


@pytest.mark.parametrize("density", [
    {"form": "beverton-holt", "acts_on": "recruitment", "counted": "census", "capacity": 40},
    {"form": "ricker", "acts_on": "all-survival", "counted": "breeders", "capacity": 30},
    {"form": "ceiling", "acts_on": "all-survival", "capacity": 45}])
def test_one_call_is_the_two_passes(density):
    # where the recruits go into the census as drawn, survival and the next census are one
    # compiled call (survive_to_census): the same cells, counts and density index as the two
    # passes; the index taken in the pass is the kernel's density_index of the census
    from sim.engines import IndividualPopulations
    from sim.lifecycle import LifeCycle, initial_census
    from tests.conftest import make_config

    late = {"name": "late", "breeding": "table", "fecundity": [0.0, 1.5, 3.0],
            "adult_survival": [0.7, 0.6, 0.5], "juvenile_survival": 0.5}
    config = make_config(density=density, invasion={
        "resident": "perennial", "mutant": "late", "mutant_count": 5, "resident_count": 40},
        allele=[{"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
                 "adult_survival": 0.5, "juvenile_survival": 0.5}, late])
    life = LifeCycle.from_config(config)
    start = np.broadcast_to(initial_census(config, life), (4, life.n_alleles, life.n_ages))
    one, two = (IndividualPopulations(life, start, keyed_generators(5, 0, range(4)))
                for _ in range(2))
    assert one._recruits_as_drawn
    two._recruits_as_drawn = False
    for season in range(40):
        if season == 20:  # a replicate leaves: its slice is skipped, then compacted
            one.keep(np.array([True, False, True, True]))
            two.keep(np.array([True, False, True, True]))
        one.step()
        two.step()
        assert np.array_equal(one.cell, two.cell) and np.array_equal(one.counts, two.counts)
        assert one.census_index().tobytes() == two.census_index().tobytes()
        assert one.census_index().tobytes() == life.kernel.density_index(one.counts).tobytes()
