"""Config validation: every refusal names the key path and the reason, before anything runs."""

import copy
import re

import pytest

from sim.config import ConfigError, load_config, parse_config, sweep_points
from tests.conftest import BASE, make_config


def _with(path_value_pairs):
    raw = copy.deepcopy(BASE)
    for path, value in path_value_pairs:
        node = raw
        *head, last = path
        for p in head:
            node = node[p]
        if value is KeyError:
            del node[last]
        else:
            node[last] = value
    return raw


BAD = [
    # (changes, expected message fragment)
    ([(("allele", 0, "fecundty"), 2.0)], r"unknown key allele\[0\]\.fecundty; did you mean 'fecundity'"),
    ([(("experiment", "replicats"), 3)], r"unknown key experiment\.replicats"),
    ([(("allele", 0, "adult_survival"), 1.3)], r"allele\[0\]\.adult_survival must be in \[0, 1\]; got 1\.3"),
    ([(("allele", 1, "juvenile_survival"), -0.1)], r"allele\[1\]\.juvenile_survival must be in \[0, 1\]"),
    ([(("allele", 1, "fecundity"), -2.0)], r"allele\[1\]\.fecundity must be >= 0; got -2\.0"),
    ([(("allele", 1), {"name": "one-shot", "breeding": "table", "fecundity": [0, 3],
                       "adult_survival": [0.5], "juvenile_survival": 0.5})],
     r"allele\[1\]\.adult_survival: table lists must be of equal length"),
    ([(("invasion", "mutant"), "oneshot")], r"invasion\.mutant: no allele is named 'oneshot'"),
    ([(("invasion", "mutant"), "perennial")], r"invasion\.mutant: must differ"),
    ([(("density", "form"), "logistic")], r"density\.form must be 'none', 'beverton-holt'"),
    ([(("density", "capacity"), KeyError)], r"density\.capacity: required for form 'beverton-holt'"),
    ([(("density", "capacity"), -5)], r"density\.capacity must be > 0"),
    ([(("density", "acts_on"), "fecundity"), (("density", "counted"), "offspring")],
     r"density\.counted: 'offspring' is counted after breeding"),
    ([(("density", "form"), "ceiling"), (("density", "acts_on"), "fecundity")],
     r"density\.acts_on: a ceiling removes individuals after recruitment"),
    ([(("allele", 0, "adult_survival"), KeyError)], r"allele\[0\]\.adult_survival: required for an iteroparous"),
    ([(("experiment", "stop"), "never")], r"experiment\.stop must be 'fixation' or 'max-steps'"),
    ([(("experiment", "replicates"), 0)], r"experiment\.replicates must be >= 1; got 0"),
    ([(("offspring",), {"distribution": "negative-binomial"})], r"offspring\.dispersion: required"),
    ([(("mutation",), {"rate": 1.5})], r"mutation\.rate must be in \[0, 1\]"),
    ([(("mutation",), {"matrix": [[0.9, 0.1], [0.2, 0.7]]})], r"mutation\.matrix\[1\]: row must sum to 1"),
    ([(("mutation",), {"matrix": [[1.0]]})], r"mutation\.matrix: must be 2 x 2"),
    ([(("sweep",), {"allele.one-shot.fecundty": [1, 2]})],
     r"sweep\.'allele\.one-shot\.fecundty'.*did you mean 'fecundity'"),
    ([(("sweep",), {"allele.ghost.fecundity": [1, 2]})], r"no allele is named 'ghost'"),
    ([(("sweep",), {"density.capasity": [1, 2]})], r"\[density\] has no key 'capasity'"),
    ([(("sweep",), {"allele.one-shot.fecundity": [3.0, -1.0]})],
     r"sweep point 1 \(allele\.one-shot\.fecundity = -1\.0\): allele\[1\]\.fecundity must be >= 0"),
    ([(("invasion", "resident_count"), 0)], r"invasion\.resident_count must be .equilibrium. or a whole number"),
]


@pytest.mark.parametrize("changes, message", BAD)
def test_bad_configs_are_refused_with_path_and_reason(changes, message):
    with pytest.raises(ConfigError, match=message):
        parse_config(_with(changes))


def test_missing_config_file(tmp_path):
    with pytest.raises(ConfigError, match=r"config file '.*nope\.toml' not found"):
        load_config(tmp_path / "nope.toml")


