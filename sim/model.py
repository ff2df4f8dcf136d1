"""``BroodModel``: one replicate population, a ``mesa.Model`` whose engine is chosen by config."""

from __future__ import annotations

import mesa
import numpy as np

from .config import Config
from .engines import ENGINES
from .lifecycle import LifeCycle, initial_census
from .year_draws import YEAR_STREAM, SeasonYears

__all__ = ["BroodModel"]


class BroodModel(mesa.Model):
    """A population of breeders under one experiment config.

    Parameters
    ----------
    config : Config
        A validated config (one sweep point).
    census : ndarray, optional
        Starting counts by (allele, age index); by default ``initial_census``.
    rng : numpy.random.Generator or seed
        The replicate's random stream (mesa keeps it as ``self.rng``).
    years : sim.year_draws.SeasonYears, optional
        Its year types season by season, where the config has an
        ``[environment]``. By default they come from the stream keyed like
        ``rng``'s SeedSequence with one more key entry, 1
        (``sim.year_draws``): for ``replicate_rng(seed, i, r)`` the
        replicate's own year stream, as in a run (shared years need
        ``sim.replicates``).
    """

    def __init__(self, config: Config, census: np.ndarray | None = None, *, rng=None, years=None):
        rng = np.random.default_rng(rng)
        state = rng.bit_generator.state
        super().__init__(rng=rng)
        # mesa 3.3 seeds its stdlib ``random`` with a draw from rng; rewind, so the
        # engine's draws are the replicate's stream from its start on every mesa version
        rng.bit_generator.state = state
        self.config = config
        if years is None and config.environment is not None:
            years = _own_years(config, rng)
        self.years = years
        self.life = LifeCycle.from_config(config)
        start = initial_census(config, self.life) if census is None else np.asarray(census)
        self.season = 0  # counted here: mesa 3.3 has no model.time
        self.engine = ENGINES[config.experiment.engine](self, self.life, start)

    def step(self) -> None:
        """Advance one breeding season."""
        self.engine.step()
        self.season += 1

    def census(self) -> np.ndarray:
        """Counts by (allele, age index) at this season's census."""
        return self.engine.census()


def _own_years(config: Config, rng: np.random.Generator) -> SeasonYears:
    seq = rng.bit_generator.seed_seq
    if not isinstance(seq, np.random.SeedSequence):
        raise ValueError("years: a config with [environment] needs the replicate's year draws "
                         "(sim.year_draws.SeasonYears) when rng is not built from a SeedSequence")
    stream = np.random.SeedSequence(seq.entropy, spawn_key=(*seq.spawn_key, YEAR_STREAM))
    return SeasonYears(config.year_types(), [np.random.default_rng(stream)])
