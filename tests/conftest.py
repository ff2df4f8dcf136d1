"""Shared helpers for the test suite."""

import copy

import pytest

from sim.config import parse_config

# A resident iteroparous perennial (B_i = 2, P = 0.5, c = 0.5) against a semelparous mutant:
# the worked example of the invasion tests (thresholds 4 under recruitment, 3 under all-survival).
BASE = {
    "experiment": {"name": "test", "seed": 7, "replicates": 10, "max_steps": 50},
    "density": {"form": "beverton-holt", "acts_on": "recruitment", "capacity": 50},
    "allele": [
        {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
         "adult_survival": 0.5, "juvenile_survival": 0.5},
        {"name": "one-shot", "breeding": "semelparous", "fecundity": 4.5, "juvenile_survival": 0.5},
    ],
    "invasion": {"resident": "perennial", "mutant": "one-shot", "mutant_count": 1},
}


def make_config(**sections):
    """The base config with whole sections replaced or updated (dicts merge, lists replace)."""
    raw = copy.deepcopy(BASE)
    for key, value in sections.items():
        if value is None:
            raw.pop(key, None)
        elif isinstance(value, dict) and isinstance(raw.get(key), dict):
            raw[key] = {**raw[key], **value}
        else:
            raw[key] = value
    return parse_config(raw)


@pytest.fixture
def base_raw():
    return copy.deepcopy(BASE)


@pytest.fixture(autouse=True)
def _fresh_sim_logger():
    """Undo what an in-process `broodline run` did to the "sim" logger (a stderr handler
    and level INFO), so one test's log lines never land in another test's captured stderr."""
    import logging

    logger = logging.getLogger("sim")
    handlers, level = list(logger.handlers), logger.level
    yield
    logger.handlers[:] = handlers
    logger.setLevel(level)