def test_invalid_toml_is_reported(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[experiment\nname = 1\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(path)


def test_equilibrium_start_needs_density_dependence():
    with pytest.raises(ConfigError, match=r"invasion\.resident_count: 'equilibrium' needs density"):
        make_config(density={"form": "none", "capacity": None})


def test_demo_config_is_valid():
    config = load_config("configs/demo.toml")
    assert config.invasion.mutant == "one-shot"
    assert len(sweep_points(config)) >= 3


def test_every_example_config_is_valid():
    from pathlib import Path

    for path in Path("configs").glob("*.toml"):
        load_config(path)


def test_sweep_is_a_cartesian_product_in_key_order():
    config = make_config(sweep={"allele.one-shot.fecundity": [3.0, 4.0], "density.capacity": [20, 40, 80]})
    points = sweep_points(config)
    assert [p.index for p in points] == list(range(6))
    assert points[1].values == {"allele.one-shot.fecundity": 3.0, "density.capacity": 40}
    assert points[3].config.allele[1].fecundity == 4.0
    assert points[3].config.density.capacity == 20
    assert points[3].config.sweep is None


def test_semelparous_maturity_needs_pre_breeding_survival():
    raw = copy.deepcopy(BASE)
    raw["allele"][1]["maturity_age"] = 3
    with pytest.raises(ConfigError, match=r"allele\[1\]\.adult_survival: required for a semelparous"):
        parse_config(raw)
    raw["allele"][1]["adult_survival"] = 0.8
    schedule = parse_config(raw).schedules()[1]
    assert schedule.fecundity.tolist() == [0, 0, 4.5]
    assert schedule.survival.tolist() == [0.8, 0.8, 0.0]


ENVIRONMENT = {"switching": "iid", "year": [{"name": "wet", "probability": 0.5, "juvenile_survival": 1.2},
                                           {"name": "dry", "probability": 0.5, "juvenile_survival": 0.8}]}

MISLEADING_ONCE = [
    # an allele's name is not a key it lacks: no "did you mean 'name'?"
    ([(("sweep",), {"allele.one-shot.name": ["a", "b"]})],
     r"^sweep\.'allele\.one-shot\.name': an allele's name cannot be swept \(sweep paths and \[invasion\] "
     r"refer to alleles by name\)$"),
    ([(("environment",), ENVIRONMENT), (("sweep",), {"environment.year.wet.name": ["a"]})],
     r"^sweep\.'environment\.year\.wet\.name': a year type's name cannot be swept"),
    # an unknown key of a year type: the year's keys, not the environment's
    ([(("environment",), ENVIRONMENT), (("environment", "year", 0, "probabilty"), 0.5)],
     r"^unknown key environment\.year\[0\]\.probabilty; did you mean 'probability'\?$"),
    ([(("environment",), ENVIRONMENT), (("environment", "year", 1, "zzz"), 1.0)],
     r"^unknown key environment\.year\[1\]\.zzz \(known keys: name, probability, fecundity, "
     r"adult_survival, juvenile_survival\)$"),
    # the environment's own check words its keys relative to it, once prefixed
    ([(("environment",), {"switching": "markov", "transitions": [[1.0, 0.0], [0.0, 1.0]],
                          "year": ENVIRONMENT["year"]}),
      (("environment", "year", 0, "probability"), KeyError), (("environment", "year", 1, "probability"), KeyError)],
     r"^environment\.transitions: the chain has no unique stationary law"),
    # `[allele.tall]` where `[[allele]]` was meant: TOML reads one table, not a list of them
    ([(("allele",), {"tall": {"breeding": "iteroparous", "fecundity": 2.0}})],
     r"^allele must be a list of tables, each begun by a line \[\[allele\]\]; got one table "
     r"\[allele\.tall\] holding"),
    # a single value where the sweep wants the list of them
    ([(("sweep",), {"density.capacity": 50})],
     r"^sweep\.'density\.capacity' must be a list of the values to sweep, e\.g\. \[50\]; got 50$"),
    ([(("environment",), {"switching": "iid", "year": {"wet": {"probability": 1.0}}})],
     r"^environment\.year must be a list of tables, each begun by a line \[\[environment\.year\]\]; "
     r"got one table \[environment\.year\.wet\]"),
]


@pytest.mark.parametrize("changes, message", MISLEADING_ONCE)
def test_messages_that_once_misled(changes, message):
    with pytest.raises(ConfigError) as err:
        parse_config(_with(copy.deepcopy(changes)))  # (changes share ENVIRONMENT)
    assert len(err.value.problems) == 1
    assert re.match(message, err.value.problems[0]), err.value.problems[0]


def test_a_missing_list_of_tables_says_how_it_is_written():
    raw = {key: value for key, value in copy.deepcopy(BASE).items() if key not in ("allele", "invasion", "sweep")}
    with pytest.raises(ConfigError) as err:
        parse_config(raw)
    assert err.value.problems == ["allele is required: one or more tables, each begun by a line [[allele]]"]
